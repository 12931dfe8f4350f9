#!/bin/sh
# Runs every benchmark workload at a tiny size (seconds). Exits non-zero only when the
# harness fails to build or crashes; a slow figure never fails it.
#   bench/smoke.sh [PROFILE]   (PROFILE defaults to dev; the lead's CI may pass release)
set -eu
root=$(cd "$(dirname "$0")/.." && pwd)
profile=${1:-dev}
cd "$root"
cargo build --quiet --profile "$profile" -p engine --bins
dir=debug
[ "$profile" = dev ] || dir=$profile
out=$(mktemp -d)
trap 'rm -rf "$out"' EXIT
"target/$dir/retort-bench" --smoke --json "$out/bench.json" --work "$out/work"
test -s "$out/bench.json"

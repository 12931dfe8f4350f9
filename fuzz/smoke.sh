#!/usr/bin/env bash
# Fuzz smoke run: every target for SECONDS_EACH seconds (default 10; six targets,
# about 60 s in all) with afl.rs on the stable toolchain. Exits 1 if any crash is
# found, printing where the crashing inputs are. Longer run: SECONDS_EACH=600 fuzz/smoke.sh
# Needs `cargo install cargo-afl` (the AFL++ runtime is built on first use).
set -euo pipefail
cd "$(dirname "$0")"
SECONDS_EACH="${SECONDS_EACH:-10}"
if ! command -v cargo-afl >/dev/null; then
  echo "fuzz smoke SKIPPED: cargo-afl is not installed (cargo install cargo-afl)"
  exit 0
fi
if ! cargo afl build --release --quiet; then
  echo "fuzz smoke: the fuzz targets did not build (exit 3, not a crash)"
  exit 3
fi
export AFL_SKIP_CPUFREQ=1 AFL_NO_UI=1 AFL_I_DONT_CARE_ABOUT_MISSING_CRASHES=1 AFL_QUIET=1
failed=0
mkdir -p out
for t in recipe delimited jcamp image_png image_tiff image_text; do
  rm -rf "out/$t"
  cargo afl fuzz -V "$SECONDS_EACH" -i "seeds/$t" -o "out/$t" "target/release/$t" >/dev/null 2>&1 || true
  stats="out/$t/default/fuzzer_stats"
  execs=$(awk -F: '/^execs_done/ {gsub(/ /,"",$2); print $2}' "$stats" 2>/dev/null || echo "?")
  crashes=$( (find "out/$t/default/crashes" -type f -name 'id:*' 2>/dev/null || true) | wc -l)
  echo "fuzz $t: $execs executions, $crashes crashes"
  if [ "$crashes" -gt 0 ]; then
    failed=1
    echo "  crashing inputs: fuzz/out/$t/default/crashes/ (replay: target/release/$t < FILE)"
  fi
done
exit $failed

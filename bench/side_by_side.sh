#!/bin/sh
# Side-by-side benchmark of retort against scipy on the same generated files.
#   bench/side_by_side.sh [--count N] [--rounds R] [--json FILE]
# Creates bench/.venv (git-ignored) with pinned numpy/scipy from PyPI, builds the
# release harness, then runs bench/side_by_side.py (interleaved rounds, ratio per workload).
set -eu
here=$(cd "$(dirname "$0")" && pwd)
root=$(dirname "$here")
venv="$here/.venv"
if [ ! -x "$venv/bin/python" ]; then
    python3 -m venv "$venv"
    "$venv/bin/pip" install --quiet "numpy==2.4.6" "scipy==1.17.0"
fi
(cd "$root" && cargo build --release --quiet -p engine --bins)
# One thread for BLAS/LAPACK, so scipy's figures are per core like retort's.
export OMP_NUM_THREADS=1 OPENBLAS_NUM_THREADS=1 MKL_NUM_THREADS=1
exec "$venv/bin/python" "$here/side_by_side.py" --rust-bench "$root/target/release/retort-bench" "$@"

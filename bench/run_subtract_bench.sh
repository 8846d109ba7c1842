#!/usr/bin/env bash
# Builds gloam (release) and runs the subtraction benchmark against
# numpy/scipy. Not part of the test suite. Usage: bench/run_subtract_bench.sh [--small]
set -euo pipefail
cd "$(dirname "$0")/.."
[ -f build-bench/build.ninja ] || meson setup build-bench -Dbuildtype=release -Dtests=false >/dev/null
ninja -C build-bench -j2 >/dev/null
# numpy under the same thread count as gloam (2); OPENBLAS_CORETYPE and
# OPENBLAS_L2_SIZE are unset here, and bench/blas_kernels.py then gives numpy
# the kernels gloam picks (src/cli/main.c), so both sides run the same ones
env -u OPENBLAS_CORETYPE -u OPENBLAS_L2_SIZE OPENBLAS_NUM_THREADS=2 OMP_NUM_THREADS=2 \
  /usr/bin/python3 bench/subtract_bench.py build-bench/src/cli/gloam --threads 2 "$@"

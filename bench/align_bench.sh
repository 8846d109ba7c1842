#!/bin/sh
# Aligning a jittered cube by registration: gloam vs numpy/scipy/scikit-image.
# usage: bench/align_bench.sh [BUILD_DIR] [--frames N] [--size PX] [--threads T]
set -e
here=$(dirname "$0")
build=${1:-build}
[ $# -gt 0 ] && shift
exec /usr/bin/python3 "$here/align_bench.py" --gloam "$build/src/cli/gloam" "$@"

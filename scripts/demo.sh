#!/usr/bin/env bash
# The demo reduction of the simulated sequence in demo-frames/ (see its
# README): every pipeline stage that exists, in order, products in OUT.
#   scripts/demo.sh GLOAM_BINARY OUT_FOLDER
set -euo pipefail
gloam=${1:-build/src/cli/gloam}
out=${2:-demo-run}
frames=demo-frames
mkdir -p "$out"
echo "== the sequence"
"$gloam" inspect "$frames/cube.fits" --angles "$frames/angles.txt"

#!/usr/bin/env bash
# Contrast-curve benchmark: one `gloam subtract` (pca, modes 5,10,20,50) and
# one `gloam limits` with the same options on the same cube; prints both wall
# and CPU (user + system) times, their ratios and the load average (issue 13
# target: limits <= 3x subtract). Not part of the test suite.
#
# Usage: bench/limits_bench.sh [FRAMES [SIZE [THREADS [PAIRS]]]]   (default 400 200 2 1)
# PAIRS > 1 repeats the pair (subtract, then limits) and adds the medians:
# the machine is shared, single pairs spread by 10-20%.
#
# The cube is made with numpy (Debian's /usr/bin/python3): a smooth stellar
# halo, a quasi-static speckle pattern that turns with the pupil (fixed in the
# detector frame while the sky rotates), and white noise; a Gaussian off-axis
# PSF of FWHM 4 px. The running time of both commands does not depend on the
# image content, only on frames, size, mode counts and threads.
set -euo pipefail
cd "$(dirname "$0")/.."
FRAMES=${1:-400}
SIZE=${2:-200}
THREADS=${3:-2}
PAIRS=${4:-1}
[ -f build-bench/build.ninja ] || meson setup build-bench -Dbuildtype=release -Dtests=false >/dev/null
ninja -C build-bench -j2 >/dev/null
GLOAM=build-bench/src/cli/gloam
DIR=$(mktemp -d)
trap 'rm -rf "$DIR"' EXIT

/usr/bin/python3 - "$DIR" "$FRAMES" "$SIZE" <<'PY'
import sys
import numpy as np
from astropy.io import fits
d, nf, n = sys.argv[1], int(sys.argv[2]), int(sys.argv[3])
rng = np.random.default_rng(1)
y, x = np.mgrid[0:n, 0:n] - n // 2
r = np.hypot(x, y)
halo = 1e3 / (1 + (r / 3.0) ** 3)
speckles = np.fft.ifft2(np.fft.fft2(rng.normal(0, 1, (n, n))) *
                        np.exp(-np.hypot(*np.meshgrid(np.fft.fftfreq(n), np.fft.fftfreq(n))) ** 2 / 0.02)).real
speckles *= 30 * halo / halo.max() / speckles.std()
cube = np.empty((nf, n, n), np.float32)
for i in range(nf):
    cube[i] = halo + speckles * (1 + 0.05 * np.sin(i / 40)) + rng.normal(0, 1, (n, n))
fits.PrimaryHDU(cube).writeto(f"{d}/cube.fits")
np.savetxt(f"{d}/angles.txt", np.linspace(-40, 40, nf), fmt="%.6f")
s = 4 / (2 * np.sqrt(2 * np.log(2)))
yy, xx = np.mgrid[0:25, 0:25] - 12
fits.PrimaryHDU((1e5 * np.exp(-(xx**2 + yy**2) / (2 * s * s))).astype(np.float32)).writeto(f"{d}/psf.fits")
PY

OPTS=(--angles "$DIR/angles.txt" --fwhm 4 --method klip-frame --modes 5,10,20,50 --mask-radius 6
      --threads "$THREADS" --quiet)
# wall, user and system seconds of one command (bash's `time`)
TIMEFORMAT='%R %U %S'
timed() { { time "$@" 2>>"$DIR/stderr"; } 2>&1 | tail -1; }
load0=$(cut -d' ' -f1-3 /proc/loadavg)
for pair in $(seq "$PAIRS"); do
  read -r sw su ss < <(timed "$GLOAM" subtract "$DIR/cube.fits" "${OPTS[@]}" --out "$DIR/sub.fits" --overwrite)
  read -r lw lu ls < <(timed "$GLOAM" limits "$DIR/cube.fits" "${OPTS[@]}" --psf "$DIR/psf.fits" --out "$DIR/lim" --overwrite)
  echo "$sw $su $ss $lw $lu $ls" >>"$DIR/pairs"
done
load1=$(cut -d' ' -f1-3 /proc/loadavg)
[ -s "$DIR/stderr" ] && { grep -v "warning" "$DIR/stderr" >&2 || true; }
nf=$(($(wc -l <"$DIR/lim.fakes.csv") - 1))
awk -v f="$FRAMES" -v s="$SIZE" -v t="$THREADS" -v k="$nf" -v l0="$load0" -v l1="$load1" '
function median(a, n,   i, j, x) {
    for (i = 2; i <= n; i++) { x = a[i]; for (j = i - 1; j >= 1 && a[j] > x; j--) a[j + 1] = a[j]; a[j + 1] = x }
    return n % 2 ? a[(n + 1) / 2] : (a[n / 2] + a[n / 2 + 1]) / 2 }
{ n++; sw[n] = $1; sc[n] = $2 + $3; lw[n] = $4; lc[n] = $5 + $6; rw[n] = $4 / $1; rc[n] = ($5 + $6) / ($2 + $3)
  printf "pair %d: subtract %.2f s wall %.2f s CPU, limits %.2f s wall %.2f s CPU, ratio %.2f wall %.2f CPU\n", n, $1, sc[n], $4, lc[n], rw[n], rc[n] }
END {
    printf "cube %d frames of %dx%d, pca modes 5,10,20,50, --threads %d\n", f, s, s, t
    printf "load average before %s, after %s\n", l0, l1
    printf "gloam subtract: %7.2f s wall, %7.2f s CPU (median of %d)\n", median(sw, n), median(sc, n), n
    printf "gloam limits:   %7.2f s wall, %7.2f s CPU  (%d fakes)\n", median(lw, n), median(lc, n), k
    printf "ratio limits / subtract: %.2f wall, %.2f CPU, medians of the pairs (target <= 3)\n", median(rw, n), median(rc, n) }' "$DIR/pairs"

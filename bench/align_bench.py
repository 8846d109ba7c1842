#!/usr/bin/python3
"""Side-by-side timing of aligning a jittered cube by registration.

gloam:  gloam align CUBE --out OUT --method reference (process wall time,
        reading and writing FITS included)
python: the numpy/scipy/scikit-image way: median reference frame,
        skimage.registration.phase_cross_correlation(upsample_factor=100,
        normalization=None: plain cross-correlation, the published algorithm)
        per frame, then scipy.ndimage.shift (cubic spline) per frame
        (FITS reading and writing included).
Both are checked against the injected jitter (rms error, px).

usage: align_bench.py [--frames N] [--size PX] [--threads T] [--gloam PATH]
"""
import argparse
import os
import subprocess
import tempfile
import sys
import time

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import blas_kernels  # noqa: E402

blas_kernels.same_kernels_as_gloam()

import numpy as np  # noqa: E402
from astropy.io import fits  # noqa: E402
from scipy import ndimage  # noqa: E402
from skimage.registration import phase_cross_correlation  # noqa: E402


def make_cube(nf, n, seed=1):
    rng = np.random.default_rng(seed)
    y, x = np.mgrid[0:n, 0:n].astype(np.float32)
    tx = n // 2 + rng.uniform(-3, 3, nf)
    ty = n // 2 + rng.uniform(-3, 3, nf)
    cube = np.empty((nf, n, n), np.float32)
    for f in range(nf):
        r2 = (x - tx[f]) ** 2 + (y - ty[f]) ** 2
        cube[f] = 1000 * np.exp(-0.5 * r2 / 2.0**2) + 50 * np.exp(-np.sqrt(r2) / 15)
        cube[f] += rng.normal(0, 2.0, (n, n)).astype(np.float32)
    return cube, tx, ty


def python_way(path, out):
    cube = fits.getdata(path).astype(np.float64)
    ref = np.median(cube, axis=0)
    shifts = np.empty((len(cube), 2))
    aligned = np.empty_like(cube)
    for f, img in enumerate(cube):
        s, _, _ = phase_cross_correlation(ref, img, upsample_factor=100, normalization=None)
        shifts[f] = s
        aligned[f] = ndimage.shift(img, s)
    fits.PrimaryHDU(aligned.astype(np.float32)).writeto(out, overwrite=True)
    return shifts


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--frames", type=int, default=1000)
    ap.add_argument("--size", type=int, default=256)
    ap.add_argument("--threads", type=int, default=1)
    ap.add_argument("--gloam", default=os.environ.get("GLOAM", "build/src/cli/gloam"))
    a = ap.parse_args()

    with tempfile.TemporaryDirectory() as d:
        cube, tx, ty = make_cube(a.frames, a.size)
        src = os.path.join(d, "cube.fits")
        fits.PrimaryHDU(cube).writeto(src)
        t0 = time.perf_counter()
        subprocess.run([a.gloam, "align", src, "--out", os.path.join(d, "g.fits"), "--method",
                        "reference", "--table", os.path.join(d, "g.csv"), "--threads",
                        str(a.threads), "--quiet"], check=True)
        tg = time.perf_counter() - t0
        t = np.genfromtxt(os.path.join(d, "g.csv"), delimiter=",", names=True, dtype=None,
                          encoding=None)
        # registration is relative: compare after removing the mean offset
        eg = np.sqrt(np.mean(((t["x"] - tx) - np.mean(t["x"] - tx)) ** 2 +
                             ((t["y"] - ty) - np.mean(t["y"] - ty)) ** 2) / 2)
        t0 = time.perf_counter()
        s = python_way(src, os.path.join(d, "p.fits"))
        tp = time.perf_counter() - t0
        px, py = -s[:, 1], -s[:, 0]  # star position relative to the reference
        ep = np.sqrt(np.mean(((px - tx) - np.mean(px - tx)) ** 2 +
                             ((py - ty) - np.mean(py - ty)) ** 2) / 2)
    print(f"cube {a.frames} frames of {a.size}x{a.size}, registration with 1/100 px upsampling")
    print(f"  gloam align ({a.threads} thread{'s' if a.threads > 1 else ''}): {tg:8.2f} s"
          f"   rms error {eg:.4f} px")
    print(f"  numpy/scipy/scikit-image  : {tp:8.2f} s   rms error {ep:.4f} px")
    print(f"  ratio (python / gloam)    : {tp / tg:8.2f}")


if __name__ == "__main__":
    main()

"""Benchmark of gloam subtract against the numpy/scipy way (not a test).

Cases (sizes from issue 4; --small shrinks them for a quick look):
  pca      full-frame PCA, 400 frames of 200 x 200, modes 5,10,20,50, derotate
           and median-combine. numpy/scipy: float32 SVD of the same matrix,
           projections with matmul, scipy.ndimage.rotate (order 3) per frame,
           numpy.median.
  annular  annular KLIP, 100 frames of 200 x 200, ring 1 FWHM, gap 0.75 FWHM,
           10 modes; numpy loop over rings and targets (SVD of each library),
           then the same derotation and median.
Reports wall times and ratios, gloam's peak memory (/usr/bin/time -v)
against 2 x the cube's float32 size + 100 MB, and the rate gloam's linear
algebra reaches (from its --verbose timing) as a fraction of the machine's
SGEMM rate measured with numpy float32 matmul (same thread count).

usage: /usr/bin/python3 bench/subtract_bench.py GLOAM [--small] [--threads N]
"""
import argparse
import os
import re
import subprocess
import sys
import tempfile
import time

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import blas_kernels  # noqa: E402

blas_kernels.same_kernels_as_gloam()

import numpy as np  # noqa: E402
from astropy.io import fits  # noqa: E402
from scipy import ndimage  # noqa: E402

FWHM = 4.0


def make_cube(nf, n, seed=0):
    rng = np.random.default_rng(seed)
    y, x = np.mgrid[0:n, 0:n].astype(np.float32)
    c = n // 2
    r = np.hypot(x - c, y - c)
    sig = FWHM / 2.3548

    def field(count):
        f = np.zeros((n, n), np.float32)
        for _ in range(count):
            px, py = rng.uniform(-n / 2.3, n / 2.3, 2)
            f += rng.uniform(0.5, 3) * np.exp(-((x - c - px) ** 2 + (y - c - py) ** 2) / (2 * sig**2))
        return f

    static = field(300) + 100 * np.exp(-r / 8)
    qs = [field(80) for _ in range(6)]
    angles = np.linspace(-40, 40, nf)
    cube = np.empty((nf, n, n), np.float32)
    for i, t in enumerate(angles):
        fr = static.copy()
        for k, f in enumerate(qs):
            fr += 0.5 * 0.7**k * np.sin(2 * np.pi * (k + 1) * i / nf + k) * f
        a = np.deg2rad(90 + 30 + t)
        fr += 2 * np.exp(-((x - c - 30 * np.cos(a)) ** 2 + (y - c - 30 * np.sin(a)) ** 2) / (2 * sig**2))
        cube[i] = fr + 0.1 * rng.standard_normal((n, n)).astype(np.float32)
    return cube, angles


def region(n, r_in, r_out):
    y, x = np.mgrid[0:n, 0:n]
    r = np.hypot(x - n // 2, y - n // 2)
    return (r >= r_in) & (r < r_out)


def derotate_median(frames, angles):
    out = np.empty_like(frames)
    for i, (f, t) in enumerate(zip(frames, angles)):
        out[i] = ndimage.rotate(np.nan_to_num(f), -t, reshape=False, order=3)
    return np.median(out, axis=0)


def numpy_pca(cube, angles, modes, r_in):
    nf, n, _ = cube.shape
    m = region(n, r_in, n // 2)
    X = cube[:, m]
    X = X - X.mean(axis=1, keepdims=True)
    _, _, Vt = np.linalg.svd(X, full_matrices=False)
    planes = []
    for k in modes:
        Z = Vt[:k]
        R = X - (X @ Z.T) @ Z
        frames = np.zeros_like(cube)
        frames[:, m] = R
        planes.append(derotate_median(frames, angles))
    return np.array(planes)


def numpy_annular(cube, angles, r_in, ring, gap, k):
    nf, n, _ = cube.shape
    frames = np.zeros_like(cube)
    width = ring * FWHM
    nring = int(np.ceil((n // 2 - r_in) / width))
    for q in range(nring):
        a_in = r_in + q * width
        a_out = min(n // 2, a_in + width)
        rmid = 0.5 * (a_in + a_out)
        m = region(n, a_in, a_out)
        X = cube[:, m]
        X = X - X.mean(axis=1, keepdims=True)
        for t in range(nf):
            lib = np.nonzero(rmid * np.deg2rad(np.abs(angles - angles[t])) >= gap * FWHM)[0]
            _, _, Vt = np.linalg.svd(X[lib], full_matrices=False)
            Z = Vt[:k]
            frames[t][m] = X[t] - (Z @ X[t]) @ Z
    return derotate_median(frames, angles)


def sgemm_rate(threads):
    """Machine SGEMM rate, GFLOP/s, numpy float32 matmul (n = 2000)."""
    a = np.random.default_rng(1).standard_normal((2000, 2000)).astype(np.float32)
    a @ a
    best = 1e9
    for _ in range(3):
        t = time.perf_counter()
        a @ a
        best = min(best, time.perf_counter() - t)
    return 2 * 2000**3 / best / 1e9


def run_gloam(gloam, args, threads):
    cmd = ["/usr/bin/time", "-v", gloam, *map(str, args), "--threads", str(threads), "--verbose",
           "--overwrite"]
    t = time.perf_counter()
    r = subprocess.run(cmd, capture_output=True, text=True)
    wall = time.perf_counter() - t
    if r.returncode:
        sys.exit(r.stderr)
    rss = int(re.search(r"Maximum resident set size \(kbytes\): (\d+)", r.stderr).group(1)) / 1024
    la = re.search(r"linear algebra: ([\d.]+) s for ([\d.]+) GFLOP", r.stderr)
    return wall, rss, (float(la.group(1)), float(la.group(2))) if la else None


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("gloam")
    ap.add_argument("--small", action="store_true")
    ap.add_argument("--threads", type=int, default=2)
    ap.add_argument("--skip-numpy", action="store_true")
    o = ap.parse_args()
    n = 100 if o.small else 200
    nf_pca, nf_ann = (100, 40) if o.small else (400, 100)
    modes = [5, 10, 20, 50] if not o.small else [5, 10, 20]
    tmp = tempfile.mkdtemp(prefix="gloam-bench-")
    print(f"threads {o.threads}; numpy {np.__version__}; {os.cpu_count()} cpus")
    rate = sgemm_rate(o.threads)
    print(f"machine SGEMM (numpy float32 matmul 2000^3): {rate:.1f} GFLOP/s")

    for case in ("pca", "annular"):
        nf = nf_pca if case == "pca" else nf_ann
        cube, angles = make_cube(nf, n)
        path = os.path.join(tmp, f"{case}.fits")
        fits.PrimaryHDU(cube).writeto(path, overwrite=True)
        np.savetxt(os.path.join(tmp, f"{case}.txt"), angles)
        cube_mb = cube.nbytes / 2**20
        args = ["subtract", path, "--angles", os.path.join(tmp, f"{case}.txt"), "--fwhm", FWHM,
                "--out", os.path.join(tmp, f"{case}.out.fits"), "--mask-radius", 4]
        if case == "pca":
            args += ["--method", "klip-frame", "--modes", ",".join(map(str, modes))]
        else:
            args += ["--method", "klip-rings", "--modes", 10, "--ring", 1, "--gap", 0.75]
        wall, rss, la = run_gloam(o.gloam, args, o.threads)
        wall_c, _, _ = run_gloam(o.gloam, args + ["--interp", "cubic"], o.threads)
        print(f"\n[{case}] {nf} frames of {n}x{n} (cube {cube_mb:.0f} MB float32)")
        print(f"  gloam (fft rotation):   {wall:8.2f} s   peak RSS {rss:.0f} MB "
              f"(limit 2 x cube + 100 MB = {2 * cube_mb + 100:.0f} MB: "
              f"{'ok' if rss <= 2 * cube_mb + 100 else 'OVER'})")
        print(f"  gloam (cubic rotation): {wall_c:8.2f} s")
        if la:
            print(f"  gloam linear algebra: {la[0]:.3f} s for {la[1]:.2f} GFLOP = "
                  f"{la[1] / la[0]:.1f} GFLOP/s, {100 * la[1] / la[0] / rate:.0f}% of SGEMM")
        if o.skip_numpy:
            continue
        t = time.perf_counter()
        if case == "pca":
            numpy_pca(cube, angles, modes, 4)
        else:
            numpy_annular(cube, angles, 4, 1.0, 0.75, 10)
        tn = time.perf_counter() - t
        print(f"  numpy/scipy:            {tn:8.2f} s   ratio {tn / wall:.1f}x (fft), "
              f"{tn / wall_c:.1f}x (cubic)")


if __name__ == "__main__":
    main()

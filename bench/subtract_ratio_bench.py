"""Repeated side-by-side timing of gloam subtract against the numpy way (not a
test), for a machine shared with other jobs: W1 (klip-frame, 400 frames of
200 x 200, modes 5,10,20,50) and W2 (klip-rings, 100 frames of 200 x 200,
ring 1 FWHM, gap 0.75 FWHM, 10 modes, inner radius 8 px), the cases and the
numpy reference of bench/subtract_bench.py (method names of the first release,
which every build accepts). Each repeat runs numpy, then every
gloam binary given (e.g. the build before a change and after it), one after
the other on the same data; it reports the median wall time and the median
CPU time (user + system, of the child for gloam, of this process for numpy)
of each, their ratios, and the load average before and after.

CPU time is the steadier figure when other jobs take the cores: it counts only
the work of the process (though a spinning OpenMP or OpenBLAS thread also
counts, so run with --threads 1 for the CPU ratio).

usage: /usr/bin/python3 bench/subtract_ratio_bench.py GLOAM [GLOAM_BEFORE ...]
           [--threads N] [--repeat R] [--case w1|w2|both]
"""
import argparse
import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import blas_kernels  # noqa: E402

blas_kernels.same_kernels_as_gloam()

import numpy as np  # noqa: E402
from astropy.io import fits  # noqa: E402

import subtract_bench as sb  # noqa: E402


def cpu_self():
    r = resource.getrusage(resource.RUSAGE_SELF)
    return r.ru_utime + r.ru_stime


def cpu_children():
    r = resource.getrusage(resource.RUSAGE_CHILDREN)
    return r.ru_utime + r.ru_stime


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("gloam", nargs="+")
    ap.add_argument("--threads", type=int, default=2)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--case", default="both")
    o = ap.parse_args()
    tmp = tempfile.mkdtemp(prefix="gloam-ratio-")
    cases = {"w1": (400, ["--method", "pca", "--modes", "5,10,20,50", "--mask-radius", 4]),
             "w2": (100, ["--method", "annular", "--modes", 10, "--ring", 1, "--gap", 0.75,
                          "--mask-radius", 8])}
    sel = ["w1", "w2"] if o.case == "both" else [o.case]
    print(f"threads {o.threads}, {o.repeat} repeats; load before {os.getloadavg()}")
    for case in sel:
        nf, opts = cases[case]
        cube, angles = sb.make_cube(nf, 200)
        path = os.path.join(tmp, f"{case}.fits")
        fits.PrimaryHDU(cube).writeto(path, overwrite=True)
        np.savetxt(os.path.join(tmp, f"{case}.txt"), angles)
        wall = {k: [] for k in ["numpy", *o.gloam]}
        cpu = {k: [] for k in wall}
        for _ in range(o.repeat):
            t, c = time.perf_counter(), cpu_self()
            if case == "w1":
                sb.numpy_pca(cube, angles, [5, 10, 20, 50], 4)
            else:
                sb.numpy_annular(cube, angles, 8, 1.0, 0.75, 10)
            wall["numpy"].append(time.perf_counter() - t)
            cpu["numpy"].append(cpu_self() - c)
            for g in o.gloam:
                t, c = time.perf_counter(), cpu_children()
                r = subprocess.run([str(a) for a in [g, "subtract", path, "--angles",
                                    os.path.join(tmp, f"{case}.txt"), "--fwhm", sb.FWHM, "--out",
                                    os.path.join(tmp, f"{case}.out.fits"), *map(str, opts),
                                    "--threads", o.threads, "--overwrite", "--quiet"]],
                                   capture_output=True, text=True)
                if r.returncode:
                    sys.exit(r.stderr)
                wall[g].append(time.perf_counter() - t)
                cpu[g].append(cpu_children() - c)
        mw, mc = statistics.median(wall["numpy"]), statistics.median(cpu["numpy"])
        print(f"\n[{case}] {nf} frames of 200x200")
        for k in wall:
            w, c = statistics.median(wall[k]), statistics.median(cpu[k])
            print(f"  {k:40s} wall {w:7.2f} s (ratio {mw / w:5.1f}x)  cpu {c:7.2f} s "
                  f"(ratio {mc / c:5.1f}x)   runs: " + " ".join(f"{x:.2f}" for x in wall[k]))
    print(f"\nload after {os.getloadavg()}")


if __name__ == "__main__":
    main()

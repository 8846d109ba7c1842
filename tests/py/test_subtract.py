"""gloam subtract against numpy, scipy and astropy.

References, each named beside its check:
- KLIP/PCA residuals: Soummer, Pueyo & Larkin 2012 (ApJL 755, L28) eqs. 4-9,
  computed here with numpy.linalg.svd and numpy.linalg.eigh on the same
  frames x pixels matrix; annular KLIP by a plain numpy loop over rings and
  targets with the library rule of docs/subtract.md (Lafreniere et al. 2007,
  ApJ 660, 770: frames that rotated by at least the gap).
- Orientation: docs/conventions.md (a source at sky PA pa, separation s sits
  in raw frame i at angle 90 + pa + theta_i from +x; in a north-up product
  pa = atan2(-(x - cx), y - cy)); an analytic Gaussian placed that way and
  derotated must equal the analytic north-up Gaussian, and keep its flux.
- WCS of the north-up product: astropy.wcs pixel -> sky on input and output.
- Planted companions are recovered where conventions.md puts them, for every
  method; RDI beats ADI where the field rotation is below one FWHM (the
  self-subtraction argument of Marois et al. 2006, ApJ 641, 556).
Test cubes are built here: static speckles (Gaussian blobs and a halo) that
evolve slowly, plus a companion moving with the angles.
"""
import os
import subprocess
import zlib

import numpy as np
import pytest
from astropy.io import fits
from astropy.wcs import WCS

GLOAM = os.environ["GLOAM"]
FWHM = 4.0
SIGMA = FWHM / (2 * np.sqrt(2 * np.log(2)))


def run(*args):
    return subprocess.run([GLOAM, *map(str, args)], capture_output=True, text=True)


def gaussian(n, x0, y0, sigma=SIGMA):
    y, x = np.mgrid[0:n, 0:n].astype(float)
    return np.exp(-0.5 * ((x - x0) ** 2 + (y - y0) ** 2) / sigma**2)


def raw_position(n, sep, pa, theta, north=0.0):
    """conventions.md: raw-frame angle 90 + pa + theta (+ north offset)."""
    a = np.deg2rad(90 + pa + theta + north)
    c = n // 2
    return c + sep * np.cos(a), c + sep * np.sin(a)


def north_up_position(n, sep, pa):
    """conventions.md: pa = atan2(-(x - cx), y - cy)."""
    c = n // 2
    return c - sep * np.sin(np.deg2rad(pa)), c + sep * np.cos(np.deg2rad(pa))


def speckles(n, rng, count=70, scale=1.0, halo=40.0):
    pat = np.zeros((n, n))
    for _ in range(count):
        px, py = rng.uniform(-n / 2.4, n / 2.4, 2) * scale
        pat += rng.uniform(0.5, 3) * gaussian(n, n // 2 + px, n // 2 + py)
    y, x = np.mgrid[0:n, 0:n]
    r = np.hypot(x - n // 2, y - n // 2)
    return pat + halo * np.exp(-r / 5.0)


def make_sequence(n=64, nf=30, rot=60.0, sep=14.0, pa=30.0, amp=2.0, seed=1, noise=0.05,
                  pattern=None):
    """Static speckles, 8 quasi-static speckle fields whose strengths evolve
    smoothly with distinct amplitudes (simulation.md), white noise, and a
    companion of peak `amp` moving with the angles."""
    rng = np.random.default_rng(seed)
    pat = speckles(n, rng) if pattern is None else pattern
    qs_rng = np.random.default_rng(1234)  # the same quasi-static fields for refs
    fields = [speckles(n, qs_rng, count=25, halo=4.0) for _ in range(8)]
    angles = np.linspace(-rot / 2, rot / 2, nf)
    cube = np.empty((nf, n, n), np.float32)
    for i, t in enumerate(angles):
        xc, yc = raw_position(n, sep, pa, t)
        frame = pat + amp * gaussian(n, xc, yc) + noise * rng.standard_normal((n, n))
        for k, f in enumerate(fields):
            frame += 0.6 * 0.75**k * np.sin(2 * np.pi * (k + 1) * i / (1.7 * nf) + seed + k) * f
        cube[i] = frame
    return cube, angles, pat


def write_inputs(tmp, cube, angles, name="cube"):
    fits.PrimaryHDU(cube).writeto(tmp / f"{name}.fits", overwrite=True)
    (tmp / f"{name}.angles.txt").write_text("\n".join(f"{a:.8f}" for a in angles) + "\n")
    return tmp / f"{name}.fits", tmp / f"{name}.angles.txt"


def region_mask(n, r_in, r_out):
    y, x = np.mgrid[0:n, 0:n]
    r = np.hypot(x - n // 2, y - n // 2)
    return (r >= r_in) & (r < r_out)


def klip_numpy(X, T, kmax_list, use_eigh=False):
    """Residuals of targets T projected on the KL basis of rows X (both
    already centred): Soummer et al. 2012 eqs. 5-9."""
    if use_eigh:
        lam, V = np.linalg.eigh(X @ X.T)
        order = np.argsort(lam)[::-1]
        lam, V = lam[order], V[:, order]
        Z = (V / np.sqrt(lam)).T @ X
    else:
        _, _, Z = np.linalg.svd(X, full_matrices=False)
    return [T - (T @ Z[:k].T) @ Z[:k] for k in kmax_list]


def rel_diff(a, b):
    return np.linalg.norm(a - b) / np.linalg.norm(b)


# ---- numerical agreement with numpy ----------------------------------------

@pytest.mark.parametrize("centre,route", [("frame", "eigh"), ("temporal", "svd"),
                                          ("frame", "svd-small-region")])
def test_pca_residuals_match_numpy(tmp_path, centre, route):
    """Soummer et al. 2012 projection, numpy.linalg.svd / eigh on the same matrix."""
    n = 48
    cube, angles, _ = make_sequence(n=n, nf=24 if route != "svd-small-region" else 120, sep=10)
    c, a = write_inputs(tmp_path, cube, angles)
    modes = [3, 7]
    r_in, r_out = 3.0, (24.0 if route != "svd-small-region" else 6.0)
    r = run("subtract", c, "--angles", a, "--fwhm", FWHM, "--out", tmp_path / "o.fits",
            "--method", "klip-frame", "--modes", "7,3", "--mask-radius", r_in, "--outer-radius", r_out, "--remove-mean",
            {"frame": "each-frame", "temporal": "each-pixel"}[centre],
            "--raw-residuals", tmp_path / "raw.fits")
    assert r.returncode == 0, r.stderr
    raw = fits.getdata(tmp_path / "raw.fits").astype(np.float64)  # (frame, mode, y, x)
    assert raw.shape == (cube.shape[0], 2, n, n)
    m = region_mask(n, r_in, r_out)
    X = cube[:, m].astype(np.float64)
    X = X - (X.mean(axis=1, keepdims=True) if centre == "frame" else X.mean(axis=0))
    if route == "svd-small-region":
        assert X.shape[0] > X.shape[1]  # frames > pixels: gloam takes its SVD route
    want = klip_numpy(X, X, [7, 3], use_eigh=(route == "eigh"))
    for q in range(2):
        got = raw[:, q][:, m]
        assert rel_diff(got, want[q]) < 1e-4, (q, rel_diff(got, want[q]))
    assert np.all(np.isnan(raw[:, 0][:, ~m]))


def test_pca_residual_is_nan_where_the_input_is(tmp_path):
    """A NaN input pixel inside the region stays NaN in that frame's raw
    residual (docs/subtract.md: missing data are carried as NaN), and the
    other frames' residuals there stay finite."""
    n = 48
    cube, angles, _ = make_sequence(n=n, nf=24, sep=10)
    cube[5, 30, 17] = np.nan
    c, a = write_inputs(tmp_path, cube, angles)
    r = run("subtract", c, "--angles", a, "--fwhm", FWHM, "--out", tmp_path / "o.fits",
            "--method", "klip-frame", "--modes", "3,7", "--mask-radius", 3, "--outer-radius", 24,
            "--raw-residuals", tmp_path / "raw.fits")
    assert r.returncode == 0, r.stderr
    raw = fits.getdata(tmp_path / "raw.fits")  # (frame, mode, y, x)
    assert np.all(np.isnan(raw[5, :, 30, 17]))
    assert np.all(np.isfinite(np.delete(raw[:, :, 30, 17], 5, axis=0)))
    assert np.isfinite(raw[5, :, 30, 18]).all()


def cpu_flags():
    with open("/proc/cpuinfo") as f:
        for line in f:
            if line.startswith("flags"):
                return set(line.split(":", 1)[1].split())
    return set()


@pytest.mark.parametrize("coretype", [None, "Prescott", "Haswell"])
def test_blas_kernels_named_and_residuals_match_numpy(tmp_path, coretype):
    """src/cli/main.c: where OpenBLAS falls back to its SSE3 kernels on a
    processor newer than itself and OPENBLAS_CORETYPE is unset, gloam starts
    again with its AVX-512 or AVX2 kernels; a variable the user set is kept.
    Whichever kernels run, the KLIP residuals are those of numpy.linalg.svd
    (Soummer et al. 2012) on the same matrix."""
    flags = cpu_flags()
    if coretype == "Haswell" and not {"avx2", "fma"} <= flags:
        pytest.skip("no AVX2 here")
    n = 48
    cube, angles, _ = make_sequence(n=n, nf=24, sep=10)
    c, a = write_inputs(tmp_path, cube, angles)
    env = {k: v for k, v in os.environ.items() if k not in ("OPENBLAS_CORETYPE", "OPENBLAS_VERBOSE")}
    if coretype:
        env["OPENBLAS_CORETYPE"] = coretype
    r = subprocess.run([GLOAM, "subtract", str(c), "--angles", str(a), "--fwhm", str(FWHM), "--out",
                        str(tmp_path / "o.fits"), "--method", "klip-frame", "--modes", "3,7",
                        "--mask-radius", "3", "--outer-radius", "24", "--raw-residuals",
                        str(tmp_path / "raw.fits"), "--verbose"],
                       capture_output=True, text=True, env=env)
    assert r.returncode == 0, r.stderr
    kernels = [ln for ln in r.stderr.splitlines() if "OpenBLAS kernels:" in ln]
    assert len(kernels) == 1, r.stderr
    if coretype:
        assert f"OpenBLAS kernels: {coretype}" in kernels[0].replace("PRESCOTT", "Prescott"), kernels
    elif {"avx2", "fma"} <= flags:
        assert "prescott" not in kernels[0].lower(), kernels  # the fallback was replaced
    raw = fits.getdata(tmp_path / "raw.fits").astype(np.float64)
    m = region_mask(n, 3.0, 24.0)
    X = cube[:, m].astype(np.float64)
    X = X - X.mean(axis=1, keepdims=True)
    want = klip_numpy(X, X, [3, 7])
    for q in range(2):
        assert rel_diff(raw[:, q][:, m], want[q]) < 1e-4


def test_rdi_residuals_match_numpy(tmp_path):
    """RDI: basis from the reference frames only (numpy.linalg.svd)."""
    n = 48
    cube, angles, pat = make_sequence(n=n, nf=12, sep=10)
    refs, _, _ = make_sequence(n=n, nf=15, amp=0.0, seed=5, pattern=pat * 1.02)
    c, a = write_inputs(tmp_path, cube, angles)
    fits.PrimaryHDU(refs).writeto(tmp_path / "refs.fits")
    r = run("subtract", c, "--angles", a, "--fwhm", FWHM, "--out", tmp_path / "o.fits",
            "--method", "klip-frame", "--modes", "4", "--mask-radius", 3, "--refs",
            tmp_path / "refs.fits",
            "--raw-residuals", tmp_path / "raw.fits")
    assert r.returncode == 0, r.stderr
    raw = fits.getdata(tmp_path / "raw.fits").astype(np.float64)  # (frame, y, x)
    m = region_mask(n, 3, 24)
    T = cube[:, m].astype(np.float64)
    T -= T.mean(axis=1, keepdims=True)
    R = refs[:, m].astype(np.float64)
    R -= R.mean(axis=1, keepdims=True)
    want = klip_numpy(R, T, [4])[0]
    assert rel_diff(raw[:, m], want) < 1e-4


def test_rdi_keeps_best_correlated_refs(tmp_path):
    """--refs-best keeps the reference frames whose speckles match the science
    (Pearson correlation, numpy.corrcoef); the residuals then equal the numpy
    projection on the basis of those frames alone."""
    n = 48
    cube, angles, pat = make_sequence(n=n, nf=12, sep=10)
    good, _, _ = make_sequence(n=n, nf=6, amp=0.0, seed=5, pattern=pat)
    junk, _, _ = make_sequence(n=n, nf=6, amp=0.0, seed=6,
                               pattern=speckles(n, np.random.default_rng(99)))
    refs = np.empty((12, n, n), np.float32)
    refs[0::2], refs[1::2] = junk, good  # interleaved: selection, not order
    c, a = write_inputs(tmp_path, cube, angles)
    fits.PrimaryHDU(refs).writeto(tmp_path / "refs.fits")
    r = run("subtract", c, "--angles", a, "--fwhm", FWHM, "--out", tmp_path / "o.fits",
            "--method", "klip-frame", "--modes", "3", "--mask-radius", 3, "--refs",
            tmp_path / "refs.fits",
            "--refs-best", 6, "--raw-residuals", tmp_path / "raw.fits")
    assert r.returncode == 0, r.stderr
    assert fits.getheader(tmp_path / "o.fits")["GLSNREF"] == 6
    m = region_mask(n, 3, 24)
    corr = np.corrcoef(np.vstack([cube[:, m], refs[:, m]]))[:12, 12:]
    best = np.sort(np.argsort(-np.median(corr, axis=0))[:6])
    assert list(best) == [1, 3, 5, 7, 9, 11]
    T = cube[:, m].astype(np.float64)
    T -= T.mean(axis=1, keepdims=True)
    R = refs[best][:, m].astype(np.float64)
    R -= R.mean(axis=1, keepdims=True)
    raw = fits.getdata(tmp_path / "raw.fits").astype(np.float64)
    assert rel_diff(raw[:, m], klip_numpy(R, T, [3])[0]) < 1e-4


def test_refs_best_above_the_reference_count_is_said(tmp_path):
    """--refs-best larger than the reference cube: one warning, every
    reference used (the same product as without the option)."""
    n = 32
    cube, angles, pat = make_sequence(n=n, nf=8, sep=8)
    refs, _, _ = make_sequence(n=n, nf=6, amp=0.0, seed=5, pattern=pat)
    c, a = write_inputs(tmp_path, cube, angles)
    fits.PrimaryHDU(refs).writeto(tmp_path / "refs.fits")
    base = ["subtract", c, "--angles", a, "--fwhm", FWHM, "--method", "klip-frame", "--modes", 3,
            "--refs", tmp_path / "refs.fits"]
    r = run(*base, "--refs-best", 100, "--out", tmp_path / "b.fits")
    assert r.returncode == 0, r.stderr
    warn = [ln for ln in r.stderr.splitlines() if "--refs-best 100" in ln]
    assert len(warn) == 1 and "has 6 frames" in warn[0], r.stderr
    r = run(*base, "--out", tmp_path / "a.fits")
    assert r.returncode == 0, r.stderr
    assert np.array_equal(fits.getdata(tmp_path / "a.fits"), fits.getdata(tmp_path / "b.fits"),
                          equal_nan=True)


def annular_numpy(cube, angles, fwhm, r_in, r_out, ring, gap, k, nearest=0):
    """Plain numpy annular KLIP (the loop an astronomer would write): a
    library smaller than k uses all its modes, an empty one leaves NaN."""
    nf, n, _ = cube.shape
    out = np.full(cube.shape, np.nan)
    width = ring * fwhm
    nring = int(np.ceil((r_out - r_in) / width - 1e-9))
    for q in range(nring):
        a_in = r_in + q * width
        a_out = min(r_out, a_in + width)
        rmid = 0.5 * (a_in + a_out)
        m = region_mask(n, a_in, a_out)
        X = cube[:, m].astype(np.float64)
        X -= X.mean(axis=1, keepdims=True)
        for t in range(nf):
            d = np.abs(angles - angles[t])
            lib = [j for j in range(nf) if j != t and rmid * np.deg2rad(d[j]) >= gap * fwhm]
            if nearest and len(lib) > nearest:
                lib = sorted(sorted(lib, key=lambda j: (d[j], j))[:nearest])
            if not lib:
                continue
            _, _, Z = np.linalg.svd(X[lib], full_matrices=False)
            x = X[t]
            out[t][m] = x - (Z[:k] @ x) @ Z[:k]
    return out


def test_klip_rings_small_libraries_match_numpy(tmp_path):
    """20 deg of rotation and no mask: the inner rings' libraries hold fewer
    frames than --modes (or none). Each uses what it has, as the numpy loop
    does; frames without references are NaN; one warning names the rings and
    the header records them."""
    n = 40
    cube, angles, _ = make_sequence(n=n, nf=20, rot=20, sep=9)
    c, a = write_inputs(tmp_path, cube, angles)
    r = run("subtract", c, "--angles", a, "--fwhm", FWHM, "--out", tmp_path / "o.fits",
            "--method", "klip-rings", "--modes", 6, "--mask-radius", 0, "--gap", 0.75,
            "--raw-residuals", tmp_path / "raw.fits")
    assert r.returncode == 0, r.stderr
    warn = [ln for ln in r.stderr.splitlines() if "libraries" in ln]
    assert len(warn) == 1 and "ring 1 (0.0-4.0 px)" in warn[0] and "left NaN" in warn[0], r.stderr
    # the count it gives is that of the rings it lists
    import re
    count = int(re.search(r"\) in (\d+) rings?", warn[0]).group(1))
    assert count == len(re.findall(r"ring \d+ \(", warn[0])), warn[0]
    raw = fits.getdata(tmp_path / "raw.fits").astype(np.float64)
    want = annular_numpy(cube, angles, FWHM, 0, 20, 1, 0.75, 6)
    m = region_mask(n, 0, 20)
    assert np.array_equal(np.isnan(raw[:, m]), np.isnan(want[:, m]))
    ok = ~np.isnan(want[:, m])
    assert rel_diff(raw[:, m][ok], want[:, m][ok]) < 1e-4
    h = fits.getheader(tmp_path / "raw.fits")
    assert h["GLSKCAPR"] >= 1 and h["GLSNOREF"] > 0 and 1 <= h["GLSKLOW"] < 6
    assert any("ring 1, 0.0-4.0 px: no frame has refs" in str(x) for x in h["HISTORY"])


@pytest.mark.parametrize("nearest", [0, 10])
def test_annular_residuals_match_numpy(tmp_path, nearest):
    """Annular KLIP against the numpy loop (numpy.linalg.svd per library)."""
    n = 40
    cube, angles, _ = make_sequence(n=n, nf=20, rot=70, sep=9)
    c, a = write_inputs(tmp_path, cube, angles)
    args = ["subtract", c, "--angles", a, "--fwhm", FWHM, "--out", tmp_path / "o.fits",
            "--method", "klip-rings", "--modes", 4, "--mask-radius", 4, "--ring", 1.5, "--gap", 0.75,
            "--raw-residuals", tmp_path / "raw.fits"]
    if nearest:
        args += ["--keep-closest", nearest]
    r = run(*args)
    assert r.returncode == 0, r.stderr
    raw = fits.getdata(tmp_path / "raw.fits").astype(np.float64)
    want = annular_numpy(cube, angles, FWHM, 4, 20, 1.5, 0.75, 4, nearest)
    m = region_mask(n, 4, 20)
    assert rel_diff(raw[:, m], want[:, m]) < 1e-4


# ---- orientation ------------------------------------------------------------

@pytest.mark.parametrize("interp,tol", [("fft", 2e-3), ("cubic", 3e-2)])
def test_derotation_of_analytic_gaussian(tmp_path, interp, tol):
    """conventions.md orientation; analytic rotated Gaussian; flux kept to 1e-3."""
    n, sep, pa, north = 64, 13.0, 250.0, 1.7
    angles = np.linspace(-35, 42, 9)
    cube = np.empty((len(angles), n, n), np.float32)
    for i, t in enumerate(angles):
        x, y = raw_position(n, sep, pa, t, north)
        cube[i] = 100 * gaussian(n, x, y, 1.8)
    c, a = write_inputs(tmp_path, cube, angles)
    r = run("subtract", c, "--angles", a, "--fwhm", FWHM, "--out", tmp_path / "o.fits",
            "--method", "derotate-only", "--combine", "mean", "--north-offset", north, "--interp", interp,
            "--residuals", tmp_path / "res.fits")
    assert r.returncode == 0, r.stderr
    img = fits.getdata(tmp_path / "o.fits").astype(np.float64)
    x0, y0 = north_up_position(n, sep, pa)
    want = 100 * gaussian(n, x0, y0, 1.8)
    fin = np.isfinite(img)
    assert np.max(np.abs(img[fin] - want[fin])) < tol * 100
    assert abs(np.nansum(img) / want.sum() - 1) < 1e-3
    res = fits.getdata(tmp_path / "res.fits").astype(np.float64)
    for f in res:  # every frame derotated onto the same north-up Gaussian
        assert abs(np.nansum(f) / want.sum() - 1) < 1e-3
        assert np.max(np.abs(np.nan_to_num(f) - want)) < 2 * tol * 100


def test_north_up_wcs(tmp_path):
    """astropy.wcs: the star pixel keeps its sky position; north up, east left."""
    n = 48
    cube, angles, _ = make_sequence(n=n, nf=10, sep=10)
    hdr = fits.Header()
    hdr["CTYPE1"], hdr["CTYPE2"] = "RA---TAN", "DEC--TAN"
    hdr["CRPIX1"], hdr["CRPIX2"] = 20.0, 30.0
    hdr["CRVAL1"], hdr["CRVAL2"] = 150.0, -30.0
    s, rot = 12.25 / 3.6e6, np.deg2rad(33.0)
    hdr["CD1_1"], hdr["CD1_2"] = -s * np.cos(rot), s * np.sin(rot)
    hdr["CD2_1"], hdr["CD2_2"] = s * np.sin(rot), s * np.cos(rot)
    hdr["CTYPE3"] = "LINEAR"
    fits.PrimaryHDU(cube, hdr).writeto(tmp_path / "cube.fits")
    (tmp_path / "a.txt").write_text("\n".join(map(str, angles)))
    r = run("subtract", tmp_path / "cube.fits", "--angles", tmp_path / "a.txt", "--fwhm", FWHM,
            "--out", tmp_path / "o.fits", "--method", "klip-frame", "--modes", "2")
    assert r.returncode == 0, r.stderr
    w_in = WCS(hdr).celestial
    w_out = WCS(fits.getheader(tmp_path / "o.fits")).celestial
    star_in = w_in.pixel_to_world_values(n // 2, n // 2)
    star_out = w_out.pixel_to_world_values(n // 2, n // 2)
    assert np.allclose(star_in, star_out, atol=1e-9)
    # one pixel up is north (dec grows), one pixel left is east (ra grows)
    up = w_out.pixel_to_world_values(n // 2, n // 2 + 1)
    left = w_out.pixel_to_world_values(n // 2 - 1, n // 2)
    assert up[1] - star_out[1] == pytest.approx(s, rel=1e-6)
    assert (left[0] - star_out[0]) * np.cos(np.deg2rad(-30)) == pytest.approx(s, rel=1e-3)
    h = fits.getheader(tmp_path / "o.fits")
    assert h["GLSMETH"] == "klip-frame" and h["GLSFWHM"] == FWHM and h["GLSMOD1"] == 2


# ---- planted companions -----------------------------------------------------

def peak_position(img):
    j = np.nanargmax(img)
    y, x = divmod(j, img.shape[1])
    return x, y


METHODS = [
    ("median", []),
    ("median-fit", ["--method", "median-frame", "--median-fit"]),
    ("pca", ["--method", "klip-frame", "--modes", "5"]),
    ("pca-temporal", ["--method", "klip-frame", "--modes", "5", "--remove-mean", "each-pixel"]),
    ("annular", ["--method", "klip-rings", "--modes", "4", "--gap", "0.75"]),
    ("annular-sectors", ["--method", "klip-rings", "--modes", "3", "--arcs", "4", "--keep-closest", "12",
                         "--combine", "weighted"]),
    ("rdi-pca", ["--method", "klip-frame", "--modes", "5", "--refs", "REFS"]),
    ("rdi-annular-both", ["--method", "klip-rings", "--modes", "5", "--refs", "REFS",
                          "--refs-use", "both", "--refs-best", "8"]),
    ("rdi-median", ["--method", "median-frame", "--refs", "REFS", "--combine", "mean"]),
]


@pytest.mark.parametrize("name,opts", METHODS, ids=[m[0] for m in METHODS])
def test_companion_found_north_up(tmp_path, name, opts):
    n, sep, pa = 64, 14.0, 30.0
    cube, angles, pat = make_sequence(n=n, sep=sep, pa=pa, amp=3.0)
    c, a = write_inputs(tmp_path, cube, angles)
    refs, _, _ = make_sequence(n=n, nf=16, amp=0.0, seed=9, pattern=pat)
    fits.PrimaryHDU(refs).writeto(tmp_path / "refs.fits")
    if name == "median":
        opts = ["--method", "median-frame"]
    opts = [str(tmp_path / "refs.fits") if o == "REFS" else o for o in opts]
    r = run("subtract", c, "--angles", a, "--fwhm", FWHM, "--out", tmp_path / "o.fits",
            "--mask-radius", 5, *opts)
    assert r.returncode == 0, r.stderr
    img = fits.getdata(tmp_path / "o.fits").astype(np.float64)
    img = img[0] if img.ndim == 3 else img
    x, y = peak_position(img)
    x0, y0 = north_up_position(n, sep, pa)
    assert np.hypot(x - x0, y - y0) <= 1.5, (x, y, x0, y0)


def test_sdi_companion_found(tmp_path):
    """4-D cube: speckles scale with wavelength, the companion does not
    (Racine et al. 1999); SDI alone (--method none) and ASDI (then pca)."""
    n, sep, pa, nf = 64, 15.0, 120.0, 12
    waves = np.array([1.0, 1.1, 1.2, 1.3, 1.4, 1.5])
    rng = np.random.default_rng(3)
    blobs = [(rng.uniform(-22, 22), rng.uniform(-22, 22), rng.uniform(0.5, 3)) for _ in range(60)]
    angles = np.linspace(-20, 20, nf)
    cube = np.empty((nf, len(waves), n, n), np.float32)
    for k, lam in enumerate(waves):
        s = lam / waves[-1]
        sig = SIGMA * s
        pat = sum(h * gaussian(n, n // 2 + px * s, n // 2 + py * s, sig) for px, py, h in blobs)
        for i, t in enumerate(angles):
            xc, yc = raw_position(n, sep, pa, t)
            cube[i, k] = pat + 0.8 * gaussian(n, xc, yc, sig) + 0.02 * rng.standard_normal((n, n))
    fits.PrimaryHDU(cube).writeto(tmp_path / "cube.fits")
    (tmp_path / "a.txt").write_text("\n".join(map(str, angles)))
    wl = ",".join(map(str, waves))
    for method in ("derotate-only", "klip-frame"):
        out = tmp_path / f"{method}.fits"
        r = run("subtract", tmp_path / "cube.fits", "--angles", tmp_path / "a.txt", "--fwhm", FWHM,
                "--out", out, "--spectral-step", "--wavelengths", wl, "--spectral-modes", 1,
                "--method", method, "--modes", 2, "--mask-radius", 5)
        assert r.returncode == 0, r.stderr
        img = fits.getdata(out).astype(np.float64)
        x, y = peak_position(img)
        x0, y0 = north_up_position(n, sep, pa)
        assert np.hypot(x - x0, y - y0) <= 1.5, (method, x, y, x0, y0)
        assert fits.getheader(out)["GLSSDI"] == "channels"
    # wavelengths from the header's spectral axis (Greisen et al. 2006) give
    # the same product as the option
    hdr = fits.Header()
    hdr["CTYPE3"], hdr["CRVAL3"], hdr["CDELT3"], hdr["CRPIX3"] = "WAVE", 1.0e-6, 0.1e-6, 1.0
    fits.PrimaryHDU(cube, hdr).writeto(tmp_path / "cube_w.fits")
    r = run("subtract", tmp_path / "cube_w.fits", "--angles", tmp_path / "a.txt", "--fwhm", FWHM,
            "--out", tmp_path / "hdr.fits", "--spectral-step", "--spectral-modes", 1, "--method", "klip-frame",
            "--modes", 2, "--mask-radius", 5)
    assert r.returncode == 0, r.stderr
    assert np.allclose(fits.getdata(tmp_path / "hdr.fits"), fits.getdata(tmp_path / "klip-frame.fits"),
                       rtol=1e-5, atol=1e-6, equal_nan=True)


def snr_at(img, x0, y0, sep, n):
    """Companion peak over the std of its annulus, companion masked."""
    y, x = np.mgrid[0:n, 0:n]
    r = np.hypot(x - n // 2, y - n // 2)
    ring = (np.abs(r - sep) < FWHM) & (np.hypot(x - x0, y - y0) > 2 * FWHM)
    peak = np.nanmean(img[np.hypot(x - x0, y - y0) < 1.0])
    return peak / np.nanstd(img[ring])


def test_rdi_beats_adi_below_one_fwhm(tmp_path):
    """Field rotation 2 deg: the companion at 8 px moves 0.28 px < 1 FWHM, so
    ADI subtracts it with the star (Marois et al. 2006); RDI keeps it."""
    n, sep, pa = 48, 8.0, 200.0
    cube, angles, pat = make_sequence(n=n, nf=20, rot=2.0, sep=sep, pa=pa, amp=1.0)
    c, a = write_inputs(tmp_path, cube, angles)
    refs, _, _ = make_sequence(n=n, nf=20, amp=0.0, seed=4, pattern=pat)
    fits.PrimaryHDU(refs).writeto(tmp_path / "refs.fits")
    # full-frame PCA: klip-rings would leave the inner rings without references
    common = ["--angles", a, "--fwhm", FWHM, "--method", "klip-frame", "--modes", 3,
              "--mask-radius", 3, "--combine", "mean"]
    r = run("subtract", c, *common, "--out", tmp_path / "adi.fits")
    assert r.returncode == 0, r.stderr
    assert "self-subtraction" in r.stderr  # the warning about small rotation
    r = run("subtract", c, *common, "--out", tmp_path / "rdi.fits", "--refs", tmp_path / "refs.fits")
    assert r.returncode == 0, r.stderr
    x0, y0 = north_up_position(n, sep, pa)
    s_adi = snr_at(fits.getdata(tmp_path / "adi.fits").astype(float), x0, y0, sep, n)
    s_rdi = snr_at(fits.getdata(tmp_path / "rdi.fits").astype(float), x0, y0, sep, n)
    assert s_rdi > 3 * max(s_adi, 0.1), (s_rdi, s_adi)


# ---- threads ----------------------------------------------------------------

@pytest.mark.parametrize("opts", [["--method", "klip-frame", "--modes", "2,6"],
                                  ["--method", "klip-rings", "--modes", "3", "--arcs", "3"],
                                  ["--method", "median-frame", "--median-fit", "--combine", "weighted"],
                                  ["--method", "klip-frame", "--basis-frames", "all-but-target",
                                   "--modes", "2,4"],
                                  ["--method", "klip-rings", "--modes", "8", "--gap", "1.5"]])
def test_threads_identical(tmp_path, opts):
    cube, angles, _ = make_sequence(n=48, nf=18, sep=10)
    c, a = write_inputs(tmp_path, cube, angles)
    outs = []
    for t in (1, 2):
        o = tmp_path / f"t{t}.fits"
        r = run("subtract", c, "--angles", a, "--fwhm", FWHM, "--out", o, "--mask-radius", 6,
                "--threads", t, *opts)
        assert r.returncode == 0, r.stderr
        outs.append(fits.getdata(o))
        # the input's CRC-32, computed beside the read with 2 threads, is
        # zlib's of its bytes (the provenance of every product)
        assert fits.getheader(o)["GLCRC01"] == "%08x" % zlib.crc32(c.read_bytes())
    assert np.array_equal(outs[0], outs[1], equal_nan=True)


# ---- bad input ----------------------------------------------------------------

BAD = [
    ("modes", ["--method", "klip-frame", "--modes", "31"], "--modes"),
    ("zero-rotation", ["ZERO"], "zero.txt: the parallactic angles do not change"),
    ("gap", ["--method", "klip-rings", "--gap", "40"], "--gap"),
    ("refs-size", ["--refs", "SMALL"], "small.fits"),
    ("fwhm-zero", ["--fwhm", "0"], "--fwhm"),
    ("fwhm-negative", ["--fwhm", "-3"], "--fwhm"),
    ("mask", ["--mask-radius", "40"], "--mask-radius"),
    ("method", ["--method", "loci"], "--method"),
    ("sdi-3d", ["--spectral-step", "--wavelengths", "1,2"], "--spectral-step"),
    ("rotation-sense", ["--rotation-sense", "left"], "--rotation-sense"),
    ("basis-frames", ["--basis-frames", "some"], "--basis-frames"),
]


@pytest.mark.parametrize("name,opts,word", BAD, ids=[b[0] for b in BAD])
def test_bad_input(tmp_path, name, opts, word):
    cube, angles, _ = make_sequence(n=48, nf=30, sep=10)
    c, a = write_inputs(tmp_path, cube, angles)
    fits.PrimaryHDU(np.zeros((4, 40, 40), np.float32)).writeto(tmp_path / "small.fits")
    (tmp_path / "zero.txt").write_text("0\n" * 30)
    args = ["subtract", c, "--angles", a, "--fwhm", FWHM, "--out", tmp_path / "o.fits",
            "--residuals", tmp_path / "r.fits"]
    if opts == ["ZERO"]:
        args[3] = tmp_path / "zero.txt"
        opts = []
    opts = [str(tmp_path / "small.fits") if o == "SMALL" else o for o in opts]
    before = sorted(p.name for p in tmp_path.iterdir())
    r = run(*args, *opts)
    assert r.returncode == 1, (r.returncode, r.stderr)
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and word in lines[0], r.stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == before  # nothing written


def test_no_overwrite_without_flag(tmp_path):
    cube, angles, _ = make_sequence(n=32, nf=8, sep=8)
    c, a = write_inputs(tmp_path, cube, angles)
    (tmp_path / "o.fits").write_text("keep")
    r = run("subtract", c, "--angles", a, "--fwhm", FWHM, "--out", tmp_path / "o.fits",
            "--modes", 2)
    assert r.returncode == 1 and (tmp_path / "o.fits").read_text() == "keep"
    # with the FWHM measured on a PSF (an information line on success) the
    # refusal is still the one line of docs/conventions.md
    yy, xx = np.mgrid[0:25, 0:25] - 12
    fits.PrimaryHDU(np.exp(-(xx**2 + yy**2) / (2 * (FWHM / 2.3548) ** 2)).astype(np.float32)
                    ).writeto(tmp_path / "psf.fits")
    r = run("subtract", c, "--angles", a, "--psf", tmp_path / "psf.fits", "--out",
            tmp_path / "o.fits", "--modes", 2)
    lines = r.stderr.strip().splitlines()
    assert r.returncode == 1 and len(lines) == 1 and "exists" in lines[0], r.stderr
    r = run("subtract", c, "--angles", a, "--fwhm", FWHM, "--out", tmp_path / "o.fits",
            "--modes", 2, "--overwrite")
    assert r.returncode == 0, r.stderr
    assert fits.getdata(tmp_path / "o.fits").shape == (32, 32)


# ---- frames without data, channels ---------------------------------------------

@pytest.mark.parametrize("streamed", [False, True], ids=["in-memory", "streamed"])
def test_empty_frames_are_named_and_left_out(tmp_path, streamed):
    """All-NaN frames: one warning naming the file and the frames (0-based,
    ranges joined), GLSNDROP and a HISTORY card in the header, and the same
    product as the sequence with those frames deleted by numpy (an invariant:
    a frame without data takes no part in the subtraction)."""
    cube, angles, _ = make_sequence(n=48, nf=30, sep=10)
    empty = [4, 11, 12]
    holed = cube.copy()
    holed[empty] = np.nan
    c, a = write_inputs(tmp_path, holed, angles, name="holed")
    keep = [i for i in range(len(angles)) if i not in empty]
    c2, a2 = write_inputs(tmp_path, cube[keep], angles[keep], name="kept")
    extra = ["--memory-limit", "1M"] if streamed else []
    opts = ["--fwhm", FWHM, "--method", "klip-frame", "--modes", 3, *extra]
    r = run("subtract", c, "--angles", a, "--out", tmp_path / "o.fits", *opts)
    assert r.returncode == 0, r.stderr
    warn = [l for l in r.stderr.splitlines() if "left out" in l]
    assert len(warn) == 1, r.stderr
    assert "warning" in warn[0] and str(c) in warn[0], warn[0]
    assert "3 of 30 frames" in warn[0] and "frames 4, 11-12 (counted from 0)" in warn[0]
    assert "27 of 30 frames" in r.stderr  # the summary line
    h = fits.getheader(tmp_path / "o.fits")
    assert h["GLSNDROP"] == 3 and h["GLSNFRM"] == 27
    assert any("frames left out" in t and "4, 11-12" in t for t in h["HISTORY"])
    r = run("subtract", c2, "--angles", a2, "--out", tmp_path / "k.fits", *opts)
    assert r.returncode == 0, r.stderr
    assert "left out" not in r.stderr and fits.getheader(tmp_path / "k.fits")["GLSNDROP"] == 0
    got, ref = fits.getdata(tmp_path / "o.fits"), fits.getdata(tmp_path / "k.fits")
    assert np.array_equal(np.isnan(got), np.isnan(ref))
    assert rel_diff(got[np.isfinite(ref)], ref[np.isfinite(ref)]) < 1e-5


@pytest.mark.parametrize("streamed", [False, True], ids=["in-memory", "streamed"])
def test_mostly_empty_sequence_is_refused(tmp_path, streamed):
    """Fewer than half of the frames with data (the rule of align's frame
    selection): exit 1, one line naming the file, the count and the frames,
    nothing written."""
    cube, angles, _ = make_sequence(n=48, nf=30, sep=10)
    cube[:16] = np.nan
    c, a = write_inputs(tmp_path, cube, angles)
    before = sorted(p.name for p in tmp_path.iterdir())
    # the streamed path runs klip-frame (named: the default would say so first)
    extra = ["--memory-limit", "1M", "--method", "klip-frame"] if streamed else []
    r = run("subtract", c, "--angles", a, "--fwhm", FWHM, "--out", tmp_path / "o.fits", *extra)
    assert r.returncode == 1, r.stderr
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1, r.stderr
    assert str(c) in lines[0] and "only 14 of 30 frames hold data" in lines[0], lines[0]
    assert "frames 0-15" in lines[0] and "at least half" in lines[0]
    assert sorted(p.name for p in tmp_path.iterdir()) == before


def test_channels_averaged_are_said(tmp_path):
    """A 4-D cube without --spectral-step: one log line naming the file says
    the channels are averaged, the header says it (GLSSDI = 'average',
    GLSNCHAN, HISTORY), and the product equals that of the numpy nanmean
    over the channels (NaN ignored, as docs/subtract.md states)."""
    cube, angles, _ = make_sequence(n=48, nf=20, sep=10)
    rng = np.random.default_rng(7)
    four = np.stack([cube * s for s in (0.9, 1.0, 1.1)], axis=1)
    four += 0.01 * rng.standard_normal(four.shape).astype(np.float32)
    four[3, 1, 10:14, 10:14] = np.nan  # a hole in one channel
    c, a = write_inputs(tmp_path, four.astype(np.float32), angles, name="four")
    mean = np.nanmean(four.astype(np.float64), axis=1).astype(np.float32)
    c3, a3 = write_inputs(tmp_path, mean, angles, name="mean")
    opts = ["--fwhm", FWHM, "--method", "klip-frame", "--modes", 3]
    r = run("subtract", c, "--angles", a, "--out", tmp_path / "o.fits", *opts)
    assert r.returncode == 0, r.stderr
    said = [l for l in r.stderr.splitlines() if "wavelength channels" in l]
    assert len(said) == 1 and str(c) in said[0], r.stderr
    assert "3 wavelength channels per frame, averaged" in said[0] and "--spectral-step" in said[0]
    h = fits.getheader(tmp_path / "o.fits")
    assert h["GLSSDI"] == "average" and h["GLSNCHAN"] == 3
    assert any("channels of each frame averaged" in t for t in h["HISTORY"])
    r = run("subtract", c3, "--angles", a3, "--out", tmp_path / "m.fits", *opts)
    assert r.returncode == 0, r.stderr
    assert "wavelength channels" not in r.stderr and "GLSSDI" not in fits.getheader(tmp_path / "m.fits")
    got, ref = fits.getdata(tmp_path / "o.fits"), fits.getdata(tmp_path / "m.fits")
    ok = np.isfinite(ref)
    assert np.array_equal(np.isnan(got), ~ok) and rel_diff(got[ok], ref[ok]) < 1e-4


# ---- on the project's simulator ------------------------------------------------

@pytest.fixture(scope="module")
def simulated(tmp_path_factory):
    """A physical-optics sequence from `gloam simulate` (docs/simulate.md) with
    one companion and a reference-star cube; truth.csv gives its north-up
    position by conventions.md."""
    d = tmp_path_factory.mktemp("sim") / "seq"
    r = run("simulate", d, "--frames", 24, "--size", 64, "--companion", "14:120:2e-3", "--refs",
            "--cadence", 150,  # 35 deg of field rotation
            "--seed", 2, "--quiet")
    assert r.returncode == 0, r.stderr
    truth = np.genfromtxt(d / "truth.csv", delimiter=",", names=True)
    return d, float(truth["x_north_up"]), float(truth["y_north_up"])


@pytest.mark.parametrize("opts", [["--method", "median-frame"],
                                  ["--method", "klip-frame", "--modes", "5"],
                                  ["--method", "klip-rings", "--modes", "3", "--gap", "0.3"],
                                  ["--method", "klip-frame", "--modes", "5", "--refs", "REFS"]],
                         ids=["median", "pca", "annular", "rdi"])
def test_simulated_companion_found(tmp_path, simulated, opts):
    d, x0, y0 = simulated
    opts = [str(d / "refs.fits") if o == "REFS" else o for o in opts]
    out = tmp_path / "o.fits"
    r = run("subtract", d / "cube.fits", "--angles", d / "angles.txt", "--fwhm", 4.1, "--out", out,
            "--mask-radius", 8, *opts)
    assert r.returncode == 0, r.stderr
    img = fits.getdata(out).astype(np.float64)
    # the brightest spot at the companion's separation (residuals at the
    # mask edge may be brighter than a 2e-3 companion)
    yy, xx = np.mgrid[0:64, 0:64]
    img[np.abs(np.hypot(xx - 32, yy - 32) - 14) > 3] = np.nan
    x, y = peak_position(img)
    assert np.hypot(x - x0, y - y0) <= 1.5, (x, y, x0, y0)


# ---- the first release's spellings (docs/names.md) ---------------------------

OLD = [
    ("method-median", ["--method", "median"], ["--method", "median-frame"], "--method median"),
    ("method-pca", ["--method", "pca"], ["--method", "klip-frame"], "--method pca"),
    ("method-annular", ["--method", "annular"], ["--method", "klip-rings"], "--method annular"),
    ("method-none", ["--method", "none"], ["--method", "derotate-only"], "--method none"),
    ("sectors", ["--method", "klip-rings", "--sectors", "2"],
     ["--method", "klip-rings", "--arcs", "2"], "--sectors"),
    ("nearest", ["--method", "klip-rings", "--nearest", "8"],
     ["--method", "klip-rings", "--keep-closest", "8"], "--nearest"),
    ("centre-frame", ["--centre", "frame"], ["--remove-mean", "each-frame"], "--centre frame"),
    ("centre-temporal", ["--centre", "temporal"], ["--remove-mean", "each-pixel"],
     "--centre temporal"),
]


@pytest.mark.parametrize("name,old,new,word", OLD, ids=[o[0] for o in OLD])
def test_old_spelling_still_works(tmp_path, name, old, new, word):
    """Each old spelling gives the same product as the new one, with one note."""
    cube, angles, _ = make_sequence(n=40, nf=16, sep=9)
    c, a = write_inputs(tmp_path, cube, angles)
    common = ["subtract", c, "--angles", a, "--fwhm", FWHM, "--mask-radius", 5]
    r_old = run(*common, *old, "--out", tmp_path / "old.fits")
    r_new = run(*common, *new, "--out", tmp_path / "new.fits")
    assert r_old.returncode == 0 and r_new.returncode == 0, (r_old.stderr, r_new.stderr)
    notes = [ln for ln in r_old.stderr.splitlines() if "note:" in ln]
    assert len(notes) == 1 and word in notes[0] and "old spelling" in notes[0], r_old.stderr
    assert "note:" not in r_new.stderr
    assert np.array_equal(fits.getdata(tmp_path / "old.fits"), fits.getdata(tmp_path / "new.fits"),
                          equal_nan=True)


def test_old_spectral_spellings_still_work(tmp_path):
    """--sdi and --sdi-modes: same product as --spectral-step --spectral-modes."""
    n, nf = 32, 6
    rng = np.random.default_rng(8)
    cube = rng.standard_normal((nf, 3, n, n)).astype(np.float32) + 5 * gaussian(n, n // 2, n // 2)
    fits.PrimaryHDU(cube).writeto(tmp_path / "c.fits")
    (tmp_path / "a.txt").write_text("\n".join(map(str, np.linspace(-30, 30, nf))))
    common = ["subtract", tmp_path / "c.fits", "--angles", tmp_path / "a.txt", "--fwhm", FWHM,
              "--wavelengths", "1,1.1,1.2", "--mask-radius", 3, "--method", "derotate-only"]
    r_old = run(*common, "--sdi", "--sdi-modes", 1, "--out", tmp_path / "old.fits")
    r_new = run(*common, "--spectral-step", "--spectral-modes", 1, "--out", tmp_path / "new.fits")
    assert r_old.returncode == 0 and r_new.returncode == 0, (r_old.stderr, r_new.stderr)
    notes = [ln for ln in r_old.stderr.splitlines() if "note:" in ln]
    assert len(notes) == 2 and "--sdi is" in notes[0] and "--sdi-modes is" in notes[1], r_old.stderr
    assert np.array_equal(fits.getdata(tmp_path / "old.fits"), fits.getdata(tmp_path / "new.fits"),
                          equal_nan=True)


def keys_kernel(t):
    """Cubic convolution kernel, a = -0.5 (Keys 1981, IEEE Trans. ASSP 29, 1153)."""
    t = np.abs(t)
    return np.where(t <= 1, 1.5 * t**3 - 2.5 * t**2 + 1,
                    np.where(t < 2, -0.5 * t**3 + 2.5 * t**2 - 4 * t + 2, 0.0))


def magnify(img, factor):
    """img magnified by factor about (n//2, n//2) by cubic convolution,
    neighbours clamped at the edge, NaN where the source lies outside the
    image or a neighbour with non-zero weight is NaN (docs/subtract.md)."""
    n = img.shape[0]
    c = n // 2
    y, x = np.mgrid[0:n, 0:n].astype(float)
    inv = 1.0 / factor  # as the sample positions are computed in C, to the last bit
    sx, sy = c + (x - c) * inv, c + (y - c) * inv
    x0, y0 = np.floor(sx).astype(int), np.floor(sy).astype(int)
    out = np.zeros((n, n))
    bad = ~((sx >= -0.5) & (sx < n - 0.5) & (sy >= -0.5) & (sy < n - 0.5))
    for j in range(4):
        wy = keys_kernel(sy - (y0 - 1 + j))
        for i in range(4):
            wx = keys_kernel(sx - (x0 - 1 + i))
            v = img[np.clip(y0 - 1 + j, 0, n - 1), np.clip(x0 - 1 + i, 0, n - 1)]
            w = wx * wy
            used = w != 0
            bad |= used & np.isnan(v)
            out += np.where(used & ~np.isnan(v), w * np.nan_to_num(v), 0.0)
    out[bad] = np.nan
    return out


def spectral_step_numpy(frame, waves, r_in, r_out, modes, outside):
    """One frame of the spectral step of docs/subtract.md: channels magnified
    to the longest wavelength (speckle radius ~ lambda, Racine et al. 1999),
    KLIP of each channel on the others by numpy.linalg.svd (Soummer et al.
    2012), residuals (`outside` beyond the region) scaled back and averaged
    over the channels that have a value."""
    nc, n, _ = frame.shape
    lmax = max(waves)
    y, x = np.mgrid[0:n, 0:n]
    r = np.hypot(x - n // 2, y - n // 2)
    region = (r >= r_in) & (r < r_out)
    chans = np.array([magnify(frame[k].astype(float), lmax / waves[k]) for k in range(nc)])
    M = chans[:, region]
    M = np.nan_to_num(M - np.nanmean(M, axis=1, keepdims=True))
    back = []
    for t in range(nc):
        lib = np.delete(M, t, axis=0)
        vt = np.linalg.svd(lib, full_matrices=False)[2][:modes]
        res = np.full((n, n), outside)
        res[region] = M[t] - vt.T @ (vt @ M[t])
        res[region & np.isnan(chans[t])] = np.nan
        back.append(magnify(res, waves[t] / lmax))
    back = np.array(back)
    have = ~np.isnan(back)
    avg = np.where(have.any(axis=0), np.nansum(back, axis=0) / np.maximum(have.sum(axis=0), 1),
                   np.nan)
    avg[~region] = np.nan
    return avg


def test_sdi_edge_band_and_shift_warning(tmp_path):
    """Scaling the residuals back samples the shorter channels beyond the
    region near its outer edge: those channels are left out there (NaN, not
    zero), so the product equals a numpy spectral step that leaves them out,
    and not one that counts them as zeros. And the band's radial shift: a
    source at r moves r (lmax/lmin - 1) between the aligned channels, where
    the FWHM is fwhm lmax/lmin (fwhm at the shortest wavelength): below 1 FWHM
    inside fwhm lmax / (lmax - lmin) (Racine et al. 1999; Sparks & Ford 2002),
    one warning naming the cube."""
    n, nf = 48, 2
    waves = [1.0, 1.1, 1.2, 1.3]
    rng = np.random.default_rng(11)
    blobs = [(rng.uniform(-20, 20), rng.uniform(-20, 20), rng.uniform(0.5, 3)) for _ in range(50)]
    cube = np.empty((nf, len(waves), n, n), np.float32)
    for k, lam in enumerate(waves):
        s = lam / waves[-1]
        pat = sum(h * gaussian(n, n // 2 + px * s, n // 2 + py * s, SIGMA * s) for px, py, h in blobs)
        for i in range(nf):
            cube[i, k] = pat  # the same frame twice: the median is that frame
    cube += 0.05 * rng.standard_normal(cube.shape).astype(np.float32)
    cube[1] = cube[0]
    fits.PrimaryHDU(cube).writeto(tmp_path / "cube.fits")
    (tmp_path / "a.txt").write_text("0\n0\n")
    out = tmp_path / "sdi.fits"
    r = run("subtract", tmp_path / "cube.fits", "--angles", tmp_path / "a.txt", "--fwhm", FWHM,
            "--out", out, "--spectral-step", "--wavelengths", ",".join(map(str, waves)),
            "--spectral-modes", 1, "--method", "derotate-only", "--mask-radius", 4)
    assert r.returncode == 0, r.stderr
    got = fits.getdata(out).astype(np.float64)
    got = got[0] if got.ndim == 3 else got
    want = spectral_step_numpy(cube[0], waves, 4.0, n // 2, 1, np.nan)
    zeros = spectral_step_numpy(cube[0], waves, 4.0, n // 2, 1, 0.0)
    y, x = np.mgrid[0:n, 0:n]
    rad = np.hypot(x - n // 2, y - n // 2)
    band = (rad >= 0.8 * n / 2) & (rad < n / 2)  # beyond r_out lmin/lmax = 18.5 px
    assert np.array_equal(np.isnan(got), np.isnan(want))
    ok = ~np.isnan(want)
    rms = np.sqrt(np.mean(want[ok] ** 2))
    assert np.max(np.abs(got[ok] - want[ok])) < 1e-4 * rms
    # the zero-filled reading differs clearly in the outer band
    assert np.nanmax(np.abs(zeros[band] - want[band])) > 0.1 * rms
    # the warning: one line, the cube named, the radius fwhm lmax / (lmax - lmin)
    r1 = FWHM * max(waves) / (max(waves) - min(waves))
    said = [l for l in r.stderr.splitlines() if "less than 1 FWHM" in l]
    assert len(said) == 1, r.stderr
    assert str(tmp_path / "cube.fits") in said[0] and f"inside {r1:.1f} px" in said[0], said[0]
    assert "warning" in said[0]
    # the same band with the region beyond that radius: nothing said
    r = run("subtract", tmp_path / "cube.fits", "--angles", tmp_path / "a.txt", "--fwhm", FWHM,
            "--out", tmp_path / "far.fits", "--spectral-step", "--wavelengths",
            ",".join(map(str, waves)), "--spectral-modes", 1, "--method", "derotate-only",
            "--mask-radius", r1 + 0.5)
    assert r.returncode == 0, r.stderr
    assert "less than 1 FWHM" not in r.stderr, r.stderr

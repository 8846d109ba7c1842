"""gloam limits against numpy, scipy and photutils on the same data.

References named beside each check:
- Mawet et al. 2014 (ApJ 792, 97), eq. 9 and sec. 3-4: the two-sample t test
  of one aperture against the n2 = n - 1 others of its separation, n =
  floor(2 pi r / FWHM) non-overlapping 1-FWHM apertures, n2 - 1 degrees of
  freedom; the contrast t sigma sqrt(1 + 1/n2) / (throughput x PSF aperture
  flux); computed here with photutils CircularAperture(method="exact"),
  numpy (std, ddof=1) and scipy.stats.t / scipy.stats.norm;
- Jensen-Clem et al. 2018 (AJ 155, 19): with a companion the statistic is
  noncentral t, completeness = P(T > t_threshold) = scipy.stats.nct.sf;
  the noncentrality for a completeness q found here with scipy.optimize.brentq;
- injection-recovery done here with numpy (analytic Gaussian companions placed
  by the rule of docs/conventions.md: raw-frame angle 90 + pa + theta_i);
- statistical calibration (references.md): companions planted at the reported
  50% / 95% completeness contrast are recovered at the threshold about half /
  95% of the time (scipy.stats.binomtest), and companion-free apertures exceed
  the threshold at the stated false-positive fraction;
- fitsverify (HEASARC) on the FITS table; the PNG signature and IHDR chunk
  (PNG specification, ISO/IEC 15948); the SVG parsed by xml.etree.
"""
import hashlib
import os
import struct
import subprocess
import xml.etree.ElementTree as ET

import numpy as np
import pytest
from astropy.io import fits
from photutils.aperture import CircularAperture
from scipy import optimize, stats

GLOAM = os.environ["GLOAM"]
FWHM = 3.0
SIGMA = FWHM / (2 * np.sqrt(2 * np.log(2)))  # Gaussian FWHM = 2 sqrt(2 ln 2) sigma
PSF_AMP = 100.0


def run(*args):
    return subprocess.run([GLOAM, *map(str, args)], capture_output=True, text=True)


def ok(*args):
    r = run(*args)
    assert r.returncode == 0, r.stderr
    return r


def gaussian(nx, ny, x0, y0, sigma):
    y, x = np.mgrid[0:ny, 0:nx].astype(float)
    return np.exp(-0.5 * ((x - x0) ** 2 + (y - y0) ** 2) / sigma**2)


def write_psf(path, fwhm=FWHM, amp=PSF_AMP, size=21):
    """A Gaussian PSF centred on the stamp's central pixel."""
    s = fwhm / (2 * np.sqrt(2 * np.log(2)))
    psf = amp * gaussian(size, size, size // 2, size // 2, s)
    fits.PrimaryHDU(psf.astype(np.float32)).writeto(path, overwrite=True)
    return fits.getdata(path).astype(float)


def write_cube(path, cube):
    fits.PrimaryHDU(np.asarray(cube, np.float32)).writeto(path, overwrite=True)
    return path


def write_angles(path, angles):
    path.write_text("\n".join(f"{a:.8f}" for a in angles) + "\n")
    return path


def noise_inputs(tmp, seed=1, n=64, nf=30, span=90.0):
    """White Gaussian noise, no star: the truth of the noise is known."""
    rng = np.random.default_rng(seed)
    write_cube(tmp / "cube.fits", rng.normal(0, 1, (nf, n, n)))
    write_angles(tmp / "angles.txt", np.linspace(0, span, nf))
    write_psf(tmp / "psf.fits")
    return tmp / "cube.fits", tmp / "angles.txt", tmp / "psf.fits"


def table(path):
    """CSV with one header line -> dict of float arrays (empty field = NaN)."""
    lines = open(path).read().strip().splitlines()
    names = lines[0].split(",")
    rows = [[float(v) if v else np.nan for v in line.split(",")] for line in lines[1:]]
    return {k: np.array(col) for k, col in zip(names, zip(*rows))}


def plane(t, k):
    """Rows of the long-format table that belong to output plane k (1-based)."""
    sel = t["plane"] == k
    return {name: col[sel] for name, col in t.items()}


def aperture_sums(img, xs, ys, r):
    """photutils exact aperture sums; NaN where the disk touches a NaN pixel
    or leaves the image (the rule gloam's apertures follow)."""
    aps = CircularAperture(np.column_stack([xs, ys]), r=r)
    sums = np.array(aps.do_photometry(np.nan_to_num(img), method="exact")[0], float)
    for i, m in enumerate(aps.to_mask(method="exact")):
        cut = m.cutout(img, fill_value=np.nan)
        if cut is None or np.any(np.isnan(cut[m.data > 0])):
            sums[i] = np.nan
    return sums


def ring(img, sep, fwhm=FWHM, theta0=0.0):
    """Sums of the floor(2 pi sep / fwhm) apertures at separation sep from
    (nx/2, ny/2), the first at angle theta0 (radians from +x, counter-
    clockwise), the others following counter-clockwise (Mawet et al. 2014)."""
    ny, nx = img.shape
    n = int(np.floor(2 * np.pi * sep / fwhm))
    a = theta0 + 2 * np.pi * np.arange(n) / n
    return aperture_sums(img, nx // 2 + sep * np.cos(a), ny // 2 + sep * np.sin(a), fwhm / 2)


def t_statistic(sums, exclude_adjacent=False):
    """Mawet et al. 2014 eq. 9: the first aperture against the others."""
    refs = sums[2:-1] if exclude_adjacent else sums[1:]
    n2 = refs.size
    return (sums[0] - refs.mean()) / (refs.std(ddof=1) * np.sqrt(1 + 1 / n2)), n2


def north_up_xy(sep, pa, n):
    # docs/conventions.md: pa = atan2(-(x - cx), (y - cy))
    t = np.deg2rad(pa)
    return n // 2 - sep * np.sin(t), n // 2 + sep * np.cos(t)


def plant(cube, angles, comps, fwhm, amp, north=0.0):
    """Analytic Gaussian companions (sep, pa, contrast) in every raw frame at
    angle 90 + pa + theta_i (+ north offset) from +x (docs/conventions.md);
    amp is the scaled PSF's peak, so contrast x amp is the companion's peak."""
    out = np.array(cube, float)
    nf, ny, nx = out.shape
    s = fwhm / (2 * np.sqrt(2 * np.log(2)))
    for i, th in enumerate(angles):
        for sep, pa, c in comps:
            a = np.deg2rad(90 + pa + th + north)
            out[i] += c * amp * gaussian(nx, ny, nx // 2 + sep * np.cos(a),
                                         ny // 2 + sep * np.sin(a), s)
    return out


def subtracted(path):
    d = fits.getdata(path).astype(float)
    return d[None] if d.ndim == 2 else d


# ---- 1. the curve on white noise equals the analytic value ------------------

CASES = [
    ("median-frame", [], []),
    ("klip-frame", ["--modes", "3,8"], []),
    ("median-frame", ["--mask-radius", "5"], ["--exclude-adjacent"]),
]


@pytest.mark.parametrize("method,sub_opts,lim_opts", CASES, ids=["median", "pca", "excl"])
def test_white_noise_curve_is_analytic(tmp_path, method, sub_opts, lim_opts):
    """On white noise without a star, every column of the curve is recomputed
    here from the `gloam subtract` image made with the same options.

    Tolerance: the image is float32 and both sides sum exact pixel overlaps in
    double precision, so aperture sums agree to ~1e-7 relative (test_detect
    shows 1e-6 against photutils); the std of ~10-60 such sums and scipy's
    t.isf against GSL's keep that, so 1e-5 relative is a safe bound that still
    catches any change of n2, dof, the sqrt(1 + 1/n2) factor or F."""
    c, a, p = noise_inputs(tmp_path, seed=11)
    scale = 2.5
    common = ["--angles", a, "--fwhm", FWHM, "--method", method, *sub_opts]
    ok("limits", c, *common, "--psf", p, "--psf-scale", scale, "--out", tmp_path / "l",
       "--quiet", *lim_opts)
    ok("subtract", c, *common, "--out", tmp_path / "s.fits", "--quiet")
    img = subtracted(tmp_path / "s.fits")
    excl = "--exclude-adjacent" in lim_opts

    # F: exact 1-FWHM aperture sum of the scaled PSF at its centre (photutils)
    psf = fits.getdata(p).astype(float)
    F = scale * CircularAperture((10, 10), r=FWHM / 2).do_photometry(psf, method="exact")[0][0]
    hdr = fits.getheader(tmp_path / "l.limits.fits", 1)
    assert hdr["GLPSFAP"] == pytest.approx(F, rel=1e-6)
    assert hdr["GLPSFSC"] == scale and hdr["GLSIGMA"] == 5
    assert hdr["GLEXADJ"] == excl

    t = table(tmp_path / "l.limits.csv")
    fakes = table(tmp_path / "l.fakes.csv")
    nplanes = img.shape[0]
    assert sorted(set(t["plane"])) == list(range(1, nplanes + 1))
    fpf = stats.norm.sf(5)  # Gaussian one-sided 5-sigma FPF, 2.867e-7
    for k in range(1, nplanes + 1):
        row = plane(t, k)
        assert np.all(np.diff(row["sep_px"]) > 0)
        for i, sep in enumerate(row["sep_px"]):
            sums = ring(img[k - 1], sep)
            sums = sums[np.isfinite(sums)]
            n2 = sums.size - 1 - (2 if excl else 0)
            dof = n2 - 1
            assert row["napertures"][i] == sums.size and row["dof"][i] == dof
            sigma = sums.std(ddof=1)  # numpy
            assert row["noise"][i] == pytest.approx(sigma, rel=1e-5)
            assert row["mean"][i] == pytest.approx(sums.mean(), rel=1e-4, abs=1e-6 * sigma)
            tt = stats.t.isf(fpf, dof)  # scipy.stats.t
            assert row["t_threshold"][i] == pytest.approx(tt, rel=1e-7)
            thr = row["throughput"][i]
            if not thr > 0.01:
                assert np.isnan(row["contrast"][i])
                continue
            ref = tt * sigma * np.sqrt(1 + 1 / n2) / (thr * F)  # Mawet et al. 2014
            assert row["contrast"][i] == pytest.approx(ref, rel=1e-5)
            assert row["delta_mag"][i] == pytest.approx(-2.5 * np.log10(ref), abs=1e-5)
        # the throughput column is the fakes' throughput interpolated linearly
        # in separation, held beyond the end fakes (numpy.interp does both)
        tf = fakes[f"throughput_plane{k}"]
        good = np.isfinite(tf)
        order = np.argsort(fakes["sep_px"][good])
        ref_thr = np.interp(row["sep_px"], fakes["sep_px"][good][order], tf[good][order])
        np.testing.assert_allclose(row["throughput"], ref_thr, rtol=1e-9)
        # on white noise with 90 degrees of rotation there is little to lose
        assert np.all((row["throughput"] > 0.2) & (row["throughput"] < 1.2))


# ---- 2. completeness columns -------------------------------------------------

def test_completeness_columns_match_scipy_nct(tmp_path):
    """Jensen-Clem et al. 2018: T ~ noncentral t(dof, delta) with delta =
    f / (sigma sqrt(1 + 1/n2)). scipy.stats.nct.sf gives the completeness;
    scipy.optimize.brentq inverts it for delta at 50% and at 90%."""
    c, a, p = noise_inputs(tmp_path, seed=12)
    ok("limits", c, "--angles", a, "--psf", p, "--fwhm", FWHM, "--method", "median-frame",
       "--threshold", 4, "--completeness", 0.9, "--out", tmp_path / "l", "--quiet")
    t = table(tmp_path / "l.limits.csv")
    assert "contrast_c90" in t and "delta_mag_c90" in t
    F = fits.getheader(tmp_path / "l.limits.fits", 1)["GLPSFAP"]
    good = np.isfinite(t["contrast"])
    assert good.sum() >= 10
    for i in np.flatnonzero(good):
        tau, dof = t["t_threshold"][i], t["dof"][i]
        n2 = dof + 1
        assert tau == pytest.approx(stats.t.isf(stats.norm.sf(4), dof), rel=1e-7)
        # completeness of the classical curve: nct.sf(t, dof, t)
        with np.errstate(divide="ignore", invalid="ignore"):
            ref = stats.nct.sf(tau, dof, tau)
        assert t["completeness"][i] == pytest.approx(ref, rel=1e-6)
        scale = t["noise"][i] * np.sqrt(1 + 1 / n2) / (t["throughput"][i] * F)
        for q, col, mag in ((0.5, "contrast_c50", "delta_mag_c50"),
                            (0.9, "contrast_c90", "delta_mag_c90")):
            with np.errstate(divide="ignore", invalid="ignore"):  # Boost, far tails
                d = optimize.brentq(lambda x: stats.nct.sf(tau, dof, x) - q, 0, 4 * tau + 20,
                                    xtol=1e-12)
            assert t[col][i] == pytest.approx(d * scale, rel=1e-6), (col, dof, tau)
            assert t[mag][i] == pytest.approx(-2.5 * np.log10(d * scale), abs=1e-6)
    # the header records the model
    hdr = fits.getheader(tmp_path / "l.limits.fits", 1)
    assert hdr["GLCOMPL"] == 0.9 and hdr["GLFPF"] == pytest.approx(stats.norm.sf(4), rel=1e-9)


# ---- 3. throughput against an injection-recovery done here ------------------

@pytest.fixture(scope="module")
def sim(tmp_path_factory):
    """A small physical-optics sequence from `gloam simulate` (speckles,
    photon noise), with a Gaussian off-axis PSF of the simulator's FWHM and
    total flux, so that the companions planted here with numpy are the same
    shape as gloam's fakes."""
    d = tmp_path_factory.mktemp("sim")
    ok("simulate", d / "s", "--frames", 24, "--size", 64, "--seed", 7, "--exptime", 200, "--cadence", 240,
       "--quiet")
    fwhm = 4.1  # 1.029 lambda/D at 4 px per lambda/D (Born & Wolf sec. 8.5)
    total = fits.getdata(d / "s" / "psf.fits").astype(float).sum()
    s = fwhm / (2 * np.sqrt(2 * np.log(2)))
    amp = total / (2 * np.pi * s * s)  # peak of a Gaussian of that total
    write_psf(d / "gpsf.fits", fwhm=fwhm, amp=amp, size=25)
    angles = np.loadtxt(d / "s" / "angles.txt")
    return d, fwhm, amp, angles


@pytest.mark.parametrize("method,opts", [("median-frame", []), ("klip-frame", ["--modes", "3,8"])])
def test_throughput_matches_numpy_injection(sim, tmp_path, method, opts):
    d, fwhm, amp, angles = sim
    cube = fits.getdata(d / "s" / "cube.fits").astype(float)
    common = ["--angles", d / "s" / "angles.txt", "--fwhm", fwhm, "--method", method,
              "--mask-radius", 4, *opts]
    ok("limits", d / "s" / "cube.fits", *common, "--psf", d / "gpsf.fits",
       "--out", tmp_path / "l", "--quiet")
    ok("subtract", d / "s" / "cube.fits", *common, "--out", tmp_path / "s0.fits", "--quiet")
    base = subtracted(tmp_path / "s0.fits")
    fakes = table(tmp_path / "l.fakes.csv")
    F = fits.getheader(tmp_path / "l.limits.fits", 1)["GLPSFAP"]
    n = cube.shape[-1]
    assert fakes["sep_px"].size >= 5
    checked = []
    for j in (1, fakes["sep_px"].size - 2):  # one close in, one far out
        sep, pa, con = fakes["sep_px"][j], fakes["pa_deg"][j], fakes["contrast"][j]
        write_cube(tmp_path / "c1.fits", plant(cube, angles, [(sep, pa, con)], fwhm, amp))
        ok("subtract", tmp_path / "c1.fits", *common, "--out", tmp_path / "s1.fits",
           "--quiet", "--overwrite")
        img = subtracted(tmp_path / "s1.fits")
        x, y = north_up_xy(sep, pa, n)
        for k in range(base.shape[0]):
            diff = aperture_sums(img[k] - base[k], [x], [y], fwhm / 2)[0]  # photutils
            thr = diff / (con * F)
            got = fakes[f"throughput_plane{k + 1}"][j]
            checked.append((sep, k + 1, got, thr))
            # issue 6: within 10% of the numpy injection-recovery
            assert got == pytest.approx(thr, rel=0.10), checked
    print(method, "fake sep, plane, gloam throughput, numpy injection:", checked)


# ---- 4. statistical calibration ----------------------------------------------

CAL_N, CAL_NF = 64, 30
CAL_SEPS = (8.0, 14.0, 20.0, 26.0)  # two FWHM apart: the rings do not interact
CAL_TRIALS = 150  # alternate 50% and 95% trials: 300 + 300 Bernoulli draws
CAL_NULL = 60     # companion-free realisations


def test_calibration_by_planted_companions(tmp_path):
    """Companions planted at the reported contrast_c50 are recovered at the
    threshold about half of the time, at contrast_c95 about 95% of the time;
    companion-free apertures exceed t_threshold at the stated FPF.

    Design. White Gaussian noise cubes (30 frames 64x64, 180 degrees of
    rotation), classical ADI (median), a Gaussian PSF: the truth is known and
    each subtraction costs ~50 ms. Separations 8, 14, 20, 26 px (FWHM 3)
    hold 16-54 apertures and are 2 FWHM apart, so one cube carries one trial
    per separation with independent rings.

    The model assumes that a companion changes only its own aperture. In ADI
    it also leaves negative self-subtraction arcs along its own annulus, over
    the whole range of field rotation, which raise the spread of the
    reference apertures. With 180 degrees of rotation this stays below ~8%
    at 8 px and 1-4% further out (measured while writing this test) and is
    offset by the lowered reference mean; with 90 degrees the spread rose by
    21% at 8 px (2.7 FWHM) and only ~23% of the companions planted at
    contrast_c50 were recovered there (docs/limits.md, "What the curve does
    not include"). The test therefore checks the statistics in the regime the
    model describes.

    The reported contrast is K x noise, where K = delta_q sqrt(1 + 1/n2) /
    (throughput x F) is the model being tested and noise is the std of one
    realisation's aperture sums, which scatters by 1/sqrt(2 (n - 1)), 10-18%
    here. The completeness of Jensen-Clem et al. 2018 is defined for the true
    sigma, and the scatter of one realisation's estimate would smear "half of
    the time" by more than the binomial error of the trials. So the contrast
    planted is the reported one with the one-realisation noise replaced by
    the true sigma: contrast_q x sigma / noise, K averaged over several limits
    runs, sigma pooled over CAL_NULL companion-free subtractions (~900-3200
    aperture sums per separation, 1-2.5% precision). That the reported noise
    is an unbiased estimate of that sigma is checked as well (mean of
    noise^2).

    Detection is the Mawet et al. 2014 t test at the planted position against
    the other apertures of its ring (computed here with photutils), compared
    with the reported t_threshold. False alarms: on the companion-free
    images, one test aperture at a random angle per separation (3 px apart
    rings, 9 per image) against --threshold 2 (FPF 2.3%, ~12 expected)."""
    rng = np.random.default_rng(2024)
    angles = np.linspace(0, 180, CAL_NF)
    a = write_angles(tmp_path / "angles.txt", angles)
    p = tmp_path / "psf.fits"
    write_psf(p)
    cube_path = tmp_path / "cube.fits"
    common = ["--angles", a, "--fwhm", FWHM, "--method", "median-frame"]
    grid = ["--min-separation", CAL_SEPS[0], "--step", CAL_SEPS[1] - CAL_SEPS[0],
            "--max-separation", CAL_SEPS[-1]]

    # companion-free realisations: the true sigma, the reported noise and K
    pooled = {s: [] for s in CAL_SEPS}
    reported, K50, K95 = [], [], []
    null_images = []
    for r in range(CAL_NULL):
        write_cube(cube_path, rng.normal(0, 1, (CAL_NF, CAL_N, CAL_N)))
        ok("subtract", cube_path, *common, "--out", tmp_path / "s.fits", "--quiet",
           "--overwrite")
        img = subtracted(tmp_path / "s.fits")[0]
        null_images.append(img)
        for s in CAL_SEPS:
            sums = ring(img, s)
            pooled[s].append(sums - sums.mean())
        if r < 6:
            ok("limits", cube_path, *common, *grid, "--psf", p, "--out", tmp_path / "l",
               "--quiet", "--overwrite")
            t = table(tmp_path / "l.limits.csv")
            np.testing.assert_allclose(t["sep_px"], CAL_SEPS)
            reported.append(t["noise"])
            K50.append(t["contrast_c50"] / t["noise"])
            K95.append(t["contrast_c95"] / t["noise"])
            tthr = t["t_threshold"]
    # unbiased pooled variance: each realisation's sums about their own mean,
    # (n - 1) degrees of freedom each
    sigma = np.array([np.sqrt(np.sum(np.square(pooled[s])) / (len(pooled[s]) * (pooled[s][0].size - 1)))
                      for s in CAL_SEPS])
    rms_reported = np.sqrt(np.mean(np.square(reported), axis=0))
    print("sigma pooled", sigma, "rms of reported noise", rms_reported)
    # E[s^2] = sigma^2: 6 runs x (n - 1) dof give 5-12% precision; 25% bound
    np.testing.assert_allclose(rms_reported, sigma, rtol=0.25)
    K50, K95 = np.mean(K50, axis=0), np.mean(K95, axis=0)
    c50, c95 = K50 * sigma, K95 * sigma

    # trials: companions at the calibrated contrasts, random position angles
    hits = {0.5: 0, 0.95: 0}
    draws = {0.5: 0, 0.95: 0}
    for trial in range(CAL_TRIALS):
        q = 0.5 if trial % 2 == 0 else 0.95
        con = c50 if q == 0.5 else c95
        pas = rng.uniform(0, 360, len(CAL_SEPS))
        comps = [(s, pa, cc) for s, pa, cc in zip(CAL_SEPS, pas, con)]
        cube = plant(rng.normal(0, 1, (CAL_NF, CAL_N, CAL_N)), angles, comps, FWHM, PSF_AMP)
        write_cube(cube_path, cube)
        ok("subtract", cube_path, *common, "--out", tmp_path / "s.fits", "--quiet",
           "--overwrite")
        img = subtracted(tmp_path / "s.fits")[0]
        for i, (s, pa, _) in enumerate(comps):
            x, y = north_up_xy(s, pa, CAL_N)
            tval, n2 = t_statistic(ring(img, s, theta0=np.arctan2(y - CAL_N // 2, x - CAL_N // 2)))
            assert n2 == int(np.floor(2 * np.pi * s / FWHM)) - 1
            hits[q] += tval > tthr[i]
            draws[q] += 1
    for q in (0.5, 0.95):
        test = stats.binomtest(hits[q], draws[q], q)
        ci = test.proportion_ci(0.95)
        print(f"completeness {q}: recovered {hits[q]} of {draws[q]} "
              f"({hits[q] / draws[q]:.3f}, 95% CI {ci.low:.3f}-{ci.high:.3f}), "
              f"p = {test.pvalue:.3g}")
        # two-sided binomial test at the 0.1% level (scipy.stats.binomtest)
        assert test.pvalue > 1e-3, (q, hits[q], draws[q])

    # false alarms at --threshold 2 on the companion-free images
    write_cube(cube_path, rng.normal(0, 1, (CAL_NF, CAL_N, CAL_N)))
    ok("limits", cube_path, *common, "--psf", p, "--threshold", 2,
       "--min-separation", FWHM, "--step", FWHM, "--out", tmp_path / "l2", "--quiet")
    t2 = table(tmp_path / "l2.limits.csv")
    fpf = stats.norm.sf(2)
    exceed, ntests, pvals = 0, 0, []
    for img in null_images:
        for s, thr, dof in zip(t2["sep_px"], t2["t_threshold"], t2["dof"]):
            tval, n2 = t_statistic(ring(img, s, theta0=rng.uniform(0, 2 * np.pi)))
            assert n2 - 1 == dof
            exceed += tval > thr
            ntests += 1
            pvals.append(stats.t.sf(tval, dof))
    test = stats.binomtest(exceed, ntests, fpf)
    print(f"false alarms at 2 sigma: {exceed} of {ntests}, expected {fpf * ntests:.1f}, "
          f"p = {test.pvalue:.3g}")
    assert test.pvalue > 1e-3
    # the FPF of every trial is uniform on companion-free data (scipy.stats.kstest)
    assert stats.kstest(pvals, "uniform").pvalue > 1e-3


# ---- 5. bad input -----------------------------------------------------------

def bad_case(tmp, *extra, psf=None, angles=None):
    c, a, p = noise_inputs(tmp, seed=3, n=48, nf=20)
    args = ["limits", c, "--angles", angles or a, "--psf", psf or p, "--fwhm", FWHM,
            "--method", "median-frame", "--out", tmp / "o", *extra]
    before = {q.name: hashlib.sha256(q.read_bytes()).hexdigest() for q in tmp.iterdir()}
    r = run(*args)
    after = {q.name: hashlib.sha256(q.read_bytes()).hexdigest() for q in tmp.iterdir()}
    assert r.returncode == 1, (r.returncode, r.stderr)
    assert before == after, "nothing written, inputs untouched"
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1, r.stderr
    return lines[0]


def test_bad_psf_without_signal(tmp_path):
    fits.PrimaryHDU(np.zeros((15, 15), np.float32)).writeto(tmp_path / "dark.fits")
    msg = bad_case(tmp_path, psf=tmp_path / "dark.fits")
    assert "dark.fits" in msg and "signal" in msg, msg


def test_bad_psf_larger_than_frame(tmp_path):
    write_psf(tmp_path / "big.fits", size=61)
    msg = bad_case(tmp_path, psf=tmp_path / "big.fits")
    assert "big.fits" in msg and "larger" in msg, msg


def test_bad_max_separation_beyond_frame(tmp_path):
    msg = bad_case(tmp_path, "--max-separation", 30)
    assert "--max-separation" in msg and "48x48" in msg, msg


@pytest.mark.parametrize("value", ["0", "-2", "nan"])
def test_bad_psf_scale(tmp_path, value):
    msg = bad_case(tmp_path, f"--psf-scale={value}")
    assert "--psf-scale" in msg, msg


def test_bad_angle_count(tmp_path):
    write_angles(tmp_path / "short.txt", np.linspace(0, 90, 19))
    msg = bad_case(tmp_path, angles=tmp_path / "short.txt")
    assert "short.txt" in msg, msg


def test_bad_existing_output(tmp_path):
    (tmp_path / "o.limits.png").write_text("keep")
    msg = bad_case(tmp_path)
    assert "o.limits.png" in msg, msg
    assert (tmp_path / "o.limits.png").read_text() == "keep"


def test_bad_unknown_option(tmp_path):
    msg = bad_case(tmp_path, "--no-such-option")
    assert "--no-such-option" in msg, msg


def test_bad_separation_range(tmp_path):
    msg = bad_case(tmp_path, "--min-separation", 15, "--max-separation", 10)
    assert "--min-separation" in msg, msg


# ---- 6. threads, products -----------------------------------------------------

def test_threads_and_products(tmp_path):
    c, a, p = noise_inputs(tmp_path, seed=5, n=48, nf=20)
    common = ["limits", c, "--angles", a, "--psf", p, "--fwhm", FWHM, "--method", "klip-frame",
              "--modes", "2,4", "--quiet", "--pixscale", 12.25]
    ok(*common, "--threads", 1, "--out", tmp_path / "t1")
    ok(*common, "--threads", 2, "--out", tmp_path / "t2")
    for suffix in (".limits.csv", ".fakes.csv"):  # rule 5: same bytes at any thread count
        assert (tmp_path / f"t1{suffix}").read_bytes() == (tmp_path / f"t2{suffix}").read_bytes()
    d1 = fits.getdata(tmp_path / "t1.limits.fits", 1)
    d2 = fits.getdata(tmp_path / "t2.limits.fits", 1)
    assert d1.tobytes() == d2.tobytes()
    # the FITS table equals the CSV (and the arcsec column uses --pixscale)
    t = table(tmp_path / "t1.limits.csv")
    for name in t:
        np.testing.assert_allclose(d1[name], t[name], rtol=1e-9, equal_nan=True)
    np.testing.assert_allclose(t["sep_arcsec"], t["sep_px"] * 0.01225, rtol=1e-9)
    # fitsverify (HEASARC): -q prints only the verdict
    r = subprocess.run(["fitsverify", "-q", str(tmp_path / "t1.limits.fits")],
                       capture_output=True, text=True)
    assert r.returncode == 0 and "verification OK" in r.stdout, r.stdout + r.stderr
    # PNG (ISO/IEC 15948): signature, then IHDR with width and height (900 x 620)
    head = (tmp_path / "t1.limits.png").read_bytes()[:24]
    assert head[:8] == b"\x89PNG\r\n\x1a\n" and head[12:16] == b"IHDR"
    assert struct.unpack(">II", head[16:24]) == (900, 620)
    root = ET.parse(tmp_path / "t1.limits.svg").getroot()
    assert root.tag.endswith("svg")
    assert float(root.get("width").rstrip("pt")) == pytest.approx(900)


# ---- companions: throughput-corrected contrast of a detected source ---------

def test_candidate_contrast_recovers_the_planted_one(tmp_path):
    """A companion planted (analytic Gaussian, docs/conventions.md placement)
    at a known contrast in white noise is detected, and `limits --candidates`
    gives back its contrast within its stated statistical error (3 sigma);
    the fakes keep more than 2 FWHM away from it. The planted value is the
    outside reference (known injection)."""
    rng = np.random.default_rng(11)
    n, nf = 64, 30
    angles = np.linspace(0, 120, nf)
    comp = (18.0, 70.0, 0.3)  # sep px, pa deg, contrast: a bright, clear source
    cube = plant(rng.normal(0, 1, (nf, n, n)), angles, [comp], FWHM, PSF_AMP)
    write_cube(tmp_path / "cube.fits", cube)
    write_angles(tmp_path / "angles.txt", angles)
    write_psf(tmp_path / "psf.fits")
    common = ["--angles", tmp_path / "angles.txt", "--fwhm", FWHM, "--method", "median-frame"]
    ok("subtract", tmp_path / "cube.fits", *common, "--out", tmp_path / "sub.fits")
    ok("detect", tmp_path / "sub.fits", "--fwhm", FWHM, "--out", tmp_path / "det")
    det = table(tmp_path / "det.candidates.csv")
    assert abs(det["sep_px"][0] - comp[0]) < 0.3
    ok("limits", tmp_path / "cube.fits", *common, "--psf", tmp_path / "psf.fits",
       "--candidates", tmp_path / "det.candidates.csv", "--out", tmp_path / "lim")
    c = table(tmp_path / "lim.companions.csv")
    first = c["candidate"] == 1
    est, err = c["contrast"][first][0], c["contrast_err"][first][0]
    assert err > 0 and abs(est - comp[2]) < 3 * err, (est, err)
    assert abs(est - comp[2]) / comp[2] < 0.1
    f = table(tmp_path / "lim.fakes.csv")
    x0, y0 = north_up_xy(det["sep_px"][0], det["pa_deg"][0], n)
    xs, ys = north_up_xy(f["sep_px"], f["pa_deg"], n)
    assert np.min(np.hypot(xs - x0, ys - y0)) > 2 * FWHM


def test_candidates_table_without_positions_is_refused(tmp_path):
    cube, angles, psf = noise_inputs(tmp_path)
    (tmp_path / "c.csv").write_text("a,b\n1,2\n")
    before = sorted(p.name for p in tmp_path.iterdir())
    r = run("limits", cube, "--angles", angles, "--psf", psf, "--fwhm", FWHM, "--method",
            "median-frame", "--candidates", tmp_path / "c.csv", "--out", tmp_path / "lim")
    assert r.returncode == 1 and "no sep_px and pa_deg columns" in r.stderr
    assert len(r.stderr.strip().splitlines()) == 1
    assert sorted(p.name for p in tmp_path.iterdir()) == before

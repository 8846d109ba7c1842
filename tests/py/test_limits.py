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
from scipy import integrate, optimize, special, stats

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
    ("median-frame", ["--mask-radius", "5"], ["--skip-flanking"]),
]


def local_line(fr, ft, sep, fwhm=FWHM, window=1.5):
    """The throughput column's rule (docs/limits.md): a least-squares line
    (numpy.polyfit) through the fakes within 1.5 FWHM of the separation (at
    least the two nearest), evaluated at the separation clamped to their
    range; their mean when they span less than 0.05 FWHM."""
    sel = np.abs(fr - sep) <= window * fwhm + 1e-9
    if sel.sum() < 2:
        sel = np.zeros(fr.size, bool)
        sel[np.argsort(np.abs(fr - sep), kind="stable")[:2]] = True
    x, y = fr[sel], ft[sel]
    if x.size < 2 or np.ptp(x) < 0.05 * fwhm:
        return y.mean(), x, y
    b, a = np.polyfit(x, y, 1)
    return a + b * np.clip(sep, x.min(), x.max()), x, y


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
    excl = "--skip-flanking" in lim_opts

    # F: exact 1-FWHM aperture sum of the scaled PSF at its centre (photutils)
    psf = fits.getdata(p).astype(float)
    F = scale * CircularAperture((10, 10), r=FWHM / 2).do_photometry(psf, method="exact")[0][0]
    hdr = fits.getheader(tmp_path / "l.limits.fits", 1)
    assert hdr["GLPSFAP"] == pytest.approx(F, rel=1e-6)
    assert hdr["GLPSFSC"] == scale and hdr["GLSIGMA"] == 5
    assert hdr["GLSKIPFL"] == excl

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
        # the throughput column: a local line through the fakes around each
        # separation; its scatter column: their rms about it (n - 2)
        tf = fakes[f"throughput_plane{k}"]
        good = np.isfinite(tf)
        for i, sep in enumerate(row["sep_px"]):
            ref_thr, x, y = local_line(fakes["sep_px"][good], tf[good], sep)
            assert row["throughput"][i] == pytest.approx(ref_thr, rel=1e-9)
            assert row["fakes_used"][i] == x.size >= 2
            if x.size >= 3:
                res = y - np.polyval(np.polyfit(x, y, 1), x)
                assert row["throughput_scatter"][i] == pytest.approx(
                    np.sqrt(np.sum(np.square(res)) / (x.size - 2)), rel=1e-6)
        # several position angles around every separation
        assert np.all(row["fakes_used"] >= 2)
        # on white noise with 90 degrees of rotation there is little to lose
        # beyond 2 FWHM (closer in, the fakes near the 50% level are bright
        # enough to be partly absorbed by full-frame PCA: at 2 FWHM the 8-mode
        # plane keeps 0.18-0.2, depending on how bright the second run's fakes
        # are, which is the first run's c95)
        far = row["sep_px"] > 2 * FWHM
        assert np.all((row["throughput"][far] > 0.2) & (row["throughput"][far] < 1.2))


# ---- 2. completeness columns -------------------------------------------------

def p_lobes(delta, lam, tau, nu):
    """Doubly noncentral t tail (Krishnan 1968): P(T > tau) for T = (Z +
    delta) / sqrt(V / nu), V noncentral chi2 (scipy.stats.ncx2) of nu dof and
    noncentrality lam, by scipy.integrate.quad; scipy.stats.nct for lam = 0."""
    with np.errstate(divide="ignore", invalid="ignore"):
        if lam < 1e-12:
            return stats.nct.sf(tau, nu, delta)
        m, sd = nu + lam, np.sqrt(2 * (nu + 2 * lam))
        f = lambda v: stats.norm.sf(tau * np.sqrt(v / nu) - delta) * stats.ncx2.pdf(v, nu, lam)
        return sum(integrate.quad(f, lo, hi, epsabs=1e-12, epsrel=1e-9, limit=100)[0]
                   for lo, hi in ((max(0.0, m - 30 * sd), m), (m, m + 40 * sd + 200)))


def model_contrast(row, i, fakes, k, F, q):
    """docs/limits.md, "Completeness": the fakes around the separation, their
    signal and ref_spread each moved to it by the ratio of its own local line,
    give
    delta = x signal / sqrt(1 + 1/n2) and lambda = x^2 ref_spread^2 for an
    aperture flux of x noise units; the contrast of completeness q solves the
    fakes' mean P(T > t) = q (scipy.optimize.brentq). The noise is the curve's
    estimate from n apertures: the companion has x s true-noise units, s^2
    (n - 1) ~ chi2(n - 1), and P is averaged over s (the predictive
    completeness on an independent sequence), here by generalized
    Gauss-Laguerre quadrature of the chi2 weight (scipy.special.roots_genlaguerre,
    16 nodes; 40 nodes agree to 1e-6)."""
    sep, tau, dof = row["sep_px"][i], row["t_threshold"][i], row["dof"][i]
    fr = fakes["sep_px"]
    sig, spr = fakes[f"signal_plane{k}"], fakes[f"ref_spread_plane{k}"]
    A, x, _ = local_line(fr, sig, sep)
    sel = np.isin(fr, x)
    kf = np.sqrt(1 + 1 / (dof + 1))
    H, _, _ = local_line(fr, spr, sep)
    lines = [np.polyfit(x, y[sel], 1) if np.ptp(x) >= 0.05 * FWHM else [0, y[sel].mean()]
             for y in (sig, spr)]
    # the core and the lobes each moved by the ratio of their own line
    a = sig[sel] * (A / np.polyval(lines[0], x)) / kf
    h = spr[sel] * (H / np.polyval(lines[1], x))
    m = row["napertures"][i] - 1
    z, wz = special.roots_genlaguerre(16, m / 2 - 1)  # weight z^(m/2-1) e^-z, z = W / 2
    s_nodes, s_w = np.sqrt(2 * z / m), wz / wz.sum()
    mean_p = lambda xx: sum(w * np.mean([p_lobes(xx * sn * aa, (xx * sn * hh) ** 2, tau, dof)
                                         for aa, hh in zip(a, h)])
                            for sn, w in zip(s_nodes, s_w))
    hi = tau / a.max()
    while mean_p(hi) < q:
        hi *= 2
    xq = optimize.brentq(lambda xx: mean_p(xx) - q, 0, hi, xtol=1e-9, rtol=1e-8)
    return xq * row["noise"][i] / F, mean_p


def test_completeness_columns_match_scipy(tmp_path):
    """Jensen-Clem et al. 2018 completeness with the fakes' measured lobes:
    the c50 and c90 columns recomputed from the fakes table with scipy
    (ncx2 + quad, brentq), and the completeness of the classical contrast."""
    c, a, p = noise_inputs(tmp_path, seed=12)
    ok("limits", c, "--angles", a, "--psf", p, "--fwhm", FWHM, "--method", "median-frame",
       "--threshold", 4, "--completeness", 0.9, "--out", tmp_path / "l", "--quiet")
    t = table(tmp_path / "l.limits.csv")
    fakes = table(tmp_path / "l.fakes.csv")
    assert "contrast_c90" in t and "delta_mag_c90" in t
    F = fits.getheader(tmp_path / "l.limits.fits", 1)["GLPSFAP"]
    good = np.flatnonzero(np.isfinite(t["contrast_c90"]))
    assert good.size >= 10
    # two separations, inner (c50) and outer (c90): the nested quadrature is slow
    for i, (q, col, mag) in zip(good[[0, -1]], ((0.5, "contrast_c50", "delta_mag_c50"),
                                                (0.9, "contrast_c90", "delta_mag_c90"))):
        tau, dof = t["t_threshold"][i], t["dof"][i]
        assert tau == pytest.approx(stats.t.isf(stats.norm.sf(4), dof), rel=1e-7)
        ref, mean_p = model_contrast(t, i, fakes, 1, F, q)
        assert t[col][i] == pytest.approx(ref, rel=1e-5), (col, t["sep_px"][i])
        assert t[mag][i] == pytest.approx(-2.5 * np.log10(ref), abs=1e-5)
        x_classical = t["contrast"][i] * F / t["noise"][i]
        assert t["completeness"][i] == pytest.approx(mean_p(x_classical), rel=1e-5, abs=1e-9)
    # the header records the model
    hdr = fits.getheader(tmp_path / "l.limits.fits", 1)
    assert hdr["GLCOMPL"] == 0.9 and hdr["GLFPF"] == pytest.approx(stats.norm.sf(4), rel=1e-9)
    assert "doubly noncentral" in hdr["GLCMPREF"]


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
            # issue 6: within 10% of the numpy injection-recovery, full-frame
            # PCA too since its fakes go in by brightness batches (before
            # them: 16% low at 10 px with 8 modes, the fakes of one run
            # sharing the KL basis; now 7%: those of one batch still do)
            assert got == pytest.approx(thr, rel=0.10), checked
    print(method, "fake sep, plane, gloam throughput, numpy injection:", checked)


# ---- 3b. full-frame fakes do not disturb each other ---------------------------

@pytest.fixture(scope="module")
def rdi_small(tmp_path_factory):
    """A small RDI case where the fakes of one run used to disturb each other:
    `gloam simulate` (64 px, 20 frames, 2.5 deg of rotation) with its
    reference star, and a Gaussian off-axis PSF of the simulator's FWHM and
    total flux (as in `sim`), so that companions planted here with numpy are
    the same shape as gloam's fakes. Close in the noise is 10x higher than at
    the edge and so is the fakes' contrast (0.03 at 1 FWHM, 3e-4 at 28 px)."""
    d = tmp_path_factory.mktemp("rdi")
    ok("simulate", d / "s", "--size", 64, "--frames", 20, "--refs", "--ha-start", 4,
       "--cadence", 39, "--exptime", 25, "--quiet")
    fwhm = 4.1  # 1.029 lambda/D at 4 px per lambda/D (Born & Wolf sec. 8.5)
    total = fits.getdata(d / "s" / "psf.fits").astype(float).sum()
    s = fwhm / (2 * np.sqrt(2 * np.log(2)))
    amp = total / (2 * np.pi * s * s)
    write_psf(d / "gpsf.fits", fwhm=fwhm, amp=amp, size=25)
    return d, fwhm, amp, np.loadtxt(d / "s" / "angles.txt")


def test_full_frame_fakes_do_not_disturb_each_other(rdi_small, tmp_path):
    """klip-frame fits its coefficients over the whole frame: a fake 100x
    brighter than another, planted in the same subtraction, moved its
    coefficients and over- or under-subtracted it (measured on this case
    before the brightness batches: c50 jumping by 19x between neighbouring
    separations, 16x in units of the noise term t sigma sqrt(1 + 1/n2) that
    no fake touches, throughput 2.1 at 28 px, 8 of 13 separations without
    c50; with them: 1.02x in units of the noise term beyond 3 FWHM (1.55x
    from 10 to 8 px, where c50 rises towards the cap of the S/N), 2.6x in
    c50 itself where the noise term falls steeply at 8-10 px, throughput
    <= 0.983, 2 of 13 empty). Checked: at most 3 separations without c50,
    all closest in; neighbouring c50 within 1.15x in units of the noise
    term beyond 3 FWHM and within 3x everywhere; throughput <= 1.03 (RDI
    keeps all of a companion outside the few reference modes it resembles);
    and every fake's throughput equal, within 5% (4% measured at 28 px, where
    two fakes up to 3.9x brighter share its subtraction), to an
    injection-recovery done here of that fake alone (numpy Gaussian planted by docs/conventions.md,
    photutils exact aperture on the difference of two `gloam subtract`
    images). Annular subtraction is left as it was: one subtraction per run."""
    d, fwhm, amp, angles = rdi_small
    cube = fits.getdata(d / "s" / "cube.fits").astype(float)
    common = ["--angles", d / "s" / "angles.txt", "--fwhm", fwhm, "--refs", d / "s" / "refs.fits",
              "--method", "klip-frame"]
    r = ok("limits", d / "s" / "cube.fits", *common, "--psf", d / "gpsf.fits",
           "--out", tmp_path / "l")
    t = plane(table(tmp_path / "l.limits.csv"), 1)
    fakes = table(tmp_path / "l.fakes.csv")
    nsub = fits.getheader(tmp_path / "l.limits.fits", 1)["GLFKSUBS"]
    assert nsub > 2 and set(fakes["batch"]) == set(range(1, nsub + 1))
    assert f"fakes planted in {nsub} subtractions, not 2" in r.stderr
    # RDI: the warning about the inner separations does not blame lobes
    assert "self-subtraction lobes" not in r.stderr
    c50 = t["contrast_c50"]
    ok_ = np.isfinite(c50)
    assert ok_.sum() >= c50.size - 3 and np.all(ok_[np.argmax(ok_):])  # empty only close in
    # c50 over the classical noise term t sigma sqrt(1 + 1/n2) (the part of
    # the curve no fake touches, which itself falls 2.6x from 8 to 10 px):
    # what the fakes bring, 1 / (throughput) and the lobes
    n2 = t["dof"] + 1
    # (beyond 3 FWHM: just outside the separations where the S/N caps, c50
    # rises towards that cap)
    far = ok_ & (t["sep_px"] >= 3 * fwhm - 1e-9)
    x = (c50 / (t["t_threshold"] * t["noise"] * np.sqrt(1 + 1 / n2)))[far]
    ratio = np.exp(np.abs(np.diff(np.log(x))))
    assert far.sum() >= 7 and ratio.max() < 1.15, (t["sep_px"][far], c50[far], ratio)
    assert np.exp(np.abs(np.diff(np.log(c50[ok_])))).max() < 3, c50[ok_]
    assert np.nanmax(t["throughput"]) <= 1.03, t["throughput"]
    # each fake against itself alone (numpy planting, photutils aperture)
    ok("subtract", d / "s" / "cube.fits", *common, "--out", tmp_path / "s0.fits", "--quiet")
    base = subtracted(tmp_path / "s0.fits")[0]
    F = fits.getheader(tmp_path / "l.limits.fits", 1)["GLPSFAP"]
    n = cube.shape[-1]
    checked = []
    for sep, pa, con, thr in zip(fakes["sep_px"], fakes["pa_deg"], fakes["contrast"],
                                 fakes["throughput_plane1"]):
        write_cube(tmp_path / "c1.fits", plant(cube, angles, [(sep, pa, con)], fwhm, amp))
        ok("subtract", tmp_path / "c1.fits", *common, "--out", tmp_path / "s1.fits", "--quiet",
           "--overwrite")
        x, y = north_up_xy(sep, pa, n)
        alone = aperture_sums(subtracted(tmp_path / "s1.fits")[0] - base, [x], [y],
                              fwhm / 2)[0] / (con * F)  # photutils
        checked.append((round(sep, 1), con, thr, alone))
    got, want = np.array([c[2] for c in checked]), np.array([c[3] for c in checked])
    assert np.all(np.abs(got - want) <= 0.05 * want), checked
    # the batches are planned serially: same bytes at any thread count (rule 5)
    ok("limits", d / "s" / "cube.fits", *common, "--psf", d / "gpsf.fits",
       "--out", tmp_path / "t2", "--threads", 2, "--quiet")
    ok("limits", d / "s" / "cube.fits", *common, "--psf", d / "gpsf.fits",
       "--out", tmp_path / "t1", "--threads", 1, "--quiet")
    for suffix in (".limits.csv", ".fakes.csv"):
        assert (tmp_path / f"t1{suffix}").read_bytes() == (tmp_path / f"t2{suffix}").read_bytes()
    # klip-rings on the same data: the fakes of a run share no coefficients,
    # one subtraction per run as before
    ok("limits", d / "s" / "cube.fits", *common[:-1], "klip-rings", "--mask-radius", 6,
       "--psf", d / "gpsf.fits", "--out", tmp_path / "a", "--quiet")
    fa = table(tmp_path / "a.fakes.csv")
    assert np.all(fa["batch"] == fa["run"])
    assert fits.getheader(tmp_path / "a.limits.fits", 1)["GLFKSUBS"] == 2


def written_files(stderr):
    """The products a command's "wrote ..." log lines list: each group is a
    file and its twins of the same name, "a.limits.csv (.ecsv, .fits)"."""
    import re
    files = []
    for line in stderr.splitlines():
        m = re.match(r"gloam \w+: wrote (.*)$", line)
        if not m:
            continue
        for first, twins in re.findall(r"(\S+?)(?: \(([^)]*)\))?(?:, |$)", m.group(1)):
            files.append(first)
            stem = first[:first.rindex(".")]
            files += [stem + t for t in twins.split(", ") if t]
    return files


def test_log_lists_every_product(sim, tmp_path):
    """The log names every file limits wrote (the .pdf and the ECSV twins
    included), each once, and nothing it did not write."""
    d, fwhm, amp, angles = sim
    (tmp_path / "c.csv").write_text("sep_px,pa_deg\n12,40\n")
    out = tmp_path / "out"
    out.mkdir()
    r = ok("limits", d / "s" / "cube.fits", "--angles", d / "s" / "angles.txt", "--fwhm", fwhm,
           "--method", "median-frame", "--mask-radius", 4, "--psf", d / "gpsf.fits",
           "--candidates", tmp_path / "c.csv", "--out", out / "l")
    listed = written_files(r.stderr)
    assert len(listed) == len(set(listed)), listed
    assert sorted(listed) == sorted(str(p) for p in out.iterdir()), (listed, r.stderr)
    assert str(out / "l.limits.pdf") in listed and str(out / "l.companions.ecsv") in listed


# ---- 4. statistical calibration ----------------------------------------------

CAL_N, CAL_NF = 64, 30
# separations 2 FWHM apart (independent rings): two in the inner band (2-5
# FWHM), two outside. At 40 degrees 2.5 FWHM has no c50: a companion's own
# self-subtraction lobes cap its S/N below the threshold in most
# realisations up to ~3.5 FWHM (the curve says so by leaving it empty), so
# that band is tested at 4 FWHM.
CAL_SEPS = {40.0: (12.0, 18.0, 24.0), 120.0: (7.5, 13.5, 19.5, 25.5)}
CAL_TRIALS = 60  # pairs of independent cubes, 50% and 95% alternating
SPECKLE = 20.0   # quasi-static speckle rms, in units of the white noise


def cal_realisation(rng, speckles):
    """White Gaussian noise of std 1 (the photon/read noise), plus, with
    `speckles`, two quasi-static speckle patterns fixed on the detector (white
    noise smoothed to the PSF's scale, scipy.ndimage.gaussian_filter, rms
    SPECKLE each) whose weights cos/sin drift through a quarter turn over the
    sequence: what the KL modes are built to model."""
    cube = rng.normal(0, 1, (CAL_NF, CAL_N, CAL_N))
    if speckles:
        from scipy import ndimage
        phi = np.linspace(0, np.pi / 2, CAL_NF) + rng.uniform(0, 2 * np.pi)
        for k, w in enumerate((np.cos(phi), np.sin(phi))):
            pat = ndimage.gaussian_filter(rng.normal(0, 1, (CAL_N, CAL_N)), SIGMA)
            cube += SPECKLE * (pat / pat.std())[None] * w[:, None, None]
    return cube


def calibration_trials(tmp_path, method, span, seed, speckles):
    """Recovery of companions planted at the reported contrast_c50 and
    contrast_c95 (`method`, `span` degrees of rotation). Each trial is a pair
    of independent realisations: `gloam limits` on the first gives the
    curve (its noise estimated from the apertures of that sequence, as a
    user's is), the companions go at that curve's contrasts, one per
    separation at random position angles, into the second; so the scatter of
    the curve's own noise estimate is part of what is tested, the promise
    being the fraction of independent sequences in which a companion at the
    reported contrast is found. Detection: the Mawet et al. 2014 t test at
    the planted position against the other apertures of its ring
    (photutils), against the reported t_threshold, in the first output plane."""
    seps = CAL_SEPS[span]
    rng = np.random.default_rng(seed)
    angles = np.linspace(0, span, CAL_NF)
    a = write_angles(tmp_path / "angles.txt", angles)
    p = tmp_path / "psf.fits"
    write_psf(p)
    cube_path = tmp_path / "cube.fits"
    common = ["--angles", a, "--fwhm", FWHM, *method]
    grid = ["--min-separation", seps[0], "--step", seps[1] - seps[0],
            "--max-separation", seps[-1]]
    hits = {q: np.zeros(len(seps)) for q in (0.5, 0.95)}
    draws = {q: np.zeros(len(seps)) for q in (0.5, 0.95)}
    for trial in range(CAL_TRIALS):
        q = 0.5 if trial % 2 == 0 else 0.95
        write_cube(cube_path, cal_realisation(rng, speckles))
        ok("limits", cube_path, *common, *grid, "--psf", p, "--out", tmp_path / "l", "--quiet",
           "--overwrite")
        t = plane(table(tmp_path / "l.limits.csv"), 1)
        np.testing.assert_allclose(t["sep_px"], seps)
        con = t["contrast_c50" if q == 0.5 else "contrast_c95"]
        pas = rng.uniform(0, 360, len(seps))
        comps = [(s, pa, c) for s, pa, c in zip(seps, pas, con) if np.isfinite(c)]
        write_cube(cube_path, plant(cal_realisation(rng, speckles), angles, comps, FWHM, PSF_AMP))
        ok("subtract", cube_path, *common, "--out", tmp_path / "s.fits", "--quiet",
           "--overwrite")
        img = subtracted(tmp_path / "s.fits")[0]
        for i, (s, pa, c) in enumerate(zip(seps, pas, con)):
            if not np.isfinite(c):
                continue  # the curve says it has no such contrast there
            x, y = north_up_xy(s, pa, CAL_N)
            tval, _ = t_statistic(ring(img, s, theta0=np.arctan2(y - CAL_N // 2, x - CAL_N // 2)))
            hits[q][i] += tval > t["t_threshold"][i]
            draws[q][i] += 1
    return hits, draws


CAL_CELLS = [
    # method, rotation, speckles, indices into CAL_SEPS of the inner (2-5 FWHM)
    # and outer bands tested. With the KLIP methods on speckles the curve is
    # empty at 2.5 FWHM (120 degrees) and 4 FWHM (40 degrees): the KL modes a
    # companion drives spread its flux into the references (ref_spread) so
    # much that the model's S/N saturates below the threshold; those bands
    # are left to the 4.5 FWHM point and the outer band.
    (("--method", "median-frame"), 40.0, False, [0], [1, 2]),
    (("--method", "median-frame"), 120.0, False, [0, 1], [2, 3]),
    (("--method", "klip-frame", "--modes", "3"), 120.0, True, [1], [2, 3]),
    (("--method", "klip-rings", "--modes", "3"), 120.0, True, [1], [2, 3]),
    (("--method", "klip-rings", "--modes", "3"), 40.0, True, [], [1, 2]),
]


@pytest.mark.parametrize("method,span,speckles,inner,outer", CAL_CELLS)
def test_calibration_by_planted_companions(tmp_path, method, span, speckles, inner, outer):
    """contrast_c50 recovered half of the time and contrast_c95 at least 95%
    of the time, in the inner band (2.5 and 4.5 FWHM at 120 degrees, 4 FWHM
    at 40) and outside (6-8.5 FWHM), at 40 and 120 degrees of rotation, for
    median ADI on white noise and both KLIP methods on drifting quasi-static
    speckles 20x the white noise (references.md: statistical calibration;
    Jensen-Clem et al. 2018).

    Binomial expectation (scipy.stats.binomtest), per band and completeness:
    k recoveries of N draws (30 independent pairs of cubes x the band's
    separations) ~ Binomial(N, q); c50 two-sided, c95 one-sided (recovery
    below 95%), each at p > 1e-3. The figures measured are in docs/limits.md."""
    hits, draws = calibration_trials(tmp_path, list(method), span, seed=int(span) + len(method),
                                     speckles=speckles)
    for band, idx in (("inner", inner), ("outer", outer)):
        if not idx:
            continue
        for q, alt in ((0.5, "two-sided"), (0.95, "less")):
            k, nn = int(hits[q][idx].sum()), int(draws[q][idx].sum())
            # the curve has a value in most trials there
            assert nn >= 0.8 * len(idx) * CAL_TRIALS / 2, (method, span, band, q, nn)
            test = stats.binomtest(k, nn, q, alternative=alt)
            print(f"{' '.join(method[1:])}, rotation {span:.0f}, {band}, c{100 * q:.0f}: "
                  f"recovered {k} of {nn} ({k / nn:.2f}), p = {test.pvalue:.3g}")
            assert test.pvalue > 1e-3, (method, span, band, q, k, nn)


def test_false_alarms_at_the_stated_fpf(tmp_path):
    """Companion-free apertures exceed t_threshold at the stated FPF: one
    test aperture at a random angle per separation on companion-free median
    ADI images, --threshold 2 (FPF 2.3%) (Mawet et al. 2014)."""
    rng = np.random.default_rng(77)
    angles = np.linspace(0, 120, CAL_NF)
    a = write_angles(tmp_path / "angles.txt", angles)
    p = tmp_path / "psf.fits"
    write_psf(p)
    common = ["--angles", a, "--fwhm", FWHM, "--method", "median-frame"]
    write_cube(tmp_path / "c.fits", rng.normal(0, 1, (CAL_NF, CAL_N, CAL_N)))
    ok("limits", tmp_path / "c.fits", *common, "--psf", p, "--threshold", 2,
       "--min-separation", FWHM, "--step", FWHM, "--out", tmp_path / "l2", "--quiet")
    t2 = table(tmp_path / "l2.limits.csv")
    fpf = stats.norm.sf(2)
    exceed, ntests, pvals = 0, 0, []
    for r in range(40):
        write_cube(tmp_path / "c.fits", rng.normal(0, 1, (CAL_NF, CAL_N, CAL_N)))
        ok("subtract", tmp_path / "c.fits", *common, "--out", tmp_path / "s.fits", "--quiet",
           "--overwrite")
        img = subtracted(tmp_path / "s.fits")[0]
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


def test_memory_limit_is_checked_not_ignored(tmp_path):
    """limits has no streamed path: a --memory-limit below what it holds (the
    cube and a copy with the fakes) is refused before anything is written; a
    limit it fits in changes nothing in the products."""
    c, a, p = noise_inputs(tmp_path, seed=3, n=48, nf=20)
    rng = np.random.default_rng(5)
    big = write_cube(tmp_path / "big.fits", rng.normal(0, 1, (64, 128, 128)))  # 4 MB float32
    write_angles(tmp_path / "big.txt", np.linspace(0, 90, 64))
    before = sorted(q.name for q in tmp_path.iterdir())
    r = run("limits", big, "--angles", tmp_path / "big.txt", "--psf", p, "--fwhm", FWHM,
            "--method", "median-frame", "--out", tmp_path / "o", "--memory-limit", "2M")
    assert r.returncode == 1 and len(r.stderr.strip().splitlines()) == 1, r.stderr
    assert "big.fits" in r.stderr and "--memory-limit" in r.stderr, r.stderr
    assert "no streamed path" in r.stderr, r.stderr
    assert sorted(q.name for q in tmp_path.iterdir()) == before
    args = ["limits", c, "--angles", a, "--psf", p, "--fwhm", FWHM, "--method", "median-frame"]
    ok(*args, "--out", tmp_path / "free")
    ok(*args, "--out", tmp_path / "capped", "--memory-limit", "1G")
    for ext in [".limits.csv", ".fakes.csv"]:
        assert (tmp_path / f"free{ext}").read_text() == (tmp_path / f"capped{ext}").read_text()
    assert "without the streamed path" in run("limits", "--help").stdout


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
    # the error is statistical only: a companion 100x brighter than the fakes
    # loses relatively less to median ADI than they do (docs/limits.md), so
    # the estimate is biased high by ~10% here; the bound says so
    assert err > 0 and abs(est - comp[2]) / comp[2] < 0.15, (est, err)
    # issue 10: the candidate is left out of the noise, so neither the curve
    # nor contrast_err is inflated 4-5x at its separation: the noise there is
    # within 2x of the companion-free neighbours 2-4 FWHM away and several
    # times below the run without --candidates
    ok("limits", tmp_path / "cube.fits", *common, "--psf", tmp_path / "psf.fits",
       "--out", tmp_path / "lim0")
    t1 = table(tmp_path / "lim.limits.csv")
    t0 = table(tmp_path / "lim0.limits.csv")
    i = int(np.argmin(np.abs(t1["sep_px"] - comp[0])))
    nb = np.abs(t1["sep_px"] - comp[0]) >= 2 * FWHM
    nb &= np.abs(t1["sep_px"] - comp[0]) <= 4 * FWHM
    neighbours = np.sqrt(np.mean(t1["noise"][nb] ** 2))
    # (its self-subtraction lobes, beyond 1 FWHM, still raise it: ~1.6x here)
    assert t1["noise"][i] < 2 * neighbours, (t1["noise"][i], neighbours)
    assert t0["noise"][i] > 3 * t1["noise"][i], (t0["noise"][i], t1["noise"][i])
    assert t1["napertures"][i] < t0["napertures"][i]
    assert t1["contrast_c50"][i] < t0["contrast_c50"][i] / 3
    f = table(tmp_path / "lim.fakes.csv")
    x0, y0 = north_up_xy(det["sep_px"][0], det["pa_deg"][0], n)
    xs, ys = north_up_xy(f["sep_px"], f["pa_deg"], n)
    assert np.min(np.hypot(xs - x0, ys - y0)) > 2 * FWHM


def test_candidate_contrast_noiseless_background(tmp_path):
    """Noiseless physical-optics frames (gloam simulate --no-noise: speckle
    residuals only), klip-rings, median combination: the residual ring sits
    below zero, and a companion's aperture flux must be taken about it. A
    companion planted by gloam inject at 2e-4 (its PREFIX.planted.csv the
    truth): `background` is the mean of the other apertures of its ring and
    `flux` its own, both checked with photutils (CircularAperture,
    method="exact") on the subtracted image (gloam subtract with the same
    options, the image limits measures); contrast = (flux - background) /
    (signal F), F the PSF's aperture sum (photutils); and the contrast
    comes back within 2 contrast_err of the truth (1.78e-4 +- 0.29e-4; the
    flux taken about zero gave 1.68e-4, and the rest is the speckle at that
    place)."""
    from photutils.aperture import aperture_photometry
    d = tmp_path
    ok("simulate", d, "--frames", 30, "--size", 64, "--no-noise", "--seed", 3, "--quiet")
    sep, pa, c = 20.0, 45.0, 2e-4
    ok("inject", d / "cube.fits", "--angles", d / "angles.txt", "--psf", d / "psf.fits",
       "--companion", f"{sep}:{pa}:{c}", "--out", d / "inj.fits", "--quiet")
    truth = table(d / "inj.planted.csv")
    assert truth["contrast"][0] == c
    (d / "c.csv").write_text(f"sep_px,pa_deg\n{sep},{pa}\n")
    sub = ["--angles", d / "angles.txt", "--method", "klip-rings", "--modes", 5,
           "--mask-radius", 6]
    ok("limits", d / "inj.fits", *sub, "--psf", d / "psf.fits", "--candidates", d / "c.csv",
       "--out", d / "lim", "--quiet")
    ok("subtract", d / "inj.fits", *sub, "--psf", d / "psf.fits", "--out", d / "s.fits",
       "--quiet")
    comp = table(d / "lim.companions.csv")
    img = fits.getdata(d / "s.fits").astype(float)
    img = img[0] if img.ndim == 3 else img
    with fits.open(d / "lim.limits.fits") as h:
        fwhm = h[0].header.get("GLFWHM") or h[1].header.get("GLFWHM")
    # the ring of the detection test at the candidate (Mawet et al. 2014):
    # floor(2 pi sep / FWHM) apertures of diameter 1 FWHM, the first on it
    n = int(np.floor(2 * np.pi * sep / fwhm))
    t0 = np.radians(90 + pa)
    th = t0 + 2 * np.pi * np.arange(n) / n
    cx = cy = 32
    pos = np.c_[cx + sep * np.cos(th), cy + sep * np.sin(th)]
    sums = aperture_photometry(img, CircularAperture(pos, fwhm / 2),
                               method="exact")["aperture_sum"].data
    assert comp["flux"][0] == pytest.approx(sums[0], rel=2e-3)
    assert comp["background"][0] == pytest.approx(sums[1:].mean(), rel=2e-3)
    assert comp["background"][0] < 0  # the median-combined ring sits below zero
    # F: the PSF's 1-FWHM aperture sum at its centre (photutils centroid)
    from photutils.centroids import centroid_quadratic
    psf = fits.getdata(d / "psf.fits").astype(float)
    iy, ix = np.unravel_index(np.argmax(psf), psf.shape)
    pc = centroid_quadratic(psf, xpeak=ix, ypeak=iy, fit_boxsize=5)
    F = aperture_photometry(psf, CircularAperture(pc, fwhm / 2),
                            method="exact")["aperture_sum"][0]
    assert comp["contrast"][0] == pytest.approx(
        (comp["flux"][0] - comp["background"][0]) / (comp["signal"][0] * F), rel=0.01)
    assert comp["contrast_err"][0] == pytest.approx(
        comp["noise"][0] * np.sqrt(1 + 1 / (n - 1)) / (comp["signal"][0] * F), rel=0.01)
    est, err = comp["contrast"][0], comp["contrast_err"][0]
    print("contrast", est, "+-", err, "truth", c)
    assert abs(est - c) < 2 * err, (est, err)


def test_candidates_table_without_positions_is_refused(tmp_path):
    cube, angles, psf = noise_inputs(tmp_path)
    (tmp_path / "c.csv").write_text("a,b\n1,2\n")
    before = sorted(p.name for p in tmp_path.iterdir())
    r = run("limits", cube, "--angles", angles, "--psf", psf, "--fwhm", FWHM, "--method",
            "median-frame", "--candidates", tmp_path / "c.csv", "--out", tmp_path / "lim")
    assert r.returncode == 1 and "no sep_px and pa_deg columns" in r.stderr
    assert len(r.stderr.strip().splitlines()) == 1
    assert sorted(p.name for p in tmp_path.iterdir()) == before


def test_skip_flanking_and_its_old_spelling(tmp_path):
    """--skip-flanking leaves the two flanking apertures out of the fakes'
    references (nref = n - 3, Mawet et al. 2014 ring of n apertures) and of
    the threshold's dof; --exclude-adjacent is the old spelling: same bytes,
    one note (docs/names.md)."""
    c, a, p = noise_inputs(tmp_path, seed=21, n=48, nf=20)
    common = ["limits", c, "--angles", a, "--psf", p, "--fwhm", FWHM, "--method", "median-frame"]
    ok(*common, "--out", tmp_path / "n", "--quiet")
    ok(*common, "--skip-flanking", "--out", tmp_path / "s", "--quiet")
    r = ok(*common, "--exclude-adjacent", "--out", tmp_path / "o")
    assert "--exclude-adjacent is the old spelling of --skip-flanking" in r.stderr
    for suffix in (".limits.csv", ".fakes.csv"):
        assert (tmp_path / f"s{suffix}").read_bytes() == (tmp_path / f"o{suffix}").read_bytes()
    fn, fs = table(tmp_path / "n.fakes.csv"), table(tmp_path / "s.fakes.csv")
    n = np.floor(2 * np.pi * fs["sep_px"] / FWHM * (1 + 1e-12))
    assert np.all(fs["nref"] == n - 3) and np.all(fn["nref"] == n - 1)
    tn, ts = table(tmp_path / "n.limits.csv"), table(tmp_path / "s.limits.csv")
    np.testing.assert_array_equal(ts["dof"], tn["dof"] - 2)
    # the flanking apertures hold the fakes' self-subtraction lobes: without
    # them the references spread less
    assert np.median(fs["ref_spread_plane1"] / fs["signal_plane1"]) < \
        np.median(fn["ref_spread_plane1"] / fn["signal_plane1"])

"""gloam detect against photutils, numpy and scipy on the same data.

References named beside each check:
- photutils CircularAperture(method="exact") for the aperture sums;
- Mawet et al. 2014 (ApJ 792, 97) eq. 9 for the two-sample t statistic
  t = (x1 - mean2) / (s2 sqrt(1 + 1/n2)), with n2 - 1 degrees of freedom,
  computed here with numpy from the photutils sums;
- scipy.stats.t.sf / t.isf and scipy.stats.norm.sf for FPF and thresholds;
- astropy.wcs + astropy.coordinates for the sky offsets;
- the position-angle convention of docs/conventions.md.
"""
import os
import shutil
import subprocess

import numpy as np
import pytest
from astropy.coordinates import SkyCoord
from astropy.io import fits
from astropy.wcs import WCS
from photutils.aperture import CircularAperture
from scipy import special, stats

GLOAM = os.environ["GLOAM"]
TOOL = os.path.join(os.environ["GLOAM_TEST_TOOLS"], "detect_tool")


def tool(*args):
    out = subprocess.run([TOOL, *map(str, args)], check=True, capture_output=True, text=True)
    return [list(map(float, line.split())) for line in out.stdout.strip().splitlines()]


def gloam(*args, check=True):
    return subprocess.run([GLOAM, *map(str, args)], check=check, capture_output=True, text=True)


def write(path, data, header=None):
    fits.PrimaryHDU(np.asarray(data, dtype=np.float32), header=header).writeto(path)
    return path


def gaussian_psf(n, x0, y0, fwhm):
    y, x = np.mgrid[0:n, 0:n].astype(float)
    s = fwhm / (2 * np.sqrt(2 * np.log(2)))
    return np.exp(-((x - x0) ** 2 + (y - y0) ** 2) / (2 * s * s))


def airy_psf(n, x0, y0, fwhm):
    # Airy pattern (Born & Wolf sec. 8.5): FWHM = 1.029 lambda/D
    y, x = np.mgrid[0:n, 0:n].astype(float)
    r = np.hypot(x - x0, y - y0) / (fwhm / 1.029)  # in lambda/D
    v = np.pi * r
    with np.errstate(invalid="ignore", divide="ignore"):
        a = np.where(v > 0, (2 * special.j1(v) / v) ** 2, 1.0)
    return a


def mawet_reference(img, x, y, fwhm, exclude=False):
    """t test at (x, y) with photutils exact sums and numpy (Mawet 2014)."""
    n = img.shape[0]
    cx, cy = img.shape[1] // 2, img.shape[0] // 2
    sep = np.hypot(x - cx, y - cy)
    theta = np.arctan2(y - cy, x - cx)
    nap = int(np.floor(2 * np.pi * sep / fwhm))
    k = np.arange(nap)
    ang = theta + 2 * np.pi * k / nap
    pos = np.column_stack([cx + sep * np.cos(ang), cy + sep * np.sin(ang)])
    pos[0] = (x, y)
    sums = np.array([CircularAperture(p, r=fwhm / 2).do_photometry(img, method="exact")[0][0]
                     for p in pos])
    refs = sums[1:]
    if exclude:
        refs = sums[2:-1]
    n2 = len(refs)
    t = (sums[0] - refs.mean()) / (refs.std(ddof=1) * np.sqrt(1 + 1 / n2))
    assert n > 0
    return t, n2


def test_aperture_sums_match_photutils_exact(tmp_path):
    rng = np.random.default_rng(3)
    img = rng.normal(5, 2, (48, 48))
    path = write(tmp_path / "a.fits", img)
    img32 = fits.getdata(path).astype(float)
    for r in (0.4, 1.0, 2.0, 3.7):
        pos = rng.uniform(10, 38, (12, 2))
        ours = np.array(tool("apsum", path, r, *pos.ravel())).ravel()
        ref = CircularAperture(pos, r=r).do_photometry(img32, method="exact")[0]
        # photutils exact, relative 1e-6 (they agree to rounding)
        np.testing.assert_allclose(ours, ref, rtol=1e-6)


@pytest.mark.parametrize("exclude", [False, True])
def test_snr_matches_mawet_ttest_with_photutils(tmp_path, exclude):
    rng = np.random.default_rng(4)
    n, fwhm = 80, 4.0
    img = rng.normal(0, 1, (n, n)) + 6 * gaussian_psf(n, 52.3, 47.1, fwhm)
    path = write(tmp_path / "a.fits", img)
    img32 = fits.getdata(path).astype(float)
    pos = [(52.3, 47.1), (40.0, 52.0), (30.7, 33.2), (45.0, 40.0), (60.2, 20.9)]
    got = tool("snr", path, fwhm, int(exclude), *np.ravel(pos))
    for (x, y), row in zip(pos, got):
        t_ref, n2 = mawet_reference(img32, x, y, fwhm, exclude)
        assert row[6] == n2
        assert row[3] == pytest.approx(t_ref, rel=1e-6, abs=1e-9)
        # FPF: scipy.stats.t.sf with n2 - 1 degrees of freedom
        assert row[4] == pytest.approx(stats.t.sf(t_ref, n2 - 1), rel=1e-6)
        # significance: scipy.stats.norm.isf of that FPF
        assert row[5] == pytest.approx(stats.norm.isf(stats.t.sf(t_ref, n2 - 1)), rel=1e-6)

    # the map of the CLI holds the same values at integer pixels
    gloam("detect", path, "--fwhm", fwhm, "--out", tmp_path / "d", "--quiet",
          *(["--exclude-adjacent"] if exclude else []))
    with fits.open(tmp_path / "d.snr.fits") as hd:
        snr, fpf, sig = hd[0].data, hd["FPF"].data, hd["SIGMA"].data
    for x, y in [(40, 52), (45, 40), (25, 50)]:
        t_ref, n2 = mawet_reference(img32, x, y, fwhm, exclude)
        assert snr[y, x] == pytest.approx(t_ref, rel=1e-5, abs=1e-6)
        assert fpf[y, x] == pytest.approx(stats.t.sf(t_ref, n2 - 1), rel=1e-5)
        assert sig[y, x] == pytest.approx(stats.norm.isf(stats.t.sf(t_ref, n2 - 1)), rel=1e-4)


def test_fpf_equals_scipy_t_sf():
    for t in (-2.0, 0.0, 0.5, 3.0, 7.5, 20.0):
        for dof in (1, 2, 4, 10, 60):
            fpf, sig = tool("fpf", t, dof)[0]
            # scipy.stats.t.sf, same degrees of freedom
            assert fpf == pytest.approx(stats.t.sf(t, dof), rel=1e-9)
    # 5 sigma is FPF 2.867e-7 (conventions; scipy.stats.norm.sf)
    assert tool("sigma", stats.norm.sf(5))[0][0] == pytest.approx(5, rel=1e-9)


@pytest.mark.parametrize("excl", [0, 1])
def test_thresholds_at_small_separations(excl):
    # Mawet et al. 2014: at r lambda/D (r FWHM with d = 1 FWHM) there are
    # n = floor(2 pi r) apertures, n2 = n - 1 references (n - 3 without the
    # two neighbours), n2 - 1 dof; the threshold keeping the Gaussian 5-sigma
    # (or 1, 2, 3-sigma) FPF is t.isf(norm.sf(sigma), n2 - 1), and in units
    # of the references' spread t sqrt(1 + 1/n2).
    fwhm = 4.0
    for r in (1, 2, 3, 5):
        n2 = int(np.floor(2 * np.pi * r)) - 1 - 2 * excl
        for sigma in (1, 2, 3, 5):
            t, factor, dof = tool("threshold", sigma, r * fwhm, fwhm, excl)[0]
            t_ref = stats.t.isf(stats.norm.sf(sigma), n2 - 1)
            assert dof == n2 - 1
            assert t == pytest.approx(t_ref, rel=1e-7)
            assert factor == pytest.approx(t_ref * np.sqrt(1 + 1 / n2), rel=1e-7)
    # the penalty is large close in: at 1 lambda/D and 5 sigma, t > 2x Gaussian
    assert tool("threshold", 5, fwhm, fwhm, 0)[0][0] > 10


def test_gaussian_noise_false_alarm_rate(tmp_path):
    """Independent trials on white Gaussian noise: one test position per
    separation, separations two diameters apart, so that no two trials share
    an aperture (the apertures of one ring are one set of draws; the pixels
    of a map are strongly correlated and are not independent trials). Each
    trial is a t test with known dof, so the fraction above the 3-sigma
    threshold must match FPF = norm.sf(3) within binomial error."""
    rng = np.random.default_rng(5)
    n, fwhm, nimg = 96, 2.0, 1500
    cube = rng.normal(0, 1, (nimg, n, n)).astype(np.float32)
    path = tmp_path / "noise.fits"
    fits.PrimaryHDU(cube).writeto(path)
    seps = np.arange(2.5, n / 2 - 2, 2 * fwhm)
    ang = rng.uniform(0, 2 * np.pi, seps.size)
    pos = np.column_stack([n // 2 + seps * np.cos(ang), n // 2 + seps * np.sin(ang)])
    rows = np.array(tool("snr", path, fwhm, 0, *pos.ravel()))
    assert np.all(np.isfinite(rows[:, 3]))
    dof = rows[:, 6] - 1
    fpf = stats.t.sf(rows[:, 3], dof)
    # the tool's FPF is scipy's
    np.testing.assert_allclose(rows[:, 4], fpf, rtol=1e-6)
    p = stats.norm.sf(3)
    thr = stats.t.isf(p, dof)
    ntrial = rows.shape[0]
    k = int(np.sum(rows[:, 3] > thr))
    # two-sided binomial test at the 0.1 % level (scipy.stats.binomtest)
    print("3-sigma exceedances", k, "of", ntrial, "expected", p * ntrial)
    assert stats.binomtest(k, ntrial, p).pvalue > 1e-3, (k, ntrial, p * ntrial)
    # and the whole distribution: FPF values of independent trials are
    # uniform (Kolmogorov-Smirnov, scipy.stats.kstest)
    assert stats.kstest(fpf, "uniform").pvalue > 1e-3


def test_no_candidates_at_5_sigma_in_noise(tmp_path):
    rng = np.random.default_rng(6)
    for i in range(3):
        path = write(tmp_path / f"n{i}.fits", rng.normal(0, 1, (128, 128)))
        gloam("detect", path, "--fwhm", 3, "--out", tmp_path / f"d{i}", "--quiet")
        lines = open(tmp_path / f"d{i}.candidates.csv").read().strip().splitlines()
        assert lines[0].startswith("rank,x,y,sep_px,")
        assert len(lines) == 1, lines


def read_csv(path):
    lines = open(path).read().strip().splitlines()
    names = lines[0].split(",")
    rows = [dict(zip(names, [float(v) if v else np.nan for v in l.split(",")]))
            for l in lines[1:]]
    return names, rows


@pytest.mark.parametrize("psf", [gaussian_psf, airy_psf])
def test_planted_sources_recovered(tmp_path, psf):
    rng = np.random.default_rng(7)
    n, fwhm = 128, 4.0
    cx = cy = n // 2
    truth = [(15.0, 30.0, 40.0), (28.3, 147.0, 25.0), (41.7, 262.5, 30.0)]  # sep, pa, amp
    img = rng.normal(0, 1, (n, n))
    for sep, pa, amp in truth:
        a = np.deg2rad(90 + pa)  # north-up: pa counter-clockwise from +y
        img += amp * psf(n, cx + sep * np.cos(a), cy + sep * np.sin(a), fwhm)
    h = fits.Header()
    h["CTYPE1"], h["CTYPE2"] = "RA---TAN", "DEC--TAN"
    h["CRPIX1"], h["CRPIX2"] = cx + 1.0, cy + 1.0
    h["CRVAL1"], h["CRVAL2"] = 83.82, -5.39
    h["CD1_1"], h["CD1_2"], h["CD2_1"], h["CD2_2"] = -3.4e-6, 0.0, 0.0, 3.4e-6
    path = write(tmp_path / "p.fits", img, h)
    gloam("detect", path, "--fwhm", fwhm, "--out", tmp_path / "d", "--quiet")
    names, rows = read_csv(tmp_path / "d.candidates.csv")
    for col in ("x", "y", "sep_px", "pa_deg", "snr", "fpf"):
        assert col in names
    assert len(rows) == 3, rows
    snrs = [r["snr"] for r in rows]
    assert snrs == sorted(snrs, reverse=True)  # best first
    w = WCS(fits.getheader(path))
    star = w.pixel_to_world(cx, cy)
    for sep, pa, amp in truth:
        a = np.deg2rad(90 + pa)
        tx, ty = cx + sep * np.cos(a), cy + sep * np.sin(a)
        r = min(rows, key=lambda r: np.hypot(r["x"] - tx, r["y"] - ty))
        assert r["snr"] > 20
        assert np.hypot(r["x"] - tx, r["y"] - ty) < 0.2
        dpa = (r["pa_deg"] - pa + 180) % 360 - 180
        assert abs(dpa) < 0.5
        # pa from the reported position (conventions.md)
        pa_xy = np.degrees(np.arctan2(-(r["x"] - cx), r["y"] - cy)) % 360
        assert r["pa_deg"] == pytest.approx(pa_xy, abs=1e-6)
        assert r["sep_arcsec"] == pytest.approx(r["sep_px"] * 0.01224, rel=1e-3)
        # sky offsets: astropy's offsets of the candidate from the star
        c = w.pixel_to_world(r["x"], r["y"])
        dra, ddec = star.spherical_offsets_to(c)
        assert r["dra_arcsec"] == pytest.approx(dra.arcsec, abs=1e-4)
        assert r["ddec_arcsec"] == pytest.approx(ddec.arcsec, abs=1e-4)
    # the S/N map keeps the input's WCS
    wm = WCS(fits.getheader(tmp_path / "d.snr.fits"))
    assert wm.pixel_to_world(10, 20).separation(w.pixel_to_world(10, 20)).arcsec < 1e-9
    we = WCS(fits.getheader(tmp_path / "d.snr.fits", "FPF"))
    assert we.pixel_to_world(10, 20).separation(w.pixel_to_world(10, 20)).arcsec < 1e-9
    # the same table as FITS
    tab = fits.getdata(tmp_path / "d.candidates.fits", "CANDIDATES")
    np.testing.assert_allclose(tab["snr"], snrs, rtol=1e-9)


def test_multi_plane_and_every_plane(tmp_path):
    rng = np.random.default_rng(8)
    n, fwhm = 96, 4.0
    src = gaussian_psf(n, 30.2, 60.4, fwhm)
    cube = np.stack([rng.normal(0, 1, (n, n)) + a * src for a in (5, 30, 15)])
    path = tmp_path / "c.fits"
    h = fits.Header()
    h["WCSAXES"] = 3  # celestial axes plus a plane axis
    for k, v in dict(CTYPE1="RA---TAN", CTYPE2="DEC--TAN", CTYPE3="MODES", CRPIX1=49.0,
                     CRPIX2=49.0, CRPIX3=1.0, CRVAL1=10.0, CRVAL2=20.0, CRVAL3=1.0,
                     CDELT1=-3e-6, CDELT2=3e-6, CDELT3=1.0).items():
        h[k] = v
    fits.PrimaryHDU(cube.astype(np.float32), header=h).writeto(path)
    gloam("detect", path, "--fwhm", fwhm, "--out", tmp_path / "d", "--plane", 2,
          "--every-plane", "--quiet")
    names, rows = read_csv(tmp_path / "d.candidates.csv")
    assert names[-3:] == ["snr_plane1", "snr_plane2", "snr_plane3"]
    assert len(rows) == 1
    r = rows[0]
    assert r["snr_plane2"] == pytest.approx(r["snr"], rel=1e-9)
    assert r["snr_plane1"] < r["snr_plane3"] < r["snr_plane2"]
    assert fits.getheader(tmp_path / "d.snr.fits")["GLDPLANE"] == 2
    # the maps keep the celestial part of the WCS (astropy.wcs), and the
    # offsets agree with astropy's
    w_in = WCS(h).celestial
    for ext in ("SNR", "FPF", "SIGMA"):
        w = WCS(fits.getheader(tmp_path / "d.snr.fits", ext))
        assert w.naxis == 2
        assert w.pixel_to_world(5, 7).separation(w_in.pixel_to_world(5, 7)).arcsec < 1e-9
    dra, ddec = w_in.pixel_to_world(48, 48).spherical_offsets_to(w_in.pixel_to_world(r["x"], r["y"]))
    assert r["dra_arcsec"] == pytest.approx(dra.arcsec, abs=1e-4)
    assert r["ddec_arcsec"] == pytest.approx(ddec.arcsec, abs=1e-4)
    # FITS Standard 4.0 conformance: fitsverify, 0 errors (references.md)
    if shutil.which("fitsverify"):
        for f in ("d.snr.fits", "d.candidates.fits"):
            res = subprocess.run(["fitsverify", "-q", str(tmp_path / f)], capture_output=True,
                                 text=True)
            assert "verification OK" in res.stdout, res.stdout


def test_same_output_for_any_thread_count(tmp_path):
    rng = np.random.default_rng(9)
    img = rng.normal(0, 1, (100, 100)) + 20 * gaussian_psf(100, 31.4, 62.2, 3.0)
    path = write(tmp_path / "a.fits", img)
    for t in (1, 2):
        gloam("detect", path, "--fwhm", 3, "--out", tmp_path / f"t{t}", "--threads", t, "--quiet")
    for ext in ("SNR", "FPF", "SIGMA"):
        a = fits.getdata(tmp_path / "t1.snr.fits", ext)
        b = fits.getdata(tmp_path / "t2.snr.fits", ext)
        assert np.array_equal(a, b, equal_nan=True)
    assert open(tmp_path / "t1.candidates.csv").read() == open(tmp_path / "t2.candidates.csv").read()


def bad_input_case(tmp_path, kind):
    p = tmp_path / f"{kind}.fits"
    args = ["--fwhm", "3"]
    if kind == "one_d":
        fits.PrimaryHDU(np.zeros(50, np.float32)).writeto(p)
    elif kind == "empty":
        fits.PrimaryHDU().writeto(p)
    elif kind == "plane":
        fits.PrimaryHDU(np.zeros((2, 40, 40), np.float32)).writeto(p)
        args += ["--plane", "3"]
    elif kind == "fwhm":
        fits.PrimaryHDU(np.zeros((40, 40), np.float32)).writeto(p)
        args = ["--fwhm", "10.5"]
    elif kind == "nan":
        fits.PrimaryHDU(np.full((40, 40), np.nan, np.float32)).writeto(p)
    return p, args


@pytest.mark.parametrize("kind", ["one_d", "empty", "plane", "fwhm", "nan"])
def test_bad_input(tmp_path, kind):
    p, args = bad_input_case(tmp_path, kind)
    before = open(p, "rb").read()
    out = tmp_path / "out"
    res = gloam("detect", p, *args, "--out", out, check=False)
    assert res.returncode == 1
    lines = res.stderr.strip().splitlines()
    assert len(lines) == 1 and str(p) in lines[0], res.stderr
    assert sorted(os.listdir(tmp_path)) == [p.name]  # nothing written
    assert open(p, "rb").read() == before


def test_existing_product_not_overwritten(tmp_path):
    path = write(tmp_path / "a.fits", np.random.default_rng(1).normal(0, 1, (40, 40)))
    (tmp_path / "d.candidates.csv").write_text("keep\n")
    res = gloam("detect", path, "--fwhm", 3, "--out", tmp_path / "d", check=False)
    assert res.returncode == 1 and "exists" in res.stderr
    assert (tmp_path / "d.candidates.csv").read_text() == "keep\n"
    assert not (tmp_path / "d.snr.fits").exists()


def test_too_long_prefix_refused(tmp_path):
    # a prefix longer than the product-name buffer used to be cut short
    # silently; now it is refused with one line saying so
    path = write(tmp_path / "a.fits", np.random.default_rng(1).normal(0, 1, (40, 40)))
    res = gloam("detect", path, "--fwhm", 3, "--out", str(tmp_path / ("p" * 5000)), check=False)
    assert res.returncode == 1, res.stderr
    lines = res.stderr.strip().splitlines()
    assert len(lines) == 1 and "too long" in lines[0], res.stderr
    assert sorted(os.listdir(tmp_path)) == ["a.fits"]


def test_summary_marks_candidates_below_the_threshold(tmp_path):
    """The printed table says which candidates fall under the threshold at
    their fitted position (their S/N-map peak passed): exactly the rows whose
    sigma is below it, and a note says what the mark means."""
    rng = np.random.default_rng(8)
    path = write(tmp_path / "n.fits", rng.normal(0, 1, (96, 96)))
    thr = 2.5
    r = gloam("detect", path, "--fwhm", 3, "--threshold", thr, "--out", tmp_path / "d",
              "--title", "Tarn-12")
    rows = [ln.split() for ln in r.stdout.splitlines() if ln[:4].strip().isdigit()]
    assert rows, r.stdout
    marked = 0
    for row in rows:
        below = float(row[7]) < thr
        assert (row[-1] == "below") == below, row
        marked += below
    assert ("marked below" in r.stdout) == (marked > 0)
    assert r.stdout.splitlines()[0].startswith(f"{len(rows)} candidate")

"""gloam simulate against outside references.

References:
- Meeus, Astronomical Algorithms, 2nd ed., eq. 14.1:
  tan q = sin H / (tan phi cos dec - sin dec cos H).
- astropy's apparent place (ICRS -> TETE, apparent sidereal time) for the
  observed hour angle and declination, and astroplan Observer.parallactic_angle
  for the angle itself (UT1 = UTC as in the simulator), offline.
- conventions.md: a source at sky PA pa and separation s appears in raw frame i
  at 90 + pa + theta_i degrees counter-clockwise from +x about (nx/2, ny/2).
- fitsverify (HEASARC, Debian package fitsverify): 0 errors on every product.
- astropy.io.fits / astropy.wcs read the products.
"""
import os
import subprocess
import warnings

import numpy as np
import pytest
from astropy.io import fits

GLOAM = os.environ.get("GLOAM", "gloam")
FAST = ["--size", "48", "--subexposures", "2"]


def simulate(out, *args, check=True):
    p = subprocess.run([GLOAM, "simulate", str(out), "--quiet", *map(str, args)],
                       capture_output=True, text=True)
    if check:
        assert p.returncode == 0, p.stderr
    return p


def read_csv(path):
    with open(path) as f:
        names = f.readline().strip().split(",")
        rows = [list(map(float, line.split(","))) for line in f if line.strip()]
    return {n: np.array([r[i] for r in rows]) for i, n in enumerate(names)}


# ---- parallactic angles -----------------------------------------------------

def test_angles_meeus_and_astroplan(tmp_path):
    out = tmp_path / "seq"
    # two hours centred near the meridian: both signs of the hour angle
    simulate(out, "--frames", 12, "--size", 20, "--subexposures", 1, "--no-noise",
             "--cadence", 600, "--ha-start", -1.0, "--static-nm", 0, "--ao-nm", 0,
             "--quasi-nm", 0)
    ang = np.loadtxt(out / "angles.txt")
    tab = read_csv(out / "frames.csv")
    hdr = fits.getheader(out / "cube.fits")
    assert len(ang) == 12
    np.testing.assert_allclose(tab["angle_deg"], ang, atol=1e-6)
    H = np.radians(tab["hour_angle_deg"])
    assert H.min() < 0 < H.max()
    # observed declination of each frame (the header's DEC is ICRS)
    phi, dec = np.radians(hdr["OBSGEO-B"]), np.radians(tab["declination_deg"])
    assert np.all(np.abs(tab["declination_deg"] - hdr["DEC"]) < 0.5)
    # Meeus eq. 14.1
    q = np.degrees(np.arctan2(np.sin(H), np.tan(phi) * np.cos(dec) - np.sin(dec) * np.cos(H)))
    np.testing.assert_allclose(ang, q, atol=0.01)

    # astroplan, offline; the hour angle comes from DATE-OBS, RA and the site
    from astropy.utils import iers
    iers.conf.auto_download = False
    import astropy.units as u
    from astropy.coordinates import TETE, EarthLocation, SkyCoord
    from astropy.time import Time, TimeDelta
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        from astroplan import FixedTarget, Observer
        loc = EarthLocation.from_geodetic(hdr["OBSGEO-L"] * u.deg, hdr["OBSGEO-B"] * u.deg,
                                          hdr["OBSGEO-H"] * u.m)
        obs = Observer(location=loc)
        t = Time(hdr["DATE-OBS"], scale="utc") + TimeDelta(tab["time_s"], format="sec")
        t.delta_ut1_utc = 0.0  # the simulator takes UT1 = UTC
        icrs = SkyCoord(hdr["RA"] * u.deg, hdr["DEC"] * u.deg, frame="icrs")
        pa = []
        for i, ti in enumerate(t):
            app = icrs.transform_to(TETE(obstime=ti, location=loc))  # apparent place
            lst = ti.sidereal_time("apparent", longitude=loc.lon)
            # the simulator's observed hour angle and declination (ERFA) agree
            # with astropy's apparent place to far below the 0.01 deg goal
            ha = ((lst - app.ra).deg + 180) % 360 - 180
            assert abs(ha - tab["hour_angle_deg"][i]) < 1e-5
            assert abs(app.dec.deg - tab["declination_deg"][i]) < 1e-5
            # astroplan takes H from the MEAN sidereal time, so its RA must be
            # referred to the mean equinox: subtract the equation of the equinoxes
            eqeq = lst - ti.sidereal_time("mean", longitude=loc.lon)
            mean_eq = SkyCoord(app.ra - eqeq, app.dec)
            pa.append(obs.parallactic_angle(ti, mean_eq).to(u.deg).value)
        pa = np.array(pa)
    np.testing.assert_allclose(ang, pa, atol=0.01)
    # field rotation across the meridian is tens of degrees for the default
    assert abs(ang[-1] - ang[0]) > 20


# ---- companions ---------------------------------------------------------------

def test_companion_positions_and_flux(tmp_path):
    common = ["--frames", 4, "--size", 64, "--subexposures", 1, "--no-noise",
              "--static-nm", 0, "--quasi-nm", 0, "--ao-nm", 0, "--cadence", 600]
    sep, pa, con = 19.4, 127.3, 1e-3
    simulate(tmp_path / "with", *common, "--companion", f"{sep}:{pa}:{con}")
    simulate(tmp_path / "without", *common)
    a = fits.getdata(tmp_path / "with" / "cube.fits").astype(float)
    b = fits.getdata(tmp_path / "without" / "cube.fits").astype(float)
    psf = fits.getdata(tmp_path / "with" / "psf.fits").astype(float)
    ang = np.loadtxt(tmp_path / "with" / "angles.txt")
    truth = read_csv(tmp_path / "with" / "truth.csv")
    np.testing.assert_allclose([truth["sep_px"][0], truth["pa_deg"][0], truth["contrast"][0]],
                               [sep, pa, con])
    c = 32
    # north-up position: pa = atan2(-(x - cx), y - cy) (conventions.md)
    pa_nu = np.degrees(np.arctan2(-(truth["x_north_up"][0] - c), truth["y_north_up"][0] - c)) % 360
    assert abs(pa_nu - pa) < 1e-6
    y, x = np.mgrid[0:64, 0:64].astype(float)
    psf_ap = psf[np.hypot(x - c, y - c) <= 6].sum()
    for i in range(4):
        th = np.radians(90 + pa + ang[i])
        ex, ey = c + sep * np.cos(th), c + sep * np.sin(th)
        d = a[i] - b[i]
        cx, cy = ex, ey
        for _ in range(3):
            m = np.hypot(x - cx, y - cy) <= 8
            cx, cy = (d[m] * x[m]).sum() / d[m].sum(), (d[m] * y[m]).sum() / d[m].sum()
        assert np.hypot(cx - ex, cy - ey) < 0.05, (i, cx, cy, ex, ey)
        # contrast = companion flux / star flux (same aperture, 6 px radius)
        flux = d[np.hypot(x - ex, y - ey) <= 6].sum()
        assert abs(flux / psf_ap / con - 1) < 0.02
    assert abs(ang[-1] - ang[0]) > 5


# ---- products -----------------------------------------------------------------

def fitsverify_ok(path):
    p = subprocess.run(["fitsverify", "-q", str(path)], capture_output=True, text=True)
    assert p.returncode == 0 and "verification OK" in p.stdout, p.stdout + p.stderr


def test_products_verify_and_read(tmp_path):
    out = tmp_path / "seq"
    simulate(out, "--frames", 5, *FAST, "--refs", "--jitter", 5, "--spots", 8,
             "--companion", "12:45:1e-4", "--companion", "20:200:3e-5")
    for name in ["cube.fits", "psf.fits", "refs.fits"]:
        fitsverify_ok(out / name)
    cube = fits.getdata(out / "cube.fits")
    assert cube.shape == (5, 48, 48) and cube.dtype.kind == "f" and cube.dtype.itemsize == 4
    assert np.isfinite(cube).all()
    assert fits.getdata(out / "psf.fits").shape == (48, 48)
    assert fits.getdata(out / "refs.fits").shape == (5, 48, 48)
    hdr = fits.getheader(out / "cube.fits")
    assert hdr["BUNIT"] == "electron" and hdr["EXPTIME"] == 60
    assert fits.getheader(out / "psf.fits")["PSFSCALE"] == 1.0
    # the celestial WCS: the star pixel is (RA, DEC); north of frame 0 is at
    # 90 + theta_0 degrees from +x, one pixel = PIXSCAL mas
    from astropy.wcs import WCS
    with warnings.catch_warnings():
        # wcslib notes that it derives OBSGEO-X/Y/Z from OBSGEO-L/B/H
        warnings.simplefilter("ignore", category=fits.verify.VerifyWarning)
        warnings.filterwarnings("ignore", message=".*obsfix.*")
        w = WCS(hdr).celestial
    ra, dec = w.wcs_pix2world([[24, 24]], 0)[0]
    assert abs(ra - hdr["RA"]) < 1e-9 and abs(dec - hdr["DEC"]) < 1e-9
    th = np.radians(90 + np.loadtxt(out / "angles.txt")[0])
    _, dec1 = w.wcs_pix2world([[24 + 10 * np.cos(th), 24 + 10 * np.sin(th)]], 0)[0]
    assert abs((dec1 - dec) * 3.6e6 - 10 * hdr["PIXSCAL"]) < 1e-3 * hdr["PIXSCAL"]
    tab = read_csv(out / "frames.csv")
    assert list(tab) == ["frame", "angle_deg", "star_x", "star_y", "hour_angle_deg",
                         "declination_deg", "time_s"]
    assert np.std(tab["star_x"] - 24) > 0.05  # jitter recorded
    truth = read_csv(out / "truth.csv")
    assert len(truth["sep_px"]) == 2


def test_multichannel_speckles_scale_with_wavelength(tmp_path):
    out = tmp_path / "ifs"
    l1, l2 = 1.5, 1.9
    simulate(out, "--frames", 2, "--size", 96, "--subexposures", 1, "--no-noise",
             "--wavelengths", f"{l1},{l2}", "--ao-nm", 0, "--quasi-nm", 0, "--static-nm", 40)
    cube = fits.getdata(out / "cube.fits").astype(float)
    assert cube.shape == (2, 2, 96, 96)
    fitsverify_ok(out / "cube.fits")
    fitsverify_ok(out / "psf.fits")
    assert fits.getdata(out / "psf.fits").shape == (2, 96, 96)
    hdr = fits.getheader(out / "cube.fits")
    assert hdr["WAVEL1"] == l1 and hdr["WAVEL2"] == l2
    c = 48
    y, x = np.mgrid[0:96, 0:96].astype(float)

    def spot_sep(img, guess):
        # centroid of the +x spot (satellite spots: sinusoidal pupil phase)
        cx = c + guess
        for _ in range(3):
            m = np.hypot(x - cx, y - c) <= 4
            cx = (img[m] * x[m]).sum() / img[m].sum()
        return cx - c

    # satellite spots alone (no speckles to bias the centroids): their
    # separation in pixels grows as lambda
    spots = tmp_path / "spots"
    simulate(spots, "--frames", 1, "--size", 96, "--subexposures", 1, "--no-noise",
             "--wavelengths", f"{l1},{l2}", "--ao-nm", 0, "--quasi-nm", 0, "--static-nm", 0,
             "--spots", 7)
    sp = fits.getdata(spots / "cube.fits").astype(float)
    s1 = spot_sep(sp[0, 0], 7 * 4)
    s2 = spot_sep(sp[0, 1], 7 * 4 * l2 / l1)
    assert abs(s1 - 28) < 0.05 and abs(s2 / s1 - l2 / l1) < 0.002
    # the whole speckle field: channel 2 shrunk by l1/l2 about the star
    # matches channel 1 far better than unscaled (fixed OPD, phase ~ 1/lambda)
    from scipy import ndimage
    k = l2 / l1
    shrunk = ndimage.affine_transform(cube[0, 1], np.diag([k, k]), offset=[c - k * c, c - k * c], order=3)
    ring = (np.hypot(x - c, y - c) > 10) & (np.hypot(x - c, y - c) < 30)
    corr = lambda u, v: np.corrcoef(u[ring], v[ring])[0, 1]
    assert corr(cube[0, 0], shrunk) > 0.9
    assert corr(cube[0, 0], shrunk) > corr(cube[0, 0], cube[0, 1]) + 0.2


def test_default_regime(tmp_path):
    """Raw coronagraphic contrast of the default scenario, relative to the
    off-axis PSF peak: about 1e-3 at 2-3 lambda/D and 1e-4 at 5-10 lambda/D
    (typical extreme-AO numbers, from memory, common practice), and companions
    of 1e-5 far below the raw speckles."""
    out = tmp_path / "seq"
    simulate(out, "--frames", 3, "--no-noise")
    cube = fits.getdata(out / "cube.fits").astype(float)
    peak = fits.getdata(out / "psf.fits").max()
    y, x = np.mgrid[0:128, 0:128]
    r = np.hypot(x - 64, y - 64) / 4.0  # lambda/D at 4 pixels per lambda/D
    near = cube[0][(r >= 2) & (r < 3)].mean() / peak
    far = cube[0][(r >= 5) & (r < 10)].mean() / peak
    assert 4e-4 < near < 3e-3, near
    assert 3e-5 < far < 3e-4, far
    # speckle fluctuations dwarf a 1e-5 companion at every separation
    assert cube[0][(r >= 5) & (r < 10)].std() / peak > 1e-5


def test_deterministic_for_a_seed(tmp_path):
    simulate(tmp_path / "a", "--frames", 4, *FAST, "--seed", 7, "--threads", 1)
    simulate(tmp_path / "b", "--frames", 4, *FAST, "--seed", 7, "--threads", 2)
    simulate(tmp_path / "c", "--frames", 4, *FAST, "--seed", 8)
    a, b, c = (fits.getdata(tmp_path / d / "cube.fits") for d in "abc")
    assert np.array_equal(a, b)
    assert not np.array_equal(a, c)


# ---- bad input ----------------------------------------------------------------

def one_line_failure(p, word):
    assert p.returncode == 1, p.stderr
    lines = p.stderr.strip().splitlines()
    assert len(lines) == 1 and word in lines[0], p.stderr


def test_bad_input(tmp_path):
    blocker = tmp_path / "afile"
    blocker.write_text("x")
    # unwritable output folder: its parent is a file
    one_line_failure(simulate(blocker / "out", *FAST, check=False), "afile")
    # DIR itself is a file
    one_line_failure(simulate(blocker, *FAST, check=False), "afile")
    # bad --companion syntax, unknown option: nothing written, DIR not made
    one_line_failure(simulate(tmp_path / "x", "--companion", "10:20", check=False), "companion")
    one_line_failure(simulate(tmp_path / "x", "--companion", "a:b:c", check=False), "companion")
    one_line_failure(simulate(tmp_path / "x", "--wobble", "3", check=False), "wobble")
    one_line_failure(simulate(tmp_path / "x", "--frames", "0", check=False), "--frames")
    # frames under 4 FWHM (1.03 lambda/D, Airy: Born & Wolf sec. 8.5.2) hold nothing to detect
    one_line_failure(simulate(tmp_path / "x", "--size", "10", check=False),
                     "--size 10: frames under 4 FWHM wide (FWHM 4.1 px at --sampling 4)")
    assert not (tmp_path / "x").exists()
    # existing products are kept without --overwrite
    out = tmp_path / "seq"
    simulate(out, "--frames", 2, *FAST)
    before = {f: (out / f).read_bytes() for f in os.listdir(out)}
    one_line_failure(simulate(out, "--frames", 3, *FAST, check=False), "overwrite")
    assert {f: (out / f).read_bytes() for f in os.listdir(out)} == before
    simulate(out, "--frames", 3, *FAST, "--overwrite")
    assert fits.getdata(out / "cube.fits").shape[0] == 3

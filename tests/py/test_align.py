"""gloam align against outside references on the same data.

References:
- skimage.registration.phase_cross_correlation(upsample_factor=100,
  normalization=None): the Guizar-Sicairos, Thurman & Fienup 2008
  (Opt. Lett. 33, 156) algorithm, plain cross-correlation as in the paper;
- astropy.modeling Gaussian2D + Const2D (theta fixed at 0) and Moffat2D +
  Const2D fitted with LevMarLSQFitter on the same stamp; Gaussian
  FWHM = 2 sqrt(2 ln 2) sigma; Moffat 1969 (A&A 3, 455) profile
  A (1 + r^2/alpha^2)^-beta (astropy's gamma = alpha, astropy's alpha = beta);
- Meeus, Astronomical Algorithms 2nd ed., eq. 14.1, with the same hour angle;
  astroplan Observer.parallactic_angle (offline IERS) for the apparent place;
- known injected sub-pixel jitter (issue 3: rms < 0.02 px unsaturated,
  < 0.1 px with satellite spots).
"""
import os
import subprocess

import numpy as np
import pytest
from astropy.io import fits

GLOAM = os.environ["GLOAM"]
TOOL = os.path.join(os.environ["GLOAM_TEST_TOOLS"], "align_tool")


def star(n, x0, y0, kind="gauss"):
    y, x = np.mgrid[0:n, 0:n].astype(float)
    r = np.hypot(x - x0, y - y0)
    if kind == "gauss":
        return 1000 * np.exp(-0.5 * r**2 / 1.8**2)
    if kind == "moffat":
        return 1000 * (1 + r**2 / 2.5**2) ** -2.5
    if kind == "airy":
        from scipy.special import j1
        u = np.pi * r / 2.0
        with np.errstate(invalid="ignore", divide="ignore"):
            a = np.where(u < 1e-8, 1.0, 2 * j1(u) / u)
        return 1000 * a**2
    # coronagraphic halo with a dark centre and four satellite spots
    img = 300 * np.exp(-r / 8) * (1 - np.exp(-0.5 * r**2 / 9))
    for k in range(4):
        a = np.pi / 4 + k * np.pi / 2
        sx, sy = x0 + 14 * np.cos(a), y0 + 14 * np.sin(a)
        img += 150 * np.exp(-0.5 * ((x - sx) ** 2 + (y - sy) ** 2) / 2.0)
    return img


def jitter_cube(n, nf, kind, noise, jitter, seed):
    rng = np.random.default_rng(seed)
    tx = n // 2 + 0.3 + rng.uniform(-jitter, jitter, nf)
    ty = n // 2 - 0.2 + rng.uniform(-jitter, jitter, nf)
    cube = np.array([star(n, a, b, kind) + 5 + rng.normal(0, noise, (n, n))
                     for a, b in zip(tx, ty)])
    return cube.astype(np.float32), tx, ty


def write(path, data, header=None):
    fits.PrimaryHDU(np.asarray(data, np.float32), header=header).writeto(path, overwrite=True)


def run(*args, ok=True):
    p = subprocess.run([GLOAM, "align", *map(str, args)], capture_output=True, text=True)
    if ok:
        assert p.returncode == 0, p.stderr
    return p


def read_table(path):
    return np.genfromtxt(path, delimiter=",", names=True, dtype=None, encoding=None)


# ---- registration against scikit-image ----------------------------------------

@pytest.mark.parametrize("n,kind", [(64, "gauss"), (65, "airy"), (64, "spots")])
def test_xcorr_matches_phase_cross_correlation(tmp_path, n, kind):
    from skimage.registration import phase_cross_correlation
    cube, tx, ty = jitter_cube(n, 6, kind, 2.0, 3.0, 1)
    ref = cube[0]
    write(tmp_path / "ref.fits", ref)
    write(tmp_path / "img.fits", cube)
    out = subprocess.run([TOOL, "xcorr", tmp_path / "ref.fits", tmp_path / "img.fits", "100"],
                         check=True, capture_output=True, text=True).stdout.split("\n")
    for f in range(len(cube)):
        dx, dy, _ = map(float, out[f].split())
        shift, _, _ = phase_cross_correlation(ref.astype(float), cube[f].astype(float),
                                              upsample_factor=100, normalization=None)
        # same algorithm, same grid of 1/100 px: equal up to one grid step
        assert abs(dx - shift[1]) <= 0.0101 and abs(dy - shift[0]) <= 0.0101
        # and the injected shift (ref star minus frame star) within 0.02 px
        if kind != "spots":
            assert abs(dx - (tx[0] - tx[f])) < 0.02 and abs(dy - (ty[0] - ty[f])) < 0.02


# ---- profile fits against astropy.modeling --------------------------------------

@pytest.mark.parametrize("kind", ["gaussian", "moffat"])
def test_profile_fit_matches_astropy(tmp_path, kind):
    from astropy.modeling import fitting, models
    n, half = 41, 10
    rng = np.random.default_rng(3)
    img = star(n, 20.43, 19.71, "gauss" if kind == "gaussian" else "moffat") + 5
    img += rng.normal(0, 3.0, img.shape)
    write(tmp_path / "s.fits", img)
    out = subprocess.run([TOOL, "fit", tmp_path / "s.fits", "20", "20", str(half), kind],
                         check=True, capture_output=True, text=True).stdout.split()
    x, y, amp, bg, sx, sy, alpha, beta, fwhm, ex, ey = map(float, out)
    yy, xx = np.mgrid[20 - half:21 + half, 20 - half:21 + half]
    stamp = img[20 - half:21 + half, 20 - half:21 + half].astype(np.float32).astype(float)
    fitter = fitting.LevMarLSQFitter()
    if kind == "gaussian":
        m0 = models.Gaussian2D(900, 20, 20, 2, 2, theta=0, fixed={"theta": True}) + \
            models.Const2D(4)
        m = fitter(m0, xx, yy, stamp, maxiter=1000)
        g = m[0]
        assert abs(x - g.x_mean.value) < 1e-4 and abs(y - g.y_mean.value) < 1e-4
        assert abs(sx - g.x_stddev.value) < 1e-4 and abs(sy - g.y_stddev.value) < 1e-4
        assert abs(amp - g.amplitude.value) < 1e-3 * amp
        # FWHM = 2 sqrt(2 ln 2) sigma
        assert abs(fwhm - 2 * np.sqrt(2 * np.log(2)) * np.sqrt(sx * sy)) < 1e-6
    else:
        m0 = models.Moffat2D(900, 20, 20, 2.0, 2.0) + models.Const2D(4)
        m = fitter(m0, xx, yy, stamp, maxiter=1000)
        g = m[0]
        assert abs(x - g.x_0.value) < 1e-4 and abs(y - g.y_0.value) < 1e-4
        assert abs(alpha - abs(g.gamma.value)) < 1e-3 * alpha
        assert abs(beta - g.alpha.value) < 1e-3 * beta
        # Moffat 1969: FWHM = 2 alpha sqrt(2^(1/beta) - 1); astropy's fwhm property
        assert abs(fwhm - g.fwhm) < 1e-3 * fwhm
    assert abs(bg - m[1].amplitude.value) < 0.05
    # uncertainties: the truth lies within a few sigma
    assert abs(x - 20.43) < 5 * ex and abs(y - 19.71) < 5 * ey


# ---- parallactic angles ---------------------------------------------------------

SITE = dict(lat=-24.6, lon=-70.4, height=2600.0)


def header_cube(tmp_path, nf, ra, dec, date, exptime, table=None):
    h = fits.Header()
    h["DATE-OBS"] = date
    h["EXPTIME"] = exptime
    h["RA"] = ra
    h["DEC"] = dec
    h["LATITUDE"] = SITE["lat"]
    h["LONGITUD"] = SITE["lon"]
    h["OBSGEO-H"] = SITE["height"]
    cube, _, _ = jitter_cube(32, nf, "gauss", 1.0, 0.5, 2)
    hdus = [fits.PrimaryHDU(cube, header=h)]
    if table is not None:
        hdus.append(fits.BinTableHDU.from_columns(
            [fits.Column(name="MJD", format="D", array=np.asarray(table))], name="TIMES"))
    path = tmp_path / "hdr.fits"
    fits.HDUList(hdus).writeto(path, overwrite=True)
    return path


def tool_parang(path, cadence):
    out = subprocess.run([TOOL, "parang", path, str(cadence)], check=True,
                         capture_output=True, text=True).stdout
    return np.array([list(map(float, l.split())) for l in out.strip().split("\n")])


def test_parang_meeus_and_astroplan(tmp_path):
    from astropy.utils import iers
    iers.conf.auto_download = False
    import astropy.units as u
    from astroplan import Observer
    from astropy.coordinates import TETE, EarthLocation, SkyCoord
    from astropy.time import Time

    ra, dec, exptime, cadence, nf = 150.0, 10.0, 30.0, 300.0, 60
    date = "2019-04-10T22:00:00"  # inside the IERS-B table bundled with astropy
    path = header_cube(tmp_path, nf, ra, dec, date, exptime)
    res = tool_parang(path, cadence)
    pa, ha, dc = res[:, 0], res[:, 1], res[:, 2]
    assert (ha < -5).sum() > 5 and (ha > 5).sum() > 5  # both sides of the meridian
    # Meeus eq. 14.1 with the same hour angle and declination
    H, d, phi = np.radians(ha), np.radians(dc), np.radians(SITE["lat"])
    q = np.degrees(np.arctan2(np.sin(H), np.tan(phi) * np.cos(d) - np.sin(d) * np.cos(H)))
    assert np.max(np.abs(pa - q)) < 1e-8
    # astroplan: apparent sidereal time minus the apparent (TETE) right ascension
    loc = EarthLocation(lat=SITE["lat"] * u.deg, lon=SITE["lon"] * u.deg,
                        height=SITE["height"] * u.m)
    obs = Observer(location=loc)
    t = Time(date, scale="utc") + (np.arange(nf) * cadence + exptime / 2) * u.s
    ref = []
    for ti in t:
        c = SkyCoord(ra * u.deg, dec * u.deg, frame="icrs").transform_to(
            TETE(obstime=ti, location=loc))
        ref.append(obs.parallactic_angle(ti, c).to_value(u.deg))
    d = (pa - np.array(ref) + 180) % 360 - 180
    assert np.max(np.abs(d)) < 0.01, np.max(np.abs(d))


def test_angles_from_header_cli_with_time_table(tmp_path):
    nf, exptime = 8, 20.0
    mjd0 = 58583.9
    table = mjd0 + np.arange(nf) * 600.0 / 86400  # 10-minute cadence
    path = header_cube(tmp_path, nf, 150.0, 10.0, "2019-04-10T21:36:00", exptime, table)
    run(path, "--out", tmp_path / "a.fits", "--angles-from-header", "--angles-out",
        tmp_path / "pa.txt", "--table", tmp_path / "t.csv")
    got = np.loadtxt(tmp_path / "pa.txt")
    ref = tool_parang(path, 0)[:, 0]  # the tool reads the same table
    assert got.shape == (nf,) and np.allclose(got, ref, atol=1e-7)
    t = read_table(tmp_path / "t.csv")
    assert np.allclose(t["angle"], ref, atol=1e-7)
    # without the table, the cadence decides: frames 600 s apart
    path2 = header_cube(tmp_path, nf, 150.0, 10.0, "2019-04-10T21:36:00", exptime)
    run(path2, "--out", tmp_path / "b.fits", "--angles-from-header", "--angles-out",
        tmp_path / "pb.txt", "--frame-cadence", "600")
    assert np.allclose(np.loadtxt(tmp_path / "pb.txt"), tool_parang(path2, 600)[:, 0], atol=1e-7)


# ---- the command end to end -------------------------------------------------------

@pytest.mark.parametrize("kind,method,tol", [("gauss", ["auto"], 0.02),
                                             ("airy", ["reference"], 0.02),
                                             ("moffat", ["core", "--profile", "moffat"], 0.02),
                                             ("spots", ["auto"], 0.1),
                                             ("spots", ["halo"], 0.1)])
def test_known_jitter_recovered(tmp_path, kind, method, tol):
    cube, tx, ty = jitter_cube(64, 16, kind, 2.0, 2.5, 5)
    write(tmp_path / "c.fits", cube)
    p = run(tmp_path / "c.fits", "--out", tmp_path / "o.fits", "--table", tmp_path / "t.csv",
            "--method", *method)
    assert "centring method:" in p.stderr
    t = read_table(tmp_path / "t.csv")
    assert list(t.dtype.names[:5]) == ["frame", "x", "y", "x_err", "y_err"]
    rms = np.sqrt(np.mean((t["x"] - tx) ** 2 + (t["y"] - ty) ** 2) / 2)
    assert rms < tol, rms
    out = fits.getdata(tmp_path / "o.fits")
    assert out.shape == cube.shape
    if kind == "gauss":
        # the star of the aligned frames sits on (nx/2, ny/2): the flux-weighted
        # centroid of the mean frame within 6 px
        m = np.nanmean(out, axis=0) - 5
        y, x = np.mgrid[0:64, 0:64]
        w = np.where(np.hypot(x - 32, y - 32) < 6, m, 0)
        assert abs((w * x).sum() / w.sum() - 32) < 0.02
        assert abs((w * y).sum() / w.sum() - 32) < 0.02


def test_threads_identical(tmp_path):
    cube, _, _ = jitter_cube(48, 8, "airy", 2.0, 1.5, 9)
    write(tmp_path / "c.fits", cube)
    for t in (1, 2):
        run(tmp_path / "c.fits", "--out", tmp_path / f"o{t}.fits", "--method", "reference",
            "--bad-pixels", "5", "--table", tmp_path / f"t{t}.csv", "--threads", t)
    assert np.array_equal(fits.getdata(tmp_path / "o1.fits"), fits.getdata(tmp_path / "o2.fits"),
                          equal_nan=True)
    assert open(tmp_path / "t1.csv").read() == open(tmp_path / "t2.csv").read()


def test_preparation_products(tmp_path):
    cube, tx, ty = jitter_cube(48, 10, "gauss", 1.0, 0.5, 4)
    cube[:, 10, 12] += 500          # a hot pixel
    cube[3, 30, 35] += 800          # a cosmic ray
    cube[6] *= 0.5                  # clouds
    write(tmp_path / "c.fits", cube)
    angles = np.linspace(-20, 25, 10)
    np.savetxt(tmp_path / "in.txt", angles)
    p = run(tmp_path / "c.fits", "--out", tmp_path / "o.fits", "--bad-pixel-map",
            tmp_path / "bp.fits", "--reject-outliers", "5", "--crop", "21", "--bin", "3",
            "--angles", tmp_path / "in.txt", "--angles-out", tmp_path / "out.txt",
            "--table", tmp_path / "t.csv")
    assert "frame 6 rejected: flux" in p.stderr
    bp = fits.getdata(tmp_path / "bp.fits")
    assert int(bp[10, 12]) & 1 and int(bp[30, 35]) & 8
    out = fits.getdata(tmp_path / "o.fits")
    assert out.shape == (3, 21, 21)
    kept = np.delete(np.arange(10), 6)
    want = [angles[kept[i:i + 3]].mean() for i in range(0, 9, 3)]
    assert np.allclose(np.loadtxt(tmp_path / "out.txt"), want)
    t = read_table(tmp_path / "t.csv")
    assert t["kept"][6] == 0 and t["reason"][6] == "flux"


# ---- bad input: one line, exit 1, nothing written ------------------------------------

def check_refused(tmp_path, args, words):
    before = set(os.listdir(tmp_path))
    p = run(*args, ok=False)
    assert p.returncode == 1, p.stderr
    lines = p.stderr.strip().split("\n")
    assert len(lines) == 1 and words in lines[0], p.stderr
    assert set(os.listdir(tmp_path)) == before


def test_bad_input(tmp_path):
    rng = np.random.default_rng(0)
    write(tmp_path / "noise.fits", rng.normal(0, 1, (4, 32, 32)))
    check_refused(tmp_path, [tmp_path / "noise.fits", "--out", tmp_path / "o.fits", "--quiet"],
                  "noise.fits: no star signal")
    cube, tx, ty = jitter_cube(48, 6, "gauss", 1.0, 0.5, 1)
    write(tmp_path / "star.fits", cube)
    check_refused(tmp_path, [tmp_path / "star.fits", "--out", tmp_path / "o.fits", "--method",
                             "spots", "--quiet"], "no four satellite spots")
    # fluxes alternating by 10 per cent: nothing passes a 0.5-sigma selection
    alt = cube * np.where(np.arange(6) % 2, 1.1, 1.0)[:, None, None].astype(np.float32)
    write(tmp_path / "alt.fits", alt)
    check_refused(tmp_path, [tmp_path / "alt.fits", "--out", tmp_path / "o.fits",
                             "--reject-outliers", "0.5", "--quiet"], "every frame was rejected")
    # a masked (NaN) core: centred by its halo, but a 5-px crop holds no data
    spots, sx, sy = jitter_cube(64, 4, "spots", 1.0, 0.3, 2)
    y, x = np.mgrid[0:64, 0:64]
    for f in range(4):
        spots[f][np.hypot(x - sx[f], y - sy[f]) < 5] = np.nan
    write(tmp_path / "hole.fits", spots)
    check_refused(tmp_path, [tmp_path / "hole.fits", "--out", tmp_path / "o.fits", "--method",
                             "halo", "--crop", "5", "--quiet"], "holds no data")
    np.savetxt(tmp_path / "short.txt", np.arange(5.0))
    check_refused(tmp_path, [tmp_path / "star.fits", "--out", tmp_path / "o.fits", "--angles",
                             tmp_path / "short.txt", "--angles-out", tmp_path / "a.txt"],
                  "holds 5 angles but the cube has 6 frames")
    check_refused(tmp_path, [tmp_path / "star.fits", "--out", tmp_path / "o.fits",
                             "--angles-from-header", "--angles-out", tmp_path / "a.txt"],
                  "no DATE-OBS or MJD-OBS")
    check_refused(tmp_path, [tmp_path / "star.fits", "--out", tmp_path / "o.fits", "--crop",
                             "100"], "does not fit")
    check_refused(tmp_path, [tmp_path / "star.fits"], "--out is required")
    write(tmp_path / "o.fits", np.zeros((2, 2)))
    check_refused(tmp_path, [tmp_path / "star.fits", "--out", tmp_path / "o.fits", "--quiet"],
                  "o.fits")


# ---- end to end on gloam simulate output (true star positions in frames.csv) ----------

@pytest.mark.parametrize("sim_args,method,tol", [
    (["--size", "128", "--spots", "6:1e-2"], "spots", 0.1),      # coronagraph + spots
    (["--size", "64", "--coronagraph", "none"], "core", 0.02),  # unsaturated star
])
def test_simulated_jitter(tmp_path, sim_args, method, tol):
    d = tmp_path / "sim"
    subprocess.run([GLOAM, "simulate", d, "--frames", "12", "--jitter", "15", "--quiet",
                    *sim_args], check=True)
    p = run(d / "cube.fits", "--out", tmp_path / "a.fits", "--table", tmp_path / "t.csv")
    assert f"centring method: {method}, chosen because" in p.stderr
    f = np.genfromtxt(d / "frames.csv", delimiter=",", names=True)
    t = read_table(tmp_path / "t.csv")
    rms = np.sqrt(np.mean((t["x"] - f["star_x"]) ** 2 + (t["y"] - f["star_y"]) ** 2) / 2)
    assert rms < tol, rms


def test_single_image_and_4d_cube(tmp_path):
    cube, tx, ty = jitter_cube(48, 6, "gauss", 1.0, 1.5, 3)
    write(tmp_path / "img.fits", cube[0])
    run(tmp_path / "img.fits", "--out", tmp_path / "o2.fits", "--table", tmp_path / "t2.csv")
    assert fits.getdata(tmp_path / "o2.fits").shape == (48, 48)
    t = read_table(tmp_path / "t2.csv")
    assert abs(float(t["x"]) - tx[0]) < 0.02 and abs(float(t["y"]) - ty[0]) < 0.02
    # 4-D (frame, channel, y, x): measured on the channel mean, same shift for all
    write(tmp_path / "c4.fits", np.stack([cube, 0.5 * cube], axis=1))
    run(tmp_path / "c4.fits", "--out", tmp_path / "o4.fits", "--table", tmp_path / "t4.csv",
        "--crop", "31", "--bin", "2")
    out = fits.getdata(tmp_path / "o4.fits")
    assert out.shape == (3, 2, 31, 31)
    assert np.allclose(out[:, 1], 0.5 * out[:, 0], rtol=1e-4, atol=1e-3)
    t = read_table(tmp_path / "t4.csv")
    assert np.max(np.abs(t["x"] - tx)) < 0.02 and np.max(np.abs(t["y"] - ty)) < 0.02


def test_demo_sequence(tmp_path):
    # the committed demo sequence: perfect coronagraph, no spots, no jitter
    # (frames.csv: the star at (64, 64) in every frame)
    src = os.path.join(os.environ["GLOAM_SOURCE"], "demo-frames")
    p = run(os.path.join(src, "cube.fits"), "--out", tmp_path / "a.fits", "--table",
            tmp_path / "t.csv", "--angles", os.path.join(src, "angles.txt"), "--angles-out",
            tmp_path / "a.txt")
    assert "centring method: halo, chosen because" in p.stderr
    f = np.genfromtxt(os.path.join(src, "frames.csv"), delimiter=",", names=True)
    t = read_table(tmp_path / "t.csv")
    rms = np.sqrt(np.mean((t["x"] - f["star_x"]) ** 2 + (t["y"] - f["star_y"]) ** 2) / 2)
    assert rms < 0.1, rms
    assert np.allclose(np.loadtxt(tmp_path / "a.txt"), np.loadtxt(os.path.join(src, "angles.txt")))


def test_centre_jumps_are_rejected(tmp_path):
    """A frame whose 'star' is really another feature (here a brighter
    compact source 25 px away, standing in for a satellite spot taken for the
    star) is rejected as a centre jump; the others are kept and centred
    (known injected positions, rms below 0.02 px as in issue 3)."""
    rng = np.random.default_rng(7)
    n, nf = 96, 20
    jit = rng.normal(0, 0.4, (nf, 2))
    cube = np.empty((nf, n, n), np.float32)
    for f in range(nf):
        img = star(n, 48 + jit[f, 0], 48 + jit[f, 1]) + rng.normal(0, 1.0, (n, n))
        if f in (6, 13):
            img += 3 * star(n, 73.0, 48.0)
        cube[f] = img
    fits.PrimaryHDU(cube).writeto(tmp_path / "c.fits")
    r = subprocess.run([GLOAM, "align", str(tmp_path / "c.fits"), "--out", str(tmp_path / "a.fits"),
                        "--table", str(tmp_path / "t.csv"), "--method", "core"],
                       capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    t = np.genfromtxt(tmp_path / "t.csv", delimiter=",", names=True, dtype=None, encoding=None)
    assert list(np.nonzero(t["kept"] == 0)[0]) == [6, 13]
    assert set(t["reason"][[6, 13]]) == {"centre-jump"}
    k = t["kept"] == 1
    err = np.hypot(t["x"][k] - 48 - jit[k, 0], t["y"][k] - 48 - jit[k, 1])
    assert np.sqrt(np.mean(err**2)) < 0.02
    assert "centre-jump" not in r.stderr and "frame 6 rejected" in r.stderr


# ---- issue 10: auto must not take speckles for satellite spots ----------------------

def test_auto_keeps_the_frames_without_spots(tmp_path):
    """Regression: on a sequence simulated without spots (Lyot coronagraph, a
    companion) the automatic choice once took four speckles for satellite
    spots and kept 19 of 40 frames, exiting 0. Now it must not choose spots,
    must keep every frame."""
    d = tmp_path / "sim"
    subprocess.run([GLOAM, "simulate", d, "--frames", "40", "--coronagraph", "lyot",
                    "--companion", "25:100:5e-3", "--quiet"], check=True)
    p = run(d / "cube.fits", "--out", tmp_path / "a.fits", "--table", tmp_path / "t.csv")
    assert "centring method: spots" not in p.stderr
    t = np.genfromtxt(tmp_path / "t.csv", delimiter=",", names=True, dtype=None, encoding=None)
    assert t["kept"].sum() == 40
    assert fits.getdata(tmp_path / "a.fits").shape[0] == 40
    # asked for explicitly, spots lose most frames: a clear refusal, no product
    check_refused(tmp_path, [d / "cube.fits", "--out", tmp_path / "s.fits", "--method", "spots",
                             "--quiet"], "found the star in only")


@pytest.mark.parametrize("old,new", [
    (["--method", "gaussian"], ["--method", "core", "--profile", "gaussian"]),
    (["--method", "moffat"], ["--method", "core", "--profile", "moffat"]),
    (["--method", "register"], ["--method", "reference"]),
    (["--method", "symmetry"], ["--method", "halo"]),
    (["--method", "reference", "--upsample", "20"], ["--method", "reference", "--precision", "0.05"]),
])
def test_old_spellings_still_work(tmp_path, old, new):
    """docs/names.md: every old spelling does what the new one does, with one
    note naming the new spelling."""
    kind = "spots" if "symmetry" in old else ("moffat" if "moffat" in old else "gauss")
    cube, _, _ = jitter_cube(48, 6, kind, 1.0, 1.0, 3)
    write(tmp_path / "c.fits", cube)
    po = run(tmp_path / "c.fits", "--out", tmp_path / "old.fits", "--table", tmp_path / "old.csv",
             *old)
    pn = run(tmp_path / "c.fits", "--out", tmp_path / "new.fits", "--table", tmp_path / "new.csv",
             *new)
    assert "is the old spelling of" in po.stderr and "old spelling" not in pn.stderr
    assert np.array_equal(fits.getdata(tmp_path / "old.fits"), fits.getdata(tmp_path / "new.fits"),
                          equal_nan=True)
    assert open(tmp_path / "old.csv").read() == open(tmp_path / "new.csv").read()


def test_every_method_losing_most_frames_stops(tmp_path):
    """Six of ten frames hold no data: each automatic method in turn loses
    them, is logged and handed over; when none keeps most frames, align stops
    with one line naming the file and the losses, and writes nothing (issue
    10: never exit 0 having dropped most of the data)."""
    cube, _, _ = jitter_cube(48, 10, "gauss", 1.0, 1.0, 3)
    cube[[1, 2, 4, 6, 7, 9]] = np.nan
    write(tmp_path / "holes.fits", cube)
    p = run(tmp_path / "holes.fits", "--out", tmp_path / "o.fits", ok=False)
    assert p.returncode == 1
    assert p.stderr.count("trying the next method") == 3, p.stderr
    last = p.stderr.strip().splitlines()[-1]
    assert "holes.fits" in last and "no centring method found the star in most frames" in last
    assert "core lost 6 of 10" in last and "halo lost 6 of 10" in last
    assert not (tmp_path / "o.fits").exists()


# ---- issue 10: the centring error against the simulator's truth ------------------------
#
# The simulator's frames.csv holds the true star position of every frame
# (star_x, star_y: the array centre plus the drawn pointing jitter). Per
# regime: the rms error of the automatic choice against that truth, and the
# honesty of the reported x_err, y_err (their rms within a factor 2.5 of the
# true rms error; a factor of about 2 is the aim, common practice for error
# bars from 20-40 frames). Regimes as in the new-user review: Lyot
# coronagraph without jitter (halo symmetry added 0.7 px; registration 0.1
# px), perfect coronagraph with 6 mas jitter (registration 1.4 px while it
# reported 0.006 px), no coronagraph with jitter, coronagraph with spots.

REGIMES = {
    "lyot": (["--coronagraph", "lyot", "--frames", "40", "--size", "96", "--seed", "12",
              "--companion", "25:80:1e-4"], "core", 0.3),
    "jitter": (["--frames", "40", "--size", "96", "--seed", "11", "--jitter", "6",
                "--companion", "22:200:1e-4"], "halo", 0.8),
    "clear": (["--coronagraph", "none", "--frames", "20", "--size", "64", "--seed", "14",
               "--jitter", "15"], "core", 0.02),
    "spots": (["--frames", "20", "--size", "128", "--seed", "15", "--jitter", "15",
               "--spots", "6:1e-2"], "spots", 0.1),
}


def simulated(tmp_path, regime):
    d = tmp_path / regime
    subprocess.run([GLOAM, "simulate", d, "--quiet", *REGIMES[regime][0]], check=True)
    return d, np.genfromtxt(d / "frames.csv", delimiter=",", names=True)


def errors(table, truth):
    t = read_table(table)
    k = t["kept"] == 1
    true = [np.sqrt(np.mean((t[a][k] - truth["star_" + a][k]) ** 2)) for a in "xy"]
    rep = [np.sqrt(np.mean(t[a + "_err"][k].astype(float) ** 2)) for a in "xy"]
    return np.array(true), np.array(rep), t


@pytest.mark.parametrize("regime", list(REGIMES))
def test_auto_centring_against_the_truth(tmp_path, regime):
    d, truth = simulated(tmp_path, regime)
    _, method, tol = REGIMES[regime]
    p = run(d / "cube.fits", "--out", tmp_path / "a.fits", "--table", tmp_path / "t.csv")
    true, rep, t = errors(tmp_path / "t.csv", truth)
    assert t["method"][0] == method, p.stderr
    assert np.sqrt(np.mean(true**2)) < tol, true
    # the reported errors are honest: within a factor 2.5 of the true ones
    ratio = rep / true
    assert np.all((ratio > 1 / 2.5) & (ratio < 2.5)), (true, rep)
    h = fits.getheader(tmp_path / "a.fits")
    assert abs(h["GLALERRX"] - np.median(t["x_err"][t["kept"] == 1])) < 1e-6
    if regime == "jitter":
        # a coronagraph without spots: said in the log and in the product
        assert "only as good as the point symmetry of the halo" in p.stderr
        assert h["GLALUNCE"] is True and h["GLALABSC"] == "halo-symmetry"
        assert any("halo's point symmetry" in str(v) for v in h["HISTORY"])
    if regime == "lyot":
        # the residual core behind the Lyot mask fixes the centre: its limit
        # is said in the log and in the product
        assert "residual core behind the coronagraph" in p.stderr
        assert h["GLALUNCE"] is True and h["GLALABSC"] == "core-behind-mask"
        assert any("residual core behind" in str(v) for v in h["HISTORY"])
    if regime == "clear":
        assert "warning" not in p.stderr and h["GLALUNCE"] is False


@pytest.mark.parametrize("regime,method", [("lyot", "halo"), ("jitter", "reference")])
def test_asked_method_reports_its_true_error(tmp_path, regime, method):
    """The method asked for is kept, however poor; its reported errors are
    the comparison's, not the formal ones (the review's reference run on the
    jittered sequence reported 0.006 px for 1.4 px)."""
    d, truth = simulated(tmp_path, regime)
    p = run(d / "cube.fits", "--out", tmp_path / "a.fits", "--table", tmp_path / "t.csv",
            "--method", method)
    true, rep, t = errors(tmp_path / "t.csv", truth)
    assert t["method"][0] == method
    assert np.all(true > 0.5)  # a poor method on these data
    ratio = rep / true
    assert np.all((ratio > 1 / 2.5) & (ratio < 2.5)), (true, rep)
    assert "centring uncertain" in p.stderr


def test_registration_cross_checked_by_skimage(tmp_path):
    """The registration the comparison relies on, on the simulated Lyot
    frames (no jitter: every true shift is 0): skimage.registration.
    phase_cross_correlation (upsample 100, plain correlation; Guizar-Sicairos
    et al. 2008) of every frame against frame 0 scatters like gloam's
    reference centres, and both scatters lie within a factor 2.5 of the
    error gloam reports (gloam registers to a sharp median, skimage here to
    frame 0, whose speckles differ: equal within 0.15 px rms, common
    practice)."""
    from skimage.registration import phase_cross_correlation
    d, _ = simulated(tmp_path, "lyot")
    run(d / "cube.fits", "--out", tmp_path / "a.fits", "--table", tmp_path / "t.csv",
        "--method", "reference")
    t = read_table(tmp_path / "t.csv")
    cube = fits.getdata(d / "cube.fits").astype(float)
    sk = np.array([phase_cross_correlation(cube[0], c, upsample_factor=100,
                                           normalization=None)[0] for c in cube])
    gx, gy = t["x"] - t["x"][0], t["y"] - t["y"][0]
    assert np.sqrt(np.mean((gx + sk[:, 1]) ** 2 + (gy + sk[:, 0]) ** 2) / 2) < 0.15
    rep = np.hypot(np.median(t["x_err"]), np.median(t["y_err"])) / np.sqrt(2)
    for scatter in (np.std(sk, axis=0).mean(), (np.std(gx) + np.std(gy)) / 2):
        assert rep / 2.5 < scatter < rep * 2.5, (scatter, rep)


# ---- the Lyot coronagraph: the halo is not point-symmetric about the star -------------
#
# Behind a Lyot mask the bright mask-edge ring and the speckles pinned to it
# (the cross term of the coherent residual with the odd aberrations) are not
# point-symmetric about the star: on this sequence the halo's symmetry centre
# lies 2.7 px from it, and every symmetry-based centre (halo, and the
# registration anchored on the halo) was off by (0.6, -2.5) px while
# reporting 0.2-0.4 px. The residual core that the mask leaks is compact and
# centred on the star to 0.1-0.4 px (simulated Lyot sequences), and now fixes
# the absolute centre.

LYOT_BIASED = ["--coronagraph", "lyot", "--size", "96", "--frames", "16", "--star-flux", "3e6",
               "--cadence", "180", "--seed", "7"]


def test_lyot_centre_from_the_leaked_core(tmp_path):
    from scipy.optimize import least_squares
    d = tmp_path / "ly"
    subprocess.run([GLOAM, "simulate", d, "--quiet", *LYOT_BIASED], check=True)
    truth = np.genfromtxt(d / "frames.csv", delimiter=",", names=True)
    p = run(d / "cube.fits", "--out", tmp_path / "a.fits", "--table", tmp_path / "t.csv")
    t = read_table(tmp_path / "t.csv")
    off = np.array([np.median(t["x"] - truth["star_x"]), np.median(t["y"] - truth["star_y"])])
    rep = np.array([np.median(t["x_err"]), np.median(t["y_err"])])
    assert np.all(np.abs(off) < 0.25), (off, p.stderr)  # was (0.63, -2.54)
    assert np.all(np.abs(off) <= 3 * rep), (off, rep)
    h = fits.getheader(tmp_path / "a.fits")
    assert h["GLALABSC"] == "core-behind-mask" and h["GLALUNCE"] is True
    assert "residual core behind the coronagraph" in p.stderr
    # outside check: scipy least-squares Gaussian + constant on a 9 x 9 stamp
    # of the median frame around its central peak finds the core where
    # gloam's fit of the registered median frame does (the log's line; that
    # frame is a median of registered, shifted frames: 0.1 px, common practice)
    m = np.median(fits.getdata(d / "cube.fits").astype(float), axis=0)
    yy, xx = np.mgrid[44:53, 44:53]
    st = m[44:53, 44:53]
    fit = least_squares(lambda q: (q[0] * np.exp(-((xx - q[1]) ** 2 + (yy - q[2]) ** 2) /
                                                 (2 * q[3] ** 2)) + q[4] - st).ravel(),
                        [st.max(), 48, 48, 1.2, st.min()])
    import re
    core = re.search(r"absolute centre \(([\d.]+), ([\d.]+)\) from a Gaussian fit of the "
                     r"residual core", p.stderr)
    assert core, p.stderr
    assert np.hypot(float(core[1]) - fit.x[1], float(core[2]) - fit.x[2]) < 0.1, fit.x
    # the table's centres: the core's moved toward the halo's symmetry centre
    # (the inverse-variance mean), as the log says
    assert "toward the halo's centre of symmetry" in p.stderr
    # the halo's symmetry, asked for, carries its offset from the core in its error
    p = run(d / "cube.fits", "--out", tmp_path / "h.fits", "--table", tmp_path / "h.csv",
            "--method", "halo")
    t = read_table(tmp_path / "h.csv")
    off = np.array([np.mean(t["x"] - truth["star_x"]), np.mean(t["y"] - truth["star_y"])])
    rep = np.array([np.median(t["x_err"]), np.median(t["y_err"])])
    assert np.all(np.abs(off) <= 3 * rep), (off, rep)
    assert "counted in the halo's error" in p.stderr

"""`gloam inspect`: its numbers against numpy/scipy/astropy on the same file.

Outside references:
- astropy.io.fits reads the cube (BSCALE/BZERO applied, FITS Standard 4.0);
- numpy: NaN fraction, sums (np.nansum), medians (np.median), field rotation
  as the range of np.unwrap-ed angles;
- scipy.stats.median_abs_deviation(scale="normal"): the robust sigma
  (1.4826 * MAD; Hampel 1974);
- the rotation arc at separation r is r * rotation (radians), the arc-length
  formula of a circle.
"""
import json
import os
import subprocess

import numpy as np
import pytest
from astropy.io import fits
from scipy.stats import median_abs_deviation

GLOAM = os.environ["GLOAM"]

rng = np.random.default_rng(77)


def run(*args, cwd=None):
    return subprocess.run([GLOAM, "inspect", *map(str, args)], capture_output=True, text=True,
                          timeout=120, cwd=cwd)


def inspect_json(*args):
    r = run(*args, "--json")
    assert r.returncode == 0, r.stderr
    return json.loads(r.stdout)


def make_cube(nframe=6, ny=32, nx=33, nchan=None):
    """Star (Gaussian) at (nx//2, ny//2) on a noisy background."""
    y, x = np.mgrid[0:ny, 0:nx]
    star = 500 * np.exp(-((x - nx // 2) ** 2 + (y - ny // 2) ** 2) / (2 * 2.0 ** 2))
    shape = (nframe, ny, nx) if nchan is None else (nframe, nchan, ny, nx)
    d = rng.normal(20, 3, shape) + star
    return d.astype(np.float32)


def background_reference(frame, frac=0.75):
    ny, nx = frame.shape
    y, x = np.mgrid[0:ny, 0:nx]
    r = np.hypot(x - nx // 2, y - ny // 2)
    v = frame[(r >= frac * min(nx, ny) / 2) & np.isfinite(frame)].astype(np.float64)
    return np.median(v), median_abs_deviation(v, scale="normal"), v.size


def test_float_cube_numbers(tmp_path):
    d = make_cube()
    d[2, 0:4, :] = np.nan  # missing rows, some in the background region
    d[4, 10, 11] = np.nan
    d[5] *= 3.0  # an outlier frame (flux and background)
    h = fits.Header()
    h["SATURATE"] = 400.0
    h["DATE-OBS"] = "2026-03-14T02:03:04"
    h["EXPTIME"] = 1.5
    h["RA"] = 150.25
    h["DEC"] = -30.5
    h["OBJECT"] = "Invented star"
    src = tmp_path / "cube.fits"
    fits.PrimaryHDU(d, h).writeto(src)
    # angles crossing +-180 (a target transiting on the pole side of zenith)
    ang = np.array([165.0, 172.0, 178.5, -176.0, -170.0, -160.0])
    (tmp_path / "angles.txt").write_text("# parallactic angles\n" +
                                         "\n".join(repr(a) for a in ang) + "\n")
    rep = inspect_json(src, "--angles", tmp_path / "angles.txt", "--fwhm", "3.5")

    data = fits.getdata(src)
    assert rep["hdu"] == 1 and rep["bitpix"] == -32 and rep["naxis"] == 3
    assert rep["shape"] == {"nx": 33, "ny": 32, "channels": 1, "frames": 6}
    assert rep["nan_fraction"] == pytest.approx(np.isnan(data).mean(), rel=1e-12)
    per_frame_nan = np.isnan(data).reshape(6, -1).mean(axis=1)
    assert rep["nan_worst_frame"]["frame"] == int(np.argmax(per_frame_nan))
    assert rep["nan_worst_frame"]["nan_fraction"] == pytest.approx(per_frame_nan.max())
    assert rep["saturation"]["rule"] == "SATURATE keyword"
    assert rep["saturation"]["pixels"] == int(np.sum(data >= 400.0))
    assert rep["saturation"]["pixels"] > 0
    assert len(rep["frames"]) == 6
    for i, fr in enumerate(rep["frames"]):
        assert fr["frame"] == i and fr["channel"] == 0
        assert fr["flux"] == pytest.approx(np.nansum(data[i].astype(np.float64)), rel=1e-12)
        med, sig, n = background_reference(data[i])
        assert fr["background_median"] == pytest.approx(med, rel=1e-12)
        assert fr["background_sigma"] == pytest.approx(sig, rel=1e-12)
        assert fr["background_pixels"] == n
        assert fr["nan_fraction"] == pytest.approx(per_frame_nan[i])
        assert fr["peak"] == pytest.approx(np.nanmax(data[i]))
    fluxes = [np.nansum(data[i].astype(np.float64)) for i in range(6)]
    assert rep["summary"]["flux"]["min"] == pytest.approx(min(fluxes), rel=1e-12)
    assert rep["summary"]["flux"]["max"] == pytest.approx(max(fluxes), rel=1e-12)
    assert rep["summary"]["flux"]["median"] == pytest.approx(np.median(fluxes), rel=1e-12)
    outl = {o["frame"]: o["reasons"] for o in rep["outliers"]}
    assert 5 in outl and "flux" in outl[5] and "background_median" in outl[5]
    assert 2 in outl and "nan_fraction" in outl[2]
    assert set(outl) == {2, 5}

    # field rotation: range of the unwrapped angles (numpy.unwrap)
    rot = np.ptp(np.rad2deg(np.unwrap(np.deg2rad(ang))))
    a = rep["angles"]
    assert a["count"] == 6
    assert a["total_rotation_deg"] == pytest.approx(rot, rel=1e-12)
    assert a["total_rotation_deg"] == pytest.approx(35.0, rel=1e-12)
    assert a["fwhm_px"] == 3.5 and a["fwhm_assumed"] is False
    for e in a["rotation_at_separation"]:
        assert e["rotation_fwhm"] == pytest.approx(e["sep_px"] * np.deg2rad(rot) / 3.5)
    assert a["separation_for_1_fwhm_px"] == pytest.approx(3.5 / np.deg2rad(rot))

    hd = rep["header"]
    assert hd["date_obs"] == "2026-03-14T02:03:04"
    assert hd["exptime_s"] == 1.5 and hd["ra_deg"] == 150.25 and hd["dec_deg"] == -30.5
    assert hd["object"] == "Invented star"
    # MJD of the date, astropy.time (UTC)
    from astropy.time import Time
    assert hd["mjd_obs"] == pytest.approx(Time("2026-03-14T02:03:04", scale="utc").mjd,
                                          abs=1e-9)
    assert hd["wcs"] is False and hd["pixscale_mas"] is None
    assert {"DATE-OBS", "EXPTIME", "RA", "DEC", "SATURATE"} <= set(hd["found"])

    # the readable summary says the same things
    r = run(src, "--angles", tmp_path / "angles.txt")
    assert r.returncode == 0, r.stderr
    assert "assumed" in r.stdout  # no --fwhm: 4 px, stated as an assumption
    assert "35.0000 deg" in r.stdout
    assert "SATURATE keyword" in r.stdout
    assert "outlier frames         2:" in r.stdout
    # inspect writes nothing
    assert sorted(p.name for p in tmp_path.iterdir()) == ["angles.txt", "cube.fits"]


def test_unsigned_integer_saturation_and_scaling(tmp_path):
    """uint16 data (BZERO = 32768): saturated at 65535 after scaling."""
    phys = np.clip(make_cube(nframe=4) * 100, 0, 65535).astype(np.uint16)
    phys[1, 16, 16] = 65535
    phys[3, 15:17, 16] = 65535
    src = tmp_path / "u16.fits"
    fits.PrimaryHDU(phys).writeto(src)  # astropy writes BITPIX 16, BZERO 32768
    with fits.open(src, do_not_scale_image_data=True) as hl:
        assert hl[0].header["BITPIX"] == 16 and hl[0].header["BZERO"] == 32768
    rep = inspect_json(src)
    assert rep["bitpix"] == 16
    assert rep["scaling"]["bzero"] == {"present": True, "value": 32768}
    assert rep["saturation"]["rule"].startswith("integer maximum")
    assert rep["saturation"]["level"] == 65535
    assert rep["saturation"]["pixels"] == int(np.sum(phys == 65535)) == 3
    data = fits.getdata(src).astype(np.float64)
    for i, fr in enumerate(rep["frames"]):
        assert fr["flux"] == pytest.approx(data[i].sum(), rel=1e-12)
        assert fr["saturated_pixels"] == int(np.sum(phys[i] == 65535))
    assert rep["angles"] is None


def test_scaled_int_blank_extension_4d(tmp_path):
    """4-D data (frame, channel, y, x) in an extension, scaled int32 with BLANK."""
    d = make_cube(nframe=3, nchan=2, ny=20, nx=21)
    raw = np.round((d - 10.0) / 0.5).astype(np.int32)
    raw[1, 0, 0:2, :] = -999
    ext = fits.ImageHDU(raw, name="SCI")
    ext.header["BSCALE"] = 0.5
    ext.header["BZERO"] = 10.0
    ext.header["BLANK"] = -999
    src = tmp_path / "ifs.fits"
    fits.HDUList([fits.PrimaryHDU(), ext]).writeto(src)
    rep = inspect_json(src)
    assert rep["hdu"] == 2 and rep["extname"] == "SCI" and rep["naxis"] == 4
    assert rep["shape"] == {"nx": 21, "ny": 20, "channels": 2, "frames": 3}
    assert rep["scaling"]["blank"] == {"present": True, "value": -999}
    phys = raw * 0.5 + 10.0
    phys[raw == -999] = np.nan
    assert rep["nan_fraction"] == pytest.approx(np.isnan(phys).mean())
    assert rep["saturation"]["level"] == 0.5 * (2**31 - 1) + 10.0
    k = 0
    for f in range(3):
        for c in range(2):
            fr = rep["frames"][k]
            k += 1
            assert (fr["frame"], fr["channel"]) == (f, c)
            assert fr["flux"] == pytest.approx(np.nansum(phys[f, c]), rel=1e-12)
            med, sig, _ = background_reference(phys[f, c].astype(np.float32))
            assert fr["background_median"] == pytest.approx(med, rel=1e-12)
            assert fr["background_sigma"] == pytest.approx(sig, rel=1e-12)
    assert rep["nan_worst_frame"] == {"frame": 1, "channel": 0,
                                      "nan_fraction": pytest.approx(2 / 20)}


def test_fits_angles_and_wcs(tmp_path):
    d = make_cube(nframe=5)
    h = fits.Header()
    h["CTYPE1"], h["CTYPE2"] = "RA---TAN", "DEC--TAN"
    h["CRPIX1"], h["CRPIX2"] = 17.0, 17.0
    h["CRVAL1"], h["CRVAL2"] = 150.0, -30.0
    h["CD1_1"], h["CD1_2"], h["CD2_1"], h["CD2_2"] = -3.4e-6, 0.0, 0.0, 3.4e-6
    src = tmp_path / "cube.fits"
    fits.PrimaryHDU(d, h).writeto(src)
    ang = np.linspace(-12.0, 18.0, 5)
    fits.PrimaryHDU(ang).writeto(tmp_path / "ang.fits")
    rep = inspect_json(src, "--angles", tmp_path / "ang.fits")
    assert rep["angles"]["total_rotation_deg"] == pytest.approx(30.0)
    assert rep["angles"]["fwhm_assumed"] is True and rep["angles"]["fwhm_px"] == 4
    # pixel scale from astropy.wcs: sqrt(|det CD|) in mas
    from astropy.wcs import WCS
    from astropy.wcs.utils import proj_plane_pixel_scales
    w = WCS(h, naxis=2)
    ref = np.sqrt(np.prod(proj_plane_pixel_scales(w))) * 3.6e6
    assert rep["header"]["wcs"] is True
    assert rep["header"]["pixscale_mas"] == pytest.approx(ref, rel=1e-9)


# ---- bad input: exit 1, one line naming the file and the problem, nothing written


def check_bad(tmp_path, args, *words):
    before = sorted((p.name, p.stat().st_mtime_ns) for p in tmp_path.iterdir())
    r = run(*args, cwd=tmp_path)
    assert r.returncode == 1, (r.returncode, r.stderr)
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1, r.stderr
    for w in words:
        assert w in lines[0], (w, lines[0])
    assert r.stdout == ""
    assert sorted((p.name, p.stat().st_mtime_ns) for p in tmp_path.iterdir()) == before
    return lines[0]


@pytest.fixture
def good(tmp_path):
    fits.PrimaryHDU(make_cube(nframe=4)).writeto(tmp_path / "good.fits")
    (tmp_path / "four.txt").write_text("1\n2\n3\n4\n")
    return tmp_path


def test_bad_missing_file(good):
    check_bad(good, ["nope.fits"], "nope.fits", "cannot open")


def test_bad_not_fits(good):
    (good / "text.fits").write_text("SIMPLY NOT FITS\n" * 10)
    check_bad(good, ["text.fits"], "text.fits", "not a FITS file")


def test_bad_no_image_hdu(good):
    tab = fits.BinTableHDU.from_columns([fits.Column(name="a", format="D", array=[1.0, 2.0])])
    fits.HDUList([fits.PrimaryHDU(), tab]).writeto(good / "table.fits")
    check_bad(good, ["table.fits"], "table.fits", "no image HDU")


def test_bad_one_dimensional(good):
    fits.PrimaryHDU(np.arange(10, dtype=np.float32)).writeto(good / "line.fits")
    check_bad(good, ["line.fits"], "line.fits", "1-D image")


def test_bad_angle_count(good):
    (good / "three.txt").write_text("1\n2\n3\n")
    check_bad(good, ["good.fits", "--angles", "three.txt"], "three.txt", "3 angles",
              "4 frames")


def test_bad_angle_line(good):
    (good / "bad.txt").write_text("# angles\n1\n2\nabc\n4\n")
    check_bad(good, ["good.fits", "--angles", "bad.txt"], "bad.txt", "line 4", "abc")


def test_bad_missing_angles(good):
    check_bad(good, ["good.fits", "--angles", "none.txt"], "none.txt")


def test_all_nan_frame_reported(good):
    """A frame with no data is a finding, not an error: inspect reports it as
    empty (JSON and text), keeps the other frames' numbers (numpy on the same
    finite frames) and exits 0, writing nothing."""
    d = make_cube(nframe=5)
    d[2] = np.nan
    fits.PrimaryHDU(d).writeto(good / "hole.fits")
    before = sorted((p.name, p.stat().st_mtime_ns) for p in good.iterdir())
    rep = inspect_json(str(good / "hole.fits"))
    assert rep["empty_frames"] == [{"frame": 2, "channel": 0}]
    assert [f["empty"] for f in rep["frames"]] == [False, False, True, False, False]
    outl = {o["frame"]: o["reasons"] for o in rep["outliers"]}
    assert "empty" in outl[2]
    assert rep["nan_worst_frame"]["frame"] == 2
    assert rep["nan_fraction"] == pytest.approx(np.isnan(d).mean(), rel=1e-12)
    fluxes = [np.nansum(d[i].astype(np.float64)) for i in (0, 1, 3, 4)]
    assert rep["summary"]["flux"]["min"] == pytest.approx(min(fluxes), rel=1e-9)
    assert rep["summary"]["flux"]["max"] == pytest.approx(max(fluxes), rel=1e-9)
    assert rep["frames"][2]["peak"] is None
    r = run("hole.fits", cwd=good)
    assert r.returncode == 0 and r.stderr == "", r.stderr
    line = [ln for ln in r.stdout.splitlines() if "empty frames" in ln]
    assert len(line) == 1 and line[0].split(":")[-1].split() == ["2"], r.stdout
    assert "2(" in r.stdout and "E)" in r.stdout  # among the outliers, marked E
    assert sorted((p.name, p.stat().st_mtime_ns) for p in good.iterdir()) == before
    # a cube whose every frame is empty is still described, not refused
    fits.PrimaryHDU(np.full((3, 8, 9), np.nan, np.float32)).writeto(good / "void.fits")
    rep = inspect_json(str(good / "void.fits"))
    assert len(rep["empty_frames"]) == 3 and rep["nan_fraction"] == 1


def test_bad_unknown_option(good):
    check_bad(good, ["good.fits", "--frobnicate"], "--frobnicate")
    check_bad(good, ["good.fits", "--fwhm", "wide"], "--fwhm", "wide")
    check_bad(good, [], "cube")


def test_good_still_works(good):
    r = run("good.fits", "--angles", "four.txt", cwd=good)
    assert r.returncode == 0 and r.stderr == ""


def test_psf_fwhm_measured(tmp_path):
    """--psf measures the PSF: an analytic Gaussian has FWHM = 2 sqrt(2 ln 2)
    sigma (2% is the accuracy of the interpolated azimuthal profile) and its
    centre where it was drawn; the FWHM then replaces the assumed 4 px."""
    sigma, x0, y0 = 2.1, 15.3, 16.6
    y, x = np.mgrid[0:33, 0:31].astype(float)
    psf = 500 * np.exp(-0.5 * ((x - x0) ** 2 + (y - y0) ** 2) / sigma**2)
    fits.PrimaryHDU(psf.astype(np.float32)).writeto(tmp_path / "psf.fits")
    fits.PrimaryHDU(make_cube()).writeto(tmp_path / "cube.fits")
    rep = inspect_json(str(tmp_path / "cube.fits"), "--psf", str(tmp_path / "psf.fits"))
    fwhm = 2 * np.sqrt(2 * np.log(2)) * sigma
    assert abs(rep["psf"]["fwhm_px"] / fwhm - 1) < 0.02
    assert abs(rep["psf"]["centre_x"] - x0) < 0.01 and abs(rep["psf"]["centre_y"] - y0) < 0.01
    assert abs(rep["psf"]["total_flux"] / psf.sum() - 1) < 1e-6
    r = run(str(tmp_path / "cube.fits"), "--psf", str(tmp_path / "psf.fits"))
    assert r.returncode == 0 and "assumed" not in r.stdout and "FWHM" in r.stdout

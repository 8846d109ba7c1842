"""FITS input and output of libgloam, checked against astropy.io.fits.

The test tool fits_roundtrip (tests/fits_roundtrip.c) reads a file with
gl_fits_read_cube and writes it back with gl_fits_write_cube through
gl_outset, as every command does. Outside references:
- astropy.io.fits reads the inputs and the products (FITS Standard 4.0,
  IAU FITS Working Group 2016: BSCALE/BZERO sec. 5.3, BLANK sec. 5.3, IEEE
  NaN for floating-point images sec. 5.3);
- fitsverify (HEASARC's verifier, Debian package fitsverify) finds 0 errors in
  every product;
- zlib.crc32 from Python's standard library gives the CRC-32 recorded as
  provenance (GLCRCnn).
"""
import os
import re
import resource
import signal
import subprocess
import warnings
import zlib

import numpy as np
import pytest
from astropy.io import fits

TOOL = os.path.join(os.environ["GLOAM_TEST_TOOLS"], "fits_roundtrip")


def roundtrip(src, dst, *extra, **kw):
    return subprocess.run([TOOL, str(src), str(dst), *extra], capture_output=True,
                          text=True, timeout=60, **kw)


def fitsverify_errors(path):
    """Number of errors fitsverify reports (quiet mode prints one line)."""
    out = subprocess.run(["fitsverify", "-q", str(path)], capture_output=True, text=True,
                         timeout=60)
    text = out.stdout + out.stderr
    if "verification OK" in text:
        return 0
    m = re.search(r"(\d+)\s+error", text)
    assert m, text
    return int(m.group(1))


def read_product(path):
    """Data and header of a product, checking CHECKSUM/DATASUM with astropy."""
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # a checksum mismatch is a warning in astropy
        with fits.open(path, checksum=True) as hl:
            assert len(hl) == 1
            return hl[0].data.copy(), hl[0].header.copy()


def expected_physical(path, hdu=0):
    """Physical values by the FITS Standard: raw * BSCALE + BZERO, BLANK -> NaN,
    computed with numpy from the raw integers astropy reads unscaled."""
    with fits.open(path, do_not_scale_image_data=True) as hl:
        h = hl[hdu].header
        raw = hl[hdu].data
        bscale = h.get("BSCALE", 1.0)
        bzero = h.get("BZERO", 0.0)
        phys = raw.astype(np.float64) * bscale + bzero
        if h["BITPIX"] > 0 and "BLANK" in h:
            phys[raw == h["BLANK"]] = np.nan
        return phys


def write_raw(path, raw, bscale=None, bzero=None, blank=None, extra=None):
    """Writes integer or float raw data with the given scaling keywords."""
    hdu = fits.PrimaryHDU(raw)
    if bscale is not None:
        hdu.header["BSCALE"] = bscale
    if bzero is not None:
        hdu.header["BZERO"] = bzero
    if blank is not None:
        hdu.header["BLANK"] = blank
    for k, v in (extra or {}).items():
        hdu.header[k] = v
    hdu.writeto(path)
    # check that the fixture holds what we meant (astropy leaves raw alone)
    with fits.open(path, do_not_scale_image_data=True) as hl:
        np.testing.assert_array_equal(hl[0].data, raw)


rng = np.random.default_rng(20260314)

CASES = {
    # name: (raw array, BSCALE, BZERO, BLANK)
    "u8": (rng.integers(0, 256, (3, 5, 6), dtype=np.uint8), None, None, None),
    "i16": (rng.integers(-32768, 32768, (3, 5, 6), dtype=np.int16), None, None, None),
    "i32": (rng.integers(-2**31, 2**31, (3, 5, 6), dtype=np.int32), None, None, None),
    "i64": (rng.integers(-2**40, 2**40, (3, 5, 6), dtype=np.int64), None, None, None),
    "f32": (rng.normal(0, 1e3, (3, 5, 6)).astype(">f4"), None, None, None),
    "f64": (rng.normal(0, 1e3, (3, 5, 6)).astype(">f8"), None, None, None),
    # unsigned 16-bit data stored as signed with BZERO = 32768 (FITS 4.0 sec. 5.2.5)
    "u16_bzero": (rng.integers(-32768, 32768, (3, 5, 6), dtype=np.int16), None, 32768, None),
    # a scaled integer image (physical = 0.25 * raw - 100)
    "i16_scaled": (rng.integers(-32768, 32768, (3, 5, 6), dtype=np.int16), 0.25, -100.0, None),
    "i16_blank": (rng.integers(-100, 100, (3, 5, 6), dtype=np.int16), None, None, -32768),
    "i32_scaled_blank": (rng.integers(-1000, 1000, (3, 5, 6), dtype=np.int32), 2.0, 5.0,
                         -2147483648),
}


@pytest.mark.parametrize("name", sorted(CASES))
def test_roundtrip_bitpix(tmp_path, name):
    raw, bscale, bzero, blank = CASES[name]
    raw = raw.copy()
    if blank is not None:
        raw[1, 2, 3] = blank
        raw[0, 0, 0] = blank
    if raw.dtype.kind == "f":
        raw[2, 4, 5] = np.nan
    src, dst = tmp_path / f"{name}.fits", tmp_path / f"{name}.out.fits"
    write_raw(src, raw, bscale, bzero, blank)
    before = src.read_bytes()
    r = roundtrip(src, dst)
    assert r.returncode == 0, r.stderr
    assert src.read_bytes() == before, "input changed"
    data, hdr = read_product(dst)
    assert hdr["BITPIX"] == -32
    expect = expected_physical(src)
    assert data.shape == expect.shape
    # NaN exactly where the input had BLANK or NaN
    np.testing.assert_array_equal(np.isnan(data), np.isnan(expect))
    # float32 of the physical value (cfitsio and numpy both round to nearest)
    np.testing.assert_allclose(data, expect.astype(np.float32), rtol=1.2e-7, atol=0,
                               equal_nan=True)
    assert fitsverify_errors(dst) == 0


@pytest.mark.parametrize("shape", [(7, 9), (4, 7, 9), (3, 2, 7, 9)])
def test_roundtrip_shapes(tmp_path, shape):
    """2-D image, 3-D cube (frame, y, x) and 4-D (frame, channel, y, x) in numpy order."""
    data = rng.normal(size=shape).astype(np.float32)
    src, dst = tmp_path / "in.fits", tmp_path / "out.fits"
    fits.PrimaryHDU(data).writeto(src)
    r = roundtrip(src, dst)
    assert r.returncode == 0, r.stderr
    out, hdr = read_product(dst)
    assert hdr["NAXIS"] == len(shape)
    np.testing.assert_array_equal(out, data)
    assert fitsverify_errors(dst) == 0


def test_image_in_extension(tmp_path):
    """An empty primary HDU followed by the image in an extension."""
    data = rng.normal(size=(3, 6, 5)).astype(np.float32)
    ext = fits.ImageHDU(data, name="SCI")
    ext.header["OBJECT"] = "Invented star"
    src, dst = tmp_path / "in.fits", tmp_path / "out.fits"
    fits.HDUList([fits.PrimaryHDU(), ext]).writeto(src)
    r = roundtrip(src, dst)
    assert r.returncode == 0, r.stderr
    out, hdr = read_product(dst)
    np.testing.assert_array_equal(out, data)
    assert hdr["OBJECT"] == "Invented star"
    assert fitsverify_errors(dst) == 0


def test_header_and_provenance(tmp_path):
    data = rng.normal(size=(2, 4, 4)).astype(np.float32)
    src, dst = tmp_path / "in.fits", tmp_path / "out.fits"
    h = fits.Header()
    h["OBJECT"] = "Invented star"
    h["EXPTIME"] = (1.25, "seconds")
    h["DATE-OBS"] = "2026-03-14T03:04:05.5"
    h["NOTE"] = "a long string value " * 8  # CONTINUE cards
    h["HISTORY"] = "taken on an invented night"
    h["COMMENT"] = "an invented observatory"
    fits.PrimaryHDU(data, h).writeto(src)
    r = roundtrip(src, dst)
    assert r.returncode == 0, r.stderr
    _, hdr = read_product(dst)
    assert hdr["OBJECT"] == "Invented star"
    assert hdr["EXPTIME"] == 1.25
    assert hdr["DATE-OBS"] == "2026-03-14T03:04:05.5"
    assert hdr["NOTE"] == h["NOTE"].rstrip() or hdr["NOTE"] == h["NOTE"]
    history = "\n".join(str(x) for x in hdr["HISTORY"])
    assert "taken on an invented night" in history
    assert "an invented observatory" in "\n".join(str(x) for x in hdr["COMMENT"])
    # provenance: program, the command line in HISTORY, inputs and CRC-32 (zlib)
    assert hdr["GLPROG"].startswith("gloam ")
    assert "fits_roundtrip" in history and str(dst.name) in history.replace("\n", "")
    assert hdr["GLINP01"] == str(src)
    assert hdr["GLCRC01"] == "%08x" % zlib.crc32(src.read_bytes())
    assert "CHECKSUM" in hdr and "DATASUM" in hdr and "DATE" in hdr
    assert fitsverify_errors(dst) == 0

    # a product of a product: the provenance names only its own input
    dst2 = tmp_path / "out2.fits"
    assert roundtrip(dst, dst2).returncode == 0
    _, hdr2 = read_product(dst2)
    assert hdr2["GLINP01"] == str(dst)
    assert "GLINP02" not in hdr2
    assert fitsverify_errors(dst2) == 0


def test_existing_output_and_overwrite(tmp_path):
    data = np.arange(24, dtype=np.float32).reshape(2, 3, 4)
    src, dst = tmp_path / "in.fits", tmp_path / "out.fits"
    fits.PrimaryHDU(data).writeto(src)
    dst.write_bytes(b"precious")
    r = roundtrip(src, dst)
    assert r.returncode == 1
    assert str(dst) in r.stderr and "--overwrite" in r.stderr
    assert len(r.stderr.strip().splitlines()) == 1
    assert dst.read_bytes() == b"precious"
    r = roundtrip(src, dst, "--overwrite")
    assert r.returncode == 0, r.stderr
    np.testing.assert_array_equal(read_product(dst)[0], data)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["in.fits", "out.fits"]


def test_output_naming_an_input(tmp_path):
    src = tmp_path / "in.fits"
    fits.PrimaryHDU(np.zeros((2, 3, 3), np.float32)).writeto(src)
    before = src.read_bytes()
    for extra in ([], ["--overwrite"]):
        r = roundtrip(src, src, *extra)
        assert r.returncode == 1
        assert "input" in r.stderr and str(src) in r.stderr
        assert src.read_bytes() == before
    # the same file under another name
    r = roundtrip(src, tmp_path / "." / "in.fits", "--overwrite")
    assert r.returncode == 1 and src.read_bytes() == before
    assert [p.name for p in tmp_path.iterdir()] == ["in.fits"]


def _limit_file_size():
    # writes beyond 20 kB fail with EFBIG instead of killing the process
    signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
    resource.setrlimit(resource.RLIMIT_FSIZE, (20000, 20000))


def test_no_temporary_files_after_failure(tmp_path):
    indir, outdir = tmp_path / "in", tmp_path / "out"
    indir.mkdir()
    outdir.mkdir()
    src = indir / "cube.fits"
    fits.PrimaryHDU(rng.normal(size=(4, 40, 40)).astype(np.float32)).writeto(src)
    # a failure while writing the product (the file-size limit cuts it short)
    r = roundtrip(src, outdir / "out.fits", preexec_fn=_limit_file_size)
    assert r.returncode == 1, r.stderr
    assert "out.fits" in r.stderr
    assert list(outdir.iterdir()) == []
    # a failure while reading: not FITS
    bad = indir / "bad.fits"
    bad.write_text("not a FITS file\n")
    r = roundtrip(bad, outdir / "out.fits")
    assert r.returncode == 1 and "not a FITS file" in r.stderr
    assert list(outdir.iterdir()) == []
    # an output folder that does not exist
    r = roundtrip(src, tmp_path / "missing" / "out.fits")
    assert r.returncode == 1 and "does not exist" in r.stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == ["in", "out"]


def test_tables_say_what_was_observed(tmp_path):
    """A table read on its own names the star, the date and the pixel scale:
    OBJECT, TELESCOP, DATE-OBS and MJD-OBS as in the science cube (FITS
    Standard 4.0 keywords, read with astropy), GLPIXSC the pixel scale of the
    cube's WCS (astropy.wcs proj_plane_pixel_scales, geometric mean, in mas)."""
    import numpy as np
    from astropy.wcs import WCS
    from astropy.wcs.utils import proj_plane_pixel_scales
    gloam = os.environ["GLOAM"]
    sim = tmp_path / "sim"
    run = lambda *a: subprocess.run([gloam, *map(str, a)], capture_output=True, text=True)
    r = run("simulate", sim, "--frames", 16, "--size", 64, "--seed", 3, "--companion", "12:40:5e-3")
    assert r.returncode == 0, r.stderr
    r = run("subtract", sim / "cube.fits", "--angles", sim / "angles.txt", "--fwhm", 4,
            "--method", "klip-frame", "--modes", 3, "--out", tmp_path / "r.fits")
    assert r.returncode == 0, r.stderr
    r = run("detect", tmp_path / "r.fits", "--fwhm", 4, "--threshold", 2, "--out", tmp_path / "d")
    assert r.returncode == 0, r.stderr
    cube = fits.getheader(sim / "cube.fits")
    table = fits.getheader(tmp_path / "d.candidates.fits", "CANDIDATES")
    for key in ("OBJECT", "TELESCOP", "DATE-OBS"):
        assert table[key] == cube[key], key
    assert table["MJD-OBS"] == pytest.approx(cube["MJD-OBS"], abs=1e-9)
    w = WCS(cube).celestial
    want = 3.6e6 * np.sqrt(np.prod(proj_plane_pixel_scales(w)))
    assert table["GLPIXSC"] == pytest.approx(want, rel=1e-9)


def test_csv_tables_have_ecsv_twins_with_units(tmp_path):
    """Every CSV table has an ECSV twin (ECSV 1.0, Astropy APE 6) that
    astropy.table reads with the units the FITS twin gives in TUNITn and the
    same values as the CSV (read with astropy's plain CSV reader); the limits
    table's keywords come along as metadata; the star-position table keeps
    its text columns."""
    from astropy.table import Table
    gloam = os.environ["GLOAM"]
    sim = tmp_path / "sim"
    run = lambda *a: subprocess.run([gloam, *map(str, a)], capture_output=True, text=True)
    r = run("simulate", sim, "--frames", 16, "--size", 64, "--seed", 5, "--companion", "12:40:5e-3")
    assert r.returncode == 0, r.stderr
    r = run("align", sim / "cube.fits", "--angles", sim / "angles.txt", "--out",
            tmp_path / "a.fits", "--table", tmp_path / "s.csv")
    assert r.returncode == 0, r.stderr
    r = run("subtract", tmp_path / "a.fits", "--fwhm", 4,
            "--method", "median-frame", "--out", tmp_path / "r.fits")
    assert r.returncode == 0, r.stderr
    r = run("detect", tmp_path / "r.fits", "--fwhm", 4, "--threshold", 2, "--out", tmp_path / "d")
    assert r.returncode == 0, r.stderr
    r = run("limits", tmp_path / "a.fits", "--psf",
            sim / "psf.fits", "--fwhm", 4, "--method", "median-frame", "--out", tmp_path / "l")
    assert r.returncode == 0, r.stderr
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # an unknown unit would warn
        for stem, ext in (("d.candidates", "CANDIDATES"), ("l.limits", "LIMITS")):
            e = Table.read(tmp_path / f"{stem}.ecsv", format="ascii.ecsv")
            c = Table.read(tmp_path / f"{stem}.csv", format="ascii.csv")
            with fits.open(tmp_path / f"{stem}.fits") as hdul:
                f = hdul[ext].copy()
            assert e.colnames == c.colnames == f.columns.names
            for name in e.colnames:
                unit = f.columns[name].unit or None
                assert (str(e[name].unit) if e[name].unit else None) == unit, name
                a = np.ma.filled(np.ma.asarray(e[name], dtype=float), np.nan)
                b = np.ma.filled(np.ma.asarray(c[name], dtype=float), np.nan)
                np.testing.assert_array_equal(a, b, err_msg=name)
        lim = Table.read(tmp_path / "l.limits.ecsv", format="ascii.ecsv")
        hdr = fits.getheader(tmp_path / "l.limits.fits", "LIMITS")
        assert lim.meta, "the limits keywords as metadata"
        for key, value in lim.meta.items():
            assert hdr[key] == pytest.approx(value) if isinstance(value, float) else \
                hdr[key] == value, key
        s = Table.read(tmp_path / "s.ecsv", format="ascii.ecsv")
    assert len(s) == 16 and str(s["x"].unit) == "pix" and str(s["angle"].unit) == "deg"
    assert s["method"].dtype.kind in "US"
    assert (tmp_path / "s.ecsv").read_text().splitlines()[-16:] == \
        (tmp_path / "s.csv").read_text().splitlines()[-16:]


@pytest.mark.parametrize("card,want_um", [
    ("WAVELENG= 1650.0 / [nm] central wavelength", (1650, "nm")),
    ("LAMBDA  = 21800.0 / [Angstrom]", (21800, "Angstrom")),
    ("WAVELEN = 2.2 / no unit: micrometres", (2.2, "um")),
    ("WAVELEN = 1250.0 / no unit, too large for micrometres: nanometres", (1250, "nm")),
])
def test_tables_carry_the_wavelength(tmp_path, card, want_um):
    """WAVELEN in micrometres on every FITS table, converted from the unit
    the keyword's comment gives in brackets (FITS Standard 4.0 sec. 4.3.2);
    the conversion checked against astropy.units."""
    import astropy.units as u
    gloam = os.environ["GLOAM"]
    rng = np.random.default_rng(1)
    hdu = fits.PrimaryHDU(rng.normal(size=(64, 64)).astype(np.float32))
    hdu.header.append(fits.Card.fromstring(card))
    hdu.writeto(tmp_path / "img.fits")
    r = subprocess.run([gloam, "detect", str(tmp_path / "img.fits"), "--fwhm", "4",
                        "--out", str(tmp_path / "d")], capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    got = fits.getheader(tmp_path / "d.candidates.fits", "CANDIDATES")["WAVELEN"]
    value, unit = want_um
    assert got == pytest.approx((value * u.Unit(unit)).to_value(u.um), rel=1e-12)

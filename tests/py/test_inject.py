"""gloam inject against analytic companions.

References: the placement rule of docs/conventions.md (a source at sky PA pa
and separation s sits in raw frame i at angle 90 + pa + theta_i (+ north
offset) from +x about (nx/2, ny/2)); a Gaussian PSF moved by a sub-pixel
amount is known in closed form, so the planted frames are compared with
analytic Gaussians computed here with numpy. Flux: the planted companion's
total equals contrast x psf_scale x PSF total (conventions.md, Photometry).
"""
import os
import re
import subprocess

import numpy as np
import pytest
from astropy.io import fits

GLOAM = os.environ["GLOAM"]


def gaussian(nx, ny, x0, y0, sigma):
    y, x = np.mgrid[0:ny, 0:nx].astype(float)
    return np.exp(-0.5 * ((x - x0) ** 2 + (y - y0) ** 2) / sigma**2)


def run(*args):
    return subprocess.run([GLOAM, *map(str, args)], capture_output=True, text=True)


def make_inputs(tmp, nx=64, ny=64, nframe=6, psf_amp=1000.0, sigma=1.7, naxis4=0):
    psf = psf_amp * gaussian(31, 33, 15.3, 16.6, sigma)
    fits.PrimaryHDU(psf.astype(np.float32)).writeto(tmp / "psf.fits")
    shape = (nframe, naxis4, ny, nx) if naxis4 else (nframe, ny, nx)
    cube = np.zeros(shape, np.float32)
    cube[..., 0, 0] = np.nan  # a missing pixel stays missing
    fits.PrimaryHDU(cube).writeto(tmp / "cube.fits")
    angles = np.linspace(-25, 30, nframe)
    (tmp / "angles.txt").write_text("# parallactic angles\n" + "\n".join(f"{a:.6f}" for a in angles) + "\n")
    return psf, angles


@pytest.mark.parametrize("nx,ny", [(64, 64), (65, 61)])
def test_planted_frames_match_analytic(tmp_path, nx, ny):
    sigma, scale = 1.7, 0.5
    psf, angles = make_inputs(tmp_path, nx, ny, sigma=sigma)
    comps = [(14.2, 30.0, 1e-2), (21.7, 201.5, 4e-3)]
    north = 1.5
    args = ["inject", tmp_path / "cube.fits", "--angles", tmp_path / "angles.txt",
            "--psf", tmp_path / "psf.fits", "--out", tmp_path / "out.fits",
            "--psf-scale", scale, "--north-offset", north]
    for s, pa, c in comps:
        args += ["--companion", f"{s}:{pa}:{c}"]
    r = run(*args)
    assert r.returncode == 0, r.stderr
    out = fits.getdata(tmp_path / "out.fits").astype(float)
    cx, cy = nx // 2, ny // 2
    amp = 1000.0 * scale
    for i, theta in enumerate(angles):
        ref = np.zeros((ny, nx))
        for s, pa, c in comps:
            a = np.deg2rad(90 + pa + theta + north)  # conventions.md
            ref += c * amp * gaussian(nx, ny, cx + s * np.cos(a), cy + s * np.sin(a), sigma)
        ref[0, 0] = np.nan
        assert np.isnan(out[i, 0, 0])
        err = np.nanmax(np.abs(out[i] - ref))
        assert err < 1e-4 * 1e-2 * amp, f"frame {i}: {err}"
    # total planted flux = contrast x psf_scale x PSF total, per frame
    total = sum(c for _, _, c in comps) * scale * psf.sum()
    assert abs(np.nansum(out[0]) / total - 1) < 1e-3
    table = np.genfromtxt(tmp_path / "out.planted.csv", delimiter=",", names=True)
    assert np.allclose(table["sep_px"], [c[0] for c in comps])
    assert np.allclose(table["contrast"], [c[2] for c in comps])


def test_four_d_cube_with_spectrum(tmp_path):
    psf, angles = make_inputs(tmp_path, 48, 48, nframe=3, naxis4=2)
    r = run("inject", tmp_path / "cube.fits", "--angles", tmp_path / "angles.txt",
            "--psf", tmp_path / "psf.fits", "--out", tmp_path / "out.fits",
            "--companion", "12:80:1e-2", "--spectrum", "1,0.25")
    assert r.returncode == 0, r.stderr
    out = fits.getdata(tmp_path / "out.fits").astype(float)
    assert out.shape == (3, 2, 48, 48)
    ratio = np.nansum(out[:, 1]) / np.nansum(out[:, 0])
    assert abs(ratio - 0.25) < 1e-4


def test_thread_count_does_not_change_result(tmp_path):
    make_inputs(tmp_path, 64, 64, nframe=7)
    outs = []
    for t in (1, 2):
        o = tmp_path / f"out{t}.fits"
        r = run("inject", tmp_path / "cube.fits", "--angles", tmp_path / "angles.txt",
                "--psf", tmp_path / "psf.fits", "--out", o, "--companion", "10:10:1e-3",
                "--threads", t)
        assert r.returncode == 0, r.stderr
        outs.append(fits.getdata(o))
    assert np.array_equal(outs[0], outs[1], equal_nan=True)


def bad(tmp, *extra, psf=None, angles=None):
    args = ["inject", tmp / "cube.fits", "--angles", angles or tmp / "angles.txt",
            "--psf", psf or tmp / "psf.fits", "--out", tmp / "out.fits", *extra]
    before = {p.name: p.read_bytes() for p in tmp.iterdir()}
    r = run(*args)
    after = {p.name: p.read_bytes() for p in tmp.iterdir()}
    assert r.returncode == 1, r.stderr
    assert before == after, "nothing written, inputs untouched"
    lines = r.stderr.strip().splitlines()
    return lines[-1]


def test_bad_inputs(tmp_path):
    make_inputs(tmp_path, 48, 48)
    comp = ["--companion", "10:0:1e-3"]
    fits.PrimaryHDU(np.zeros((9, 9), np.float32)).writeto(tmp_path / "dark.fits")
    assert "sum to 0: no star's light" in bad(tmp_path, *comp, psf=tmp_path / "dark.fits")
    # noise around a level is not a PSF: its profile never falls to half the peak
    noise = 100 + np.random.default_rng(3).normal(0, 5, (21, 21))
    fits.PrimaryHDU(noise.astype(np.float32)).writeto(tmp_path / "noise.fits")
    assert "no PSF-like peak" in bad(tmp_path, *comp, psf=tmp_path / "noise.fits")
    fits.PrimaryHDU(np.ones((60, 60), np.float32)).writeto(tmp_path / "big.fits")
    assert "larger than" in bad(tmp_path, *comp, psf=tmp_path / "big.fits")
    assert "psf-scale" in bad(tmp_path, *comp, "--psf-scale", "0")
    assert "falls off the 48x48 image in frame 0 (counted from 0)" in bad(
        tmp_path, "--companion", "40:0:1e-3")
    assert "SEP_PX:PA_DEG:CONTRAST" in bad(tmp_path, "--companion", "10:zero:1e-3")
    (tmp_path / "short.txt").write_text("1\n2\n")
    assert "holds 2 angles but the cube has 6 frames" in bad(tmp_path, *comp, angles=tmp_path / "short.txt")
    assert "unknown option" in bad(tmp_path, *comp, "--bogus")


def test_a_frame_that_is_not_an_off_axis_psf_is_refused(tmp_path):
    """A coronagraphic or science frame given as --psf would set every
    contrast wrong by orders of magnitude. An off-axis PSF holds most of its
    light near the core (the Airy pattern 91% within 3.2 lambda/D, about 3
    FWHM: Born & Wolf, encircled energy of the Airy disc); the threshold is
    half of it. The fraction is computed here with numpy on the same images
    (whole pixels by their centres)."""
    make_inputs(tmp_path, 48, 48)
    comp = ["--companion", "10:0:1e-3"]
    y, x = np.mgrid[0:41, 0:41].astype(float)
    r = np.hypot(x - 20, y - 20)
    fwhm = 2.0 * np.sqrt(2 * np.log(2)) * 1.2
    for halo, refused in ((0.0, False), (0.002, False), (0.1, True)):
        # a sharp core on a broad halo: the residual starlight of a coronagraph
        img = gaussian(41, 41, 20, 20, 1.2) + halo * np.exp(-r / 12.0)
        ee = img[r <= 3 * fwhm].sum() / img.sum()
        assert (ee < 0.5) == refused, ee
        name = f"halo{halo}.fits"
        fits.PrimaryHDU(img.astype(np.float32)).writeto(tmp_path / name)
        if refused:
            msg = bad(tmp_path, *comp, psf=tmp_path / name)
            assert name in msg and "not an off-axis PSF" in msg, msg
            # the fraction within the radius gloam states (3 x its measured
            # FWHM, which the halo widens a little), by numpy
            m = re.search(r"only (\d+)% of the light lies within 3 FWHM \(([\d.]+) px\)", msg)
            assert m, msg
            rad = float(m.group(2))
            assert abs(rad - 3 * fwhm) < 0.15 * 3 * fwhm, (rad, fwhm)
            ee_at = img[r <= rad].sum() / img.sum()
            assert abs(int(m.group(1)) - 100 * ee_at) <= 1.0, (msg, ee_at)
        else:
            out = tmp_path / f"ok{halo}.fits"
            r_ok = run("inject", tmp_path / "cube.fits", "--angles", tmp_path / "angles.txt",
                       "--psf", tmp_path / name, "--out", out, *comp)
            assert r_ok.returncode == 0, r_ok.stderr
            out.unlink()


def test_nan_pixels_of_the_psf(tmp_path):
    """NaN in the PSF's core (within 3 FWHM of its peak): its flux cannot be
    measured, refused in one line naming the file; NaN beyond it count as 0,
    said once, and the star's flux is the sum of the finite pixels (numpy)."""
    make_inputs(tmp_path, 48, 48)
    comp = ["--companion", "10:0:1e-3"]
    img = 1000 * gaussian(41, 41, 20, 20, 1.7)
    core = img.copy()
    core[19:22, 19:22] = np.nan
    fits.PrimaryHDU(core.astype(np.float32)).writeto(tmp_path / "core.fits")
    msg = bad(tmp_path, *comp, psf=tmp_path / "core.fits")
    assert "core.fits" in msg and "NaN" in msg and "cannot be measured" in msg, msg
    ring = img.copy()  # a hole in the core's wing, inside 3 FWHM (12 px)
    ring[20, 26:28] = np.nan
    fits.PrimaryHDU(ring.astype(np.float32)).writeto(tmp_path / "ring.fits")
    msg = bad(tmp_path, *comp, psf=tmp_path / "ring.fits")
    assert "ring.fits" in msg and "2 pixels within 3 FWHM" in msg, msg
    wing = img.astype(np.float32)
    wing[0:10, 0:10] = np.nan
    fits.PrimaryHDU(wing).writeto(tmp_path / "wing.fits")
    r = run("inject", tmp_path / "cube.fits", "--angles", tmp_path / "angles.txt", "--psf",
            tmp_path / "wing.fits", "--out", tmp_path / "w.fits", *comp)
    assert r.returncode == 0, r.stderr
    said = [ln for ln in r.stderr.splitlines() if "NaN" in ln and "wing.fits" in ln]
    assert len(said) == 1 and "100 pixels" in said[0] and "warning" in said[0], r.stderr
    t = np.genfromtxt(tmp_path / "w.planted.csv", delimiter=",", names=True)
    assert float(t["flux"]) == pytest.approx(1e-3 * np.nansum(wing.astype(float)), rel=1e-5)


def test_negative_contrast_removes_a_planted_companion(tmp_path):
    """The negative-fake-companion use (Lagrange et al. 2010; Marois et al.
    2010): planting -c at the same place takes a +c companion out again,
    down to float32 rounding."""
    make_inputs(tmp_path, 64, 64)
    common = ["--angles", tmp_path / "angles.txt", "--psf", tmp_path / "psf.fits"]
    r = run("inject", tmp_path / "cube.fits", *common, "--companion", "15.3:77:2e-3",
            "--out", tmp_path / "with.fits")
    assert r.returncode == 0, r.stderr
    r = run("inject", tmp_path / "with.fits", *common, "--companion", "15.3:77:-2e-3",
            "--out", tmp_path / "removed.fits")
    assert r.returncode == 0, r.stderr
    orig = fits.getdata(tmp_path / "cube.fits").astype(float)
    back = fits.getdata(tmp_path / "removed.fits").astype(float)
    assert np.nanmax(np.abs(back - orig)) < 1e-5 * 2e-3 * 1000


def test_psf_background_is_reported_with_its_flux_bias(tmp_path):
    """A constant left in the PSF adds its level times the stamp's area to the
    star's flux: one warning naming the file, the level as a fraction of the
    peak and the flux bias, which matches photutils aperture photometry with
    a local background (CircularAperture minus the median of a
    CircularAnnulus, method="exact"): the stamp's sum over that flux. No
    warning without the constant, nor for one that adds well under 1.5%."""
    from photutils.aperture import (ApertureStats, CircularAnnulus, CircularAperture,
                                    aperture_photometry)
    n, sigma, peak = 65, 1.7, 1000.0
    clean = peak * gaussian(n, n, 32.0, 32.0, sigma)
    rng = np.random.default_rng(5)
    noise = 0.02 * rng.standard_normal((n, n))
    fits.PrimaryHDU(np.zeros((4, 80, 80), np.float32)).writeto(tmp_path / "cube.fits")
    (tmp_path / "a.txt").write_text("0\n5\n10\n15\n")
    true_flux = 2 * np.pi * sigma**2 * peak
    for name, level, warned in (("clean", 0.0, False), ("small", 0.002 * true_flux / n**2, False),
                                ("two", 0.02 * true_flux / n**2, True),
                                ("minus", -0.03 * true_flux / n**2, True)):
        img = (clean + noise + level).astype(np.float32)
        path = tmp_path / f"{name}.fits"
        fits.PrimaryHDU(img).writeto(path)
        r = run("inject", tmp_path / "cube.fits", "--angles", tmp_path / "a.txt", "--psf", path,
                "--companion", "15:40:1e-3", "--out", tmp_path / f"{name}.inj.fits")
        assert r.returncode == 0, r.stderr
        said = [l for l in r.stderr.splitlines() if "outer part" in l]
        if not warned:
            assert said == [], r.stderr
            continue
        assert len(said) == 1 and "warning" in said[0] and str(path) in said[0], r.stderr
        m = re.search(r"sits at (\S+) of its peak.*flux taken from the PSF is ([0-9.]+)% too (high|low)",
                      said[0])
        assert m, said[0]
        frac, pct, sense = float(m.group(1)), float(m.group(2)), m.group(3)
        assert frac == pytest.approx(level / img.max(), rel=0.1)
        ap = CircularAperture((32.0, 32.0), r=20.0)
        ann = CircularAnnulus((32.0, 32.0), r_in=24.0, r_out=31.0)
        bkg = ApertureStats(img.astype(float), ann).median
        phot = aperture_photometry(img.astype(float), ap, method="exact")["aperture_sum"][0]
        star = phot - bkg * ap.area
        bias = img.astype(float).sum() / star - 1
        assert sense == ("high" if bias > 0 else "low")
        assert pct == pytest.approx(100 * abs(bias), abs=0.1), (pct, 100 * bias)

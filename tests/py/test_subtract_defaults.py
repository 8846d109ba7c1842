"""gloam subtract with its defaults on ordinary sequences from `gloam simulate`.

References, each named beside its check:
- KLIP/PCA residuals: Soummer, Pueyo & Larkin 2012 (ApJL 755, L28) eqs. 5-9,
  computed here with numpy.linalg.svd in float64 on the same frames x pixels
  matrix (the mode truncation of a clear, non-coronagraphic sequence);
- frame-exclusion full-frame KLIP: the same numpy projection, with the basis
  of each frame built from the other frames only;
- orientation: docs/conventions.md (a source at sky PA pa sits in raw frame i
  at angle 90 + pa + theta_i; pa = atan2(-(x - cx), y - cy) north-up), with
  the rotation sense reversed by --rotation-sense clockwise.
"""
import os
import subprocess

import numpy as np
import pytest
from astropy.io import fits

GLOAM = os.environ["GLOAM"]


def run(*args):
    return subprocess.run([GLOAM, *map(str, args)], capture_output=True, text=True)


def region(n, r_in, r_out):
    y, x = np.mgrid[0:n, 0:n]
    r = np.hypot(x - n // 2, y - n // 2)
    return (r >= r_in) & (r < r_out)


@pytest.fixture(scope="module")
def clear(tmp_path_factory):
    """A clear (no coronagraph) sequence: a bright, nearly unchanging core
    that leaves many small but real eigenvalues."""
    d = tmp_path_factory.mktemp("clear") / "seq"
    r = run("simulate", d, "--coronagraph", "none", "--size", 48, "--frames", 36, "--seed", 5,
            "--quiet")
    assert r.returncode == 0, r.stderr
    return d


@pytest.mark.parametrize("r_out,kmax", [(24, 30), (3.0, 20)], ids=["eigen", "svd"])
def test_clear_sequence_keeps_all_modes(tmp_path, clear, r_out, kmax):
    """--modes 5,30 keeps 30 modes; the raw K=30 residual equals the float64
    numpy.linalg.svd projection (Soummer et al. 2012 eqs. 5-9) within 5% rms.
    Both routes: X X^T eigenvectors (fewer frames than pixels) and the SVD of
    X (a region of fewer pixels than frames)."""
    raw = tmp_path / "raw.fits"
    r = run("subtract", clear / "cube.fits", "--angles", clear / "angles.txt", "--fwhm", 4,
            "--method", "klip-frame", "--modes", f"5,{kmax}", "--out", tmp_path / "o.fits",
            "--outer-radius", r_out, "--raw-residuals", raw)
    assert r.returncode == 0, r.stderr
    assert "carry signal" not in r.stderr, r.stderr
    cube = fits.getdata(clear / "cube.fits").astype(np.float64)
    got = fits.getdata(raw).astype(np.float64)  # (frame, mode, y, x)
    n = cube.shape[-1]
    m = region(n, 0, r_out)
    assert (m.sum() < len(cube)) == (r_out < 5)
    X = cube[:, m]
    X = X - X.mean(axis=1, keepdims=True)
    _, _, Z = np.linalg.svd(X, full_matrices=False)
    for q, k in enumerate([5, kmax]):
        want = X - (X @ Z[:k].T) @ Z[:k]
        rms = np.linalg.norm(got[:, q][:, m] - want) / np.linalg.norm(want)
        assert rms < 0.05, (k, rms)


# ---- klip-rings with its defaults on 20 degrees of field rotation -------------

@pytest.fixture(scope="module")
def rot20(tmp_path_factory):
    """A coronagraphic sequence with about 20 deg of field rotation (30 frames,
    68 s apart) and one companion; truth.csv gives its north-up position."""
    d = tmp_path_factory.mktemp("rot20") / "seq"
    r = run("simulate", d, "--size", 64, "--frames", 30, "--cadence", 68, "--seed", 3,
            "--companion", "22:60:4e-3", "--quiet")
    assert r.returncode == 0, r.stderr
    ang = np.loadtxt(d / "angles.txt")
    assert 19 < ang.max() - ang.min() < 21
    truth = np.genfromtxt(d / "truth.csv", delimiter=",", names=True)
    return d, ang, float(truth["x_north_up"]), float(truth["y_north_up"])


def libraries(ang, r, gap_px, skip_self=True):
    """Size of every frame's library at radius r (docs/subtract.md rule)."""
    d = np.abs(ang[:, None] - ang[None, :])
    ok = r * np.deg2rad(d) >= gap_px
    return ok.sum(axis=1)


def test_klip_rings_defaults_just_work(tmp_path, rot20):
    """`--method klip-rings` and nothing else: the inner radius comes from the
    rotation (log and header), every frame there has 5 references past the
    gap, and the companion is found where truth.csv puts it."""
    d, ang, x0, y0 = rot20
    out = tmp_path / "o.fits"
    r = run("subtract", d / "cube.fits", "--angles", d / "angles.txt", "--fwhm", 4,
            "--method", "klip-rings", "--out", out)
    assert r.returncode == 0, r.stderr
    assert "inner radius" in r.stderr and "warning" not in r.stderr, r.stderr
    h = fits.getheader(out)
    r_in = h["GLSMASK"]
    assert h["GLSMAUTO"] is True and h["GLSKCAPR"] == 0 and h["GLSNOREF"] == 0
    # the rule of docs/subtract.md, computed here: 5 references at the first
    # ring's middle, fewer 0.2 px further in
    assert libraries(ang, r_in + 2.0, 3.0).min() >= 5
    assert libraries(ang, r_in + 1.8, 3.0).min() < 5
    img = fits.getdata(out).astype(float)
    yy, xx = np.mgrid[0:64, 0:64]
    assert np.all(np.isnan(img[np.hypot(xx - 32, yy - 32) < r_in - 1]))  # derotation: < 1 px
    img[np.abs(np.hypot(xx - 32, yy - 32) - 22) > 3] = np.nan
    j = np.nanargmax(img)
    assert np.hypot(j % 64 - x0, j // 64 - y0) <= 1.5


def test_default_method_is_klip_rings(tmp_path, rot20):
    """No --method: klip-rings (docs/subtract.md, "Which method by default"),
    the same product as naming it; options of another method are refused
    rather than ignored (the streamed fallback: tests/py/test_stream.py)."""
    d, _, _, _ = rot20
    base = ["subtract", d / "cube.fits", "--angles", d / "angles.txt", "--fwhm", 4]
    r = run(*base, "--out", tmp_path / "d.fits")
    assert r.returncode == 0, r.stderr
    r = run(*base, "--method", "klip-rings", "--out", tmp_path / "k.fits")
    assert r.returncode == 0, r.stderr
    assert fits.getheader(tmp_path / "d.fits")["GLSMETH"] == "klip-rings"
    assert np.array_equal(fits.getdata(tmp_path / "d.fits"), fits.getdata(tmp_path / "k.fits"),
                          equal_nan=True)
    for opt, word in [(["--basis-frames", "all-but-target"], "--basis-frames"),
                      (["--median-fit"], "--median-fit")]:
        r = run(*base, *opt, "--out", tmp_path / "x.fits")
        assert r.returncode == 1 and not (tmp_path / "x.fits").exists()
        lines = r.stderr.strip().splitlines()
        assert len(lines) == 1 and word in lines[0] and "klip-rings (the default)" in lines[0]


def test_inner_radius_from_the_smallest_mode_count(tmp_path, rot20):
    """The automatic radius gives every frame as many references as the
    smallest mode count (docs/subtract.md): --modes 5,10 starts where --modes
    5 does, and the log says which count set it; the library rule is
    computed here as in test_klip_rings_defaults_just_work. A gap that leaves
    less than half of the field's area gets one warning naming the cube."""
    d, ang, _, _ = rot20
    base = ["subtract", d / "cube.fits", "--angles", d / "angles.txt", "--fwhm", 4]
    radii = []
    for modes in ("5", "5,10"):
        out = tmp_path / f"m{modes}.fits"
        r = run(*base, "--modes", modes, "--out", out)
        assert r.returncode == 0, r.stderr
        line = next(ln for ln in r.stderr.splitlines() if "inner radius" in ln)
        assert "at least 5 references" in line and "smallest of --modes" in line, line
        radii.append(fits.getheader(out)["GLSMASK"])
    assert radii[0] == radii[1]
    assert libraries(ang, radii[1] + 2.0, 3.0).min() >= 5
    assert libraries(ang, radii[1] + 1.8, 3.0).min() < 5
    r = run(*base, "--gap", 1.0, "--out", tmp_path / "g.fits")
    assert r.returncode == 0, r.stderr
    warn = [ln for ln in r.stderr.splitlines() if "leaves only" in ln]
    r_in = fits.getheader(tmp_path / "g.fits")["GLSMASK"]
    assert r_in > 32 / np.sqrt(2) and len(warn) == 1 and "cube.fits" in warn[0], r.stderr
    assert f"from {r_in:.1f} px out" in r.stderr


def test_too_little_field_is_said_downstream(tmp_path, rot20):
    """detect refuses a product whose data leave no test aperture with a
    ring of references (an empty S/N map would read as "nothing there"):
    here a subtraction product with data in a 2-px ring at the edge only.
    limits names the cube and the cause when its automatic inner radius
    leaves no separation (a gap for which the first whole ring just fits).
    Each with one line, exit 1, nothing written. Angles in radians: the
    refusal says so instead of asking for a smaller gap."""
    d, ang, _, _ = rot20
    r = run("subtract", d / "cube.fits", "--angles", d / "angles.txt", "--fwhm", 4,
            "--out", tmp_path / "s.fits", "--quiet")
    assert r.returncode == 0, r.stderr
    with fits.open(tmp_path / "s.fits") as h:
        img = h[0].data.astype(np.float32)
        yy, xx = np.mgrid[0:64, 0:64]
        img[np.hypot(xx - 32, yy - 32) < 29.5] = np.nan
        fits.PrimaryHDU(img, h[0].header).writeto(tmp_path / "e.fits")
    limits = ["limits", d / "cube.fits", "--angles", d / "angles.txt", "--fwhm", 4, "--gap", 1.13,
              "--psf", d / "psf.fits", "--out", tmp_path / "lim"]
    for args, words in [
        (["detect", tmp_path / "e.fits", "--out", tmp_path / "det"], ["e.fits", "no S/N anywhere"]),
        (limits, ["cube.fits", "no separation fits", "too little rotation"])]:
        before = sorted(p.name for p in tmp_path.iterdir())
        r = run(*args)
        lines = r.stderr.strip().splitlines()
        assert r.returncode == 1 and len(lines) == 1, r.stderr
        assert all(w in lines[0] for w in words), lines[0]
        assert sorted(p.name for p in tmp_path.iterdir()) == before
    np.savetxt(tmp_path / "rad.txt", np.deg2rad(ang))
    r = run("subtract", d / "cube.fits", "--angles", tmp_path / "rad.txt", "--fwhm", 4,
            "--out", tmp_path / "r.fits")
    assert r.returncode == 1 and not (tmp_path / "r.fits").exists()
    last = r.stderr.strip().splitlines()[-1]
    assert "rad.txt" in last and "look like radians" in last, r.stderr


def test_klip_rings_old_name_defaults(tmp_path, rot20):
    """The issue's case: `--method annular` alone (the old spelling) runs."""
    d, _, _, _ = rot20
    r = run("subtract", d / "cube.fits", "--angles", d / "angles.txt", "--fwhm", 4,
            "--method", "annular", "--out", tmp_path / "o.fits")
    assert r.returncode == 0, r.stderr
    assert "old spelling" in r.stderr


def test_limits_klip_rings_on_20_degrees(tmp_path, rot20):
    """gloam limits with klip-rings options on 20 deg of rotation: the curve
    starts past the chosen inner radius and every row has a finite contrast;
    with a forced small mask the capped rings give one warning, not a failure."""
    d, _, _, _ = rot20
    common = ["limits", d / "cube.fits", "--angles", d / "angles.txt", "--psf", d / "psf.fits",
              "--fwhm", 4, "--method", "klip-rings", "--modes", "3,6", "--gap", 0.75]
    r = run(*common, "--out", tmp_path / "a")
    assert r.returncode == 0, r.stderr
    t = np.genfromtxt(tmp_path / "a.limits.csv", delimiter=",", names=True)
    h = fits.getheader(tmp_path / "a.limits.fits", 1)
    assert t["sep_px"].min() >= h["GLMASK"] and h["GLMASK"] > 4
    assert np.all(np.isfinite(t["contrast_c50"]))
    r = run(*common, "--mask-radius", 6, "--out", tmp_path / "b")
    assert r.returncode == 0, r.stderr
    assert len([ln for ln in r.stderr.splitlines() if "libraries" in ln]) == 1, r.stderr


# ---- frame exclusion (--basis-frames) against numpy ----------------------------

@pytest.mark.parametrize("which", ["all-but-target", "beyond-gap"])
def test_basis_without_target_matches_numpy(tmp_path, rot20, which):
    """klip-frame with each frame's basis built without it: numpy.linalg.svd of
    the other frames (or of those past the gap at the region's middle), the
    projection of Soummer et al. 2012 eqs. 5-9."""
    d, ang, _, _ = rot20
    raw = tmp_path / "raw.fits"
    r_in, r_out, k = 6.0, 26.0, 4
    r = run("subtract", d / "cube.fits", "--angles", d / "angles.txt", "--fwhm", 4,
            "--method", "klip-frame", "--basis-frames", which, "--modes", k, "--gap", 0.5,
            "--mask-radius", r_in, "--outer-radius", r_out, "--out", tmp_path / "o.fits",
            "--raw-residuals", raw)
    assert r.returncode == 0, r.stderr
    assert fits.getheader(raw)["GLSBASIS"] == which
    cube = fits.getdata(d / "cube.fits").astype(np.float64)
    got = fits.getdata(raw).astype(np.float64)
    m = region(64, r_in, r_out)
    X = cube[:, m]
    X = X - X.mean(axis=1, keepdims=True)
    want = np.full(X.shape, np.nan)
    rmid = 0.5 * (r_in + r_out)
    for t in range(len(X)):
        lib = [j for j in range(len(X)) if j != t and
               (which == "all-but-target" or rmid * np.deg2rad(abs(ang[j] - ang[t])) >= 2.0)]
        if not lib:
            continue
        _, _, Z = np.linalg.svd(X[lib], full_matrices=False)
        want[t] = X[t] - (X[t] @ Z[:k].T) @ Z[:k]
    ok = ~np.isnan(want)
    assert np.array_equal(np.isnan(got[:, m]), ~ok)
    rel = np.linalg.norm(got[:, m][ok] - want[ok]) / np.linalg.norm(want[ok])
    assert rel < 1e-4, rel
    # the target is not in its own basis: the residual is not the one of the
    # full-frame basis (which holds the target)
    r = run("subtract", d / "cube.fits", "--angles", d / "angles.txt", "--fwhm", 4,
            "--method", "klip-frame", "--modes", k, "--mask-radius", r_in, "--outer-radius", r_out,
            "--out", tmp_path / "o2.fits", "--raw-residuals", tmp_path / "raw2.fits")
    full = fits.getdata(tmp_path / "raw2.fits").astype(np.float64)[:, m]
    assert np.linalg.norm(full[ok] - got[:, m][ok]) > 0.05 * np.linalg.norm(want[ok])


# ---- rotation sense ---------------------------------------------------------------

def test_reversed_rotation_sense(tmp_path, rot20):
    """An instrument whose sky turns the other way as its angle grows: the same
    frames with negated angles and --rotation-sense clockwise put the simulated
    companion at its true north-up place (conventions.md); inject with the same
    sense plants where the sense says, and subtract, inject and limits record it."""
    d, ang, x0, y0 = rot20
    (tmp_path / "neg.txt").write_text("\n".join(f"{-a:.10f}" for a in ang) + "\n")
    yy, xx = np.mgrid[0:64, 0:64]

    def peak(path, sep):
        img = fits.getdata(path).astype(float)
        img[np.abs(np.hypot(xx - 32, yy - 32) - sep) > 3] = np.nan
        j = np.nanargmax(img)
        return j % 64, j // 64

    sub = ["subtract", "--angles", tmp_path / "neg.txt", "--fwhm", 4, "--method", "klip-frame",
           "--modes", 5, "--mask-radius", 8]
    r = run(sub[0], d / "cube.fits", *sub[1:], "--rotation-sense", "clockwise",
            "--out", tmp_path / "cw.fits")
    assert r.returncode == 0, r.stderr
    x, y = peak(tmp_path / "cw.fits", 22)
    assert np.hypot(x - x0, y - y0) <= 1.5, (x, y, x0, y0)
    assert fits.getheader(tmp_path / "cw.fits")["GLROTSNS"] == "clockwise"
    # without the option the negated angles put it at the mirror angle
    r = run(sub[0], d / "cube.fits", *sub[1:], "--out", tmp_path / "ccw.fits")
    x, y = peak(tmp_path / "ccw.fits", 22)
    assert np.hypot(x - x0, y - y0) > 3

    # inject with the reversed sense: frame i gets the PSF at 90 + pa - theta_i
    sep, pa = 14.0, 250.0
    r = run("inject", d / "cube.fits", "--angles", d / "angles.txt", "--psf", d / "psf.fits",
            "--companion", f"{sep}:{pa}:1e-3", "--rotation-sense", "clockwise",
            "--out", tmp_path / "inj.fits")
    assert r.returncode == 0, r.stderr
    diff = fits.getdata(tmp_path / "inj.fits").astype(float) - fits.getdata(d / "cube.fits")
    for i in (0, len(ang) - 1):
        a = np.deg2rad(90 + pa - ang[i])
        j = np.argmax(diff[i])
        assert np.hypot(j % 64 - (32 + sep * np.cos(a)), j // 64 - (32 + sep * np.sin(a))) <= 1
    assert fits.getheader(tmp_path / "inj.fits")["GLROTSNS"] == "clockwise"
    # the injected cube's header carries the sense: no option needed downstream
    r = run("subtract", tmp_path / "inj.fits", "--angles", d / "angles.txt", "--fwhm", 4,
            "--method", "median-frame", "--mask-radius", 8, "--out", tmp_path / "inj_sub.fits")
    assert r.returncode == 0, r.stderr
    x, y = peak(tmp_path / "inj_sub.fits", sep)
    xe, ye = 32 - sep * np.sin(np.deg2rad(pa)), 32 + sep * np.cos(np.deg2rad(pa))
    assert np.hypot(x - xe, y - ye) <= 1.5, (x, y, xe, ye)
    r = run("limits", d / "cube.fits", "--angles", tmp_path / "neg.txt", "--psf", d / "psf.fits",
            "--fwhm", 4, "--method", "klip-frame", "--modes", 5, "--mask-radius", 8,
            "--rotation-sense", "clockwise", "--out", tmp_path / "lim")
    assert r.returncode == 0, r.stderr
    assert fits.getheader(tmp_path / "lim.limits.fits", 1)["GLROTSNS"] == "clockwise"

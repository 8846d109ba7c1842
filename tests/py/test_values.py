"""Values the tool already knows (issue 10) and the one --out rule.

- align stores the parallactic angles of its output frames as a FITS
  binary-table extension ANGLES (column ANGLE, TUNIT deg); astropy.io.fits
  reads it back (the outside check), and subtract, limits, inject and inspect
  use it when --angles is not given, with results identical to passing the
  angle file;
- --fwhm auto: measured on --psf (the same number inspect --psf reports),
  or read from the FWHM subtract recorded (GLSFWHM); detect reads it by
  default;
- angle lists that look like radians warn, naming the file; a constant list
  makes subtract's refusal name the angles file;
- --out: a folder puts the products inside it, named after the input; a
  missing folder is named in a one-line error, never a temporary name.
"""
import os
import subprocess

import numpy as np
import pytest
from astropy.io import fits

GLOAM = os.environ.get("GLOAM", "gloam")


def gloam(*args, ok=True):
    p = subprocess.run([GLOAM, *map(str, args)], capture_output=True, text=True)
    if ok:
        assert p.returncode == 0, p.stderr
    return p


@pytest.fixture(scope="module")
def sim(tmp_path_factory):
    d = tmp_path_factory.mktemp("values") / "sim"
    gloam("simulate", d, "--frames", "16", "--size", "64", "--quiet",
          "--companion", "14:60:3e-3")
    return d


@pytest.fixture(scope="module")
def aligned(sim, tmp_path_factory):
    d = tmp_path_factory.mktemp("aligned")
    gloam("align", sim / "cube.fits", "--out", d / "a.fits", "--angles", sim / "angles.txt",
          "--method", "halo", "--quiet")
    return d / "a.fits"


def test_align_stores_the_angles(sim, aligned):
    with fits.open(aligned) as h:
        t = h["ANGLES"]
        assert isinstance(t, fits.BinTableHDU)
        assert t.columns["ANGLE"].unit == "deg"
        assert len(t.data) == h[0].data.shape[0]
        assert np.allclose(t.data["ANGLE"], np.loadtxt(sim / "angles.txt"), atol=1e-12, rtol=0)


def test_binned_angles_follow_the_frames(sim, tmp_path):
    gloam("align", sim / "cube.fits", "--out", tmp_path / "b.fits", "--angles",
          sim / "angles.txt", "--bin", "4", "--quiet")
    a = np.loadtxt(sim / "angles.txt")
    with fits.open(tmp_path / "b.fits") as h:
        assert h[0].data.shape[0] == 4
        assert np.allclose(h["ANGLES"].data["ANGLE"], a.reshape(4, 4).mean(axis=1), atol=1e-9)


def test_later_commands_read_the_stored_angles(sim, aligned, tmp_path):
    gloam("subtract", aligned, "--fwhm", "4", "--out", tmp_path / "s1.fits", "--quiet")
    gloam("subtract", aligned, "--fwhm", "4", "--out", tmp_path / "s2.fits", "--quiet",
          "--angles", sim / "angles.txt")
    assert np.array_equal(fits.getdata(tmp_path / "s1.fits"), fits.getdata(tmp_path / "s2.fits"),
                          equal_nan=True)
    p = gloam("subtract", aligned, "--fwhm", "4", "--out", tmp_path / "s3.fits")
    assert "from the ANGLES table of" in p.stderr
    # inject carries the table, so its product goes on without --angles too
    gloam("inject", aligned, "--psf", sim / "psf.fits", "--companion", "20:200:1e-3",
          "--out", tmp_path / "i.fits", "--quiet")
    with fits.open(tmp_path / "i.fits") as h:
        assert np.array_equal(h["ANGLES"].data["ANGLE"], fits.getdata(aligned, "ANGLES")["ANGLE"])
    gloam("subtract", tmp_path / "i.fits", "--fwhm", "4", "--out", tmp_path / "s4.fits",
          "--quiet")


def test_no_angles_anywhere_is_a_clear_error(sim, tmp_path):
    p = gloam("subtract", sim / "cube.fits", "--fwhm", "4", "--out", tmp_path / "s.fits",
              ok=False)
    assert p.returncode == 1
    lines = p.stderr.strip().splitlines()
    assert len(lines) == 1 and "cube.fits" in lines[0] and "--angles" in lines[0], p.stderr
    assert os.listdir(tmp_path) == []


def test_radian_angles_warn_everywhere(sim, aligned, tmp_path):
    rad = np.radians(np.loadtxt(sim / "angles.txt"))
    np.savetxt(tmp_path / "rad.txt", rad)
    # the default method (klip-rings) finds no reference in 0.2 deg of
    # rotation: its refusal names the file and says why
    p = gloam("subtract", aligned, "--fwhm", "4", "--out", tmp_path / "r.fits", "--angles",
              tmp_path / "rad.txt", "--quiet", ok=False)
    assert p.returncode == 1 and not (tmp_path / "r.fits").exists()
    last = p.stderr.strip().splitlines()[-1]
    assert "rad.txt" in last and "look like radians" in last, p.stderr
    for cmd in (["subtract", aligned, "--fwhm", "4", "--out", tmp_path / "s.fits",
                 "--method", "klip-frame"],
                ["inject", aligned, "--psf", sim / "psf.fits", "--companion", "20:0:1e-3",
                 "--out", tmp_path / "i.fits"],
                ["align", sim / "cube.fits", "--out", tmp_path / "a.fits"],
                ["inspect", sim / "cube.fits"]):
        p = gloam(*cmd, "--angles", tmp_path / "rad.txt", "--quiet")
        assert "rad.txt" in p.stderr and "look like radians" in p.stderr, (cmd, p.stderr)
    # degrees: no such warning
    p = gloam("subtract", aligned, "--fwhm", "4", "--out", tmp_path / "d.fits", "--angles",
              sim / "angles.txt", "--quiet")
    assert "radians" not in p.stderr


def test_constant_angles_name_the_file(sim, aligned, tmp_path):
    np.savetxt(tmp_path / "flat.txt", np.full(16, 12.5))
    p = gloam("subtract", aligned, "--fwhm", "4", "--out", tmp_path / "s.fits", "--angles",
              tmp_path / "flat.txt", "--quiet", ok=False)
    assert p.returncode == 1
    assert "flat.txt" in p.stderr.strip().splitlines()[-1], p.stderr
    assert not (tmp_path / "s.fits").exists()


def test_fwhm_auto(sim, aligned, tmp_path):
    # measured on the PSF: the value inspect --psf reports
    p = gloam("inspect", sim / "cube.fits", "--psf", sim / "psf.fits", "--json")
    import json
    fwhm_psf = json.loads(p.stdout)["psf"]["fwhm_px"]
    # klip-frame: 16 frames of this short sequence leave klip-rings no
    # separation (its refusal is tested in test_subtract_defaults.py)
    p = gloam("limits", aligned, "--psf", sim / "psf.fits", "--fwhm", "auto", "--out",
              tmp_path / "l", "--modes", "3", "--method", "klip-frame")
    assert f"FWHM {fwhm_psf:.3f} px, measured on" in p.stderr
    with fits.open(tmp_path / "l.limits.fits") as h:
        assert any(abs(hd.header.get("GLFWHM", -1) - fwhm_psf) < 1e-9 for hd in h)
    # limits and vet have a PSF: without --fwhm they measure it there too
    p = gloam("limits", aligned, "--psf", sim / "psf.fits", "--out", tmp_path / "l0",
              "--modes", "3", "--method", "klip-frame")
    assert f"FWHM {fwhm_psf:.3f} px, measured on" in p.stderr
    assert (tmp_path / "l0.limits.csv").read_bytes() == (tmp_path / "l.limits.csv").read_bytes()
    # recorded by subtract, read by detect (default) and detect --fwhm auto
    gloam("subtract", aligned, "--fwhm", "3.7", "--out", tmp_path / "s.fits", "--quiet")
    assert fits.getheader(tmp_path / "s.fits")["GLSFWHM"] == 3.7
    p1 = gloam("detect", tmp_path / "s.fits", "--out", tmp_path / "d1")
    p2 = gloam("detect", tmp_path / "s.fits", "--out", tmp_path / "d2", "--fwhm", "auto")
    p3 = gloam("detect", tmp_path / "s.fits", "--out", tmp_path / "d3", "--fwhm", "3.7")
    assert "FWHM 3.700 px, recorded in" in p1.stderr and "GLSFWHM" in p2.stderr
    for d in ("d1", "d2"):
        assert np.array_equal(fits.getdata(tmp_path / f"{d}.snr.fits"),
                              fits.getdata(tmp_path / "d3.snr.fits"), equal_nan=True)
        assert fits.getheader(tmp_path / f"{d}.snr.fits")["GLDFWHM"] == 3.7
    # vet takes the subtraction options too: --fwhm auto is measured on its
    # --psf before anything else (whatever vet then makes of the candidates)
    gloam("detect", tmp_path / "s.fits", "--out", tmp_path / "c", "--threshold", "3", "--quiet")
    p = gloam("vet", aligned, "--psf", sim / "psf.fits", "--fwhm", "auto", "--candidates",
              tmp_path / "c.candidates.csv", "--out", tmp_path / "v", "--modes", "3",
              "--method", "klip-frame", ok=False)
    assert f"FWHM {fwhm_psf:.3f} px, measured on" in p.stderr, p.stderr
    # inspect --fwhm auto: from --psf, else the record
    p = gloam("inspect", aligned, "--fwhm", "auto", "--psf", sim / "psf.fits")
    assert f"FWHM {fwhm_psf:.3g} px" in p.stdout
    p = gloam("inspect", tmp_path / "s.fits", "--fwhm", "auto")
    assert "FWHM 3.700 px, recorded in" in p.stderr
    # nothing to take it from: one line naming the file
    p = gloam("subtract", aligned, "--fwhm", "auto", "--out", tmp_path / "x.fits", "--quiet",
              ok=False)
    assert p.returncode == 1 and "a.fits" in p.stderr and "--fwhm auto" in p.stderr
    assert len(p.stderr.strip().splitlines()) == 1, p.stderr


def test_fwhm_auto_says_what_to_do(sim, aligned, tmp_path):
    """--fwhm auto with neither a PSF nor a recorded FWHM: one line naming the
    file, saying that no earlier step recorded one, and offering --fwhm PX and
    (where the command has it) --psf; exit 1, nothing written. subtract --psf
    measures the FWHM (alone it implies --fwhm auto), the value inspect --psf
    reports; --psf beside a number is refused as unused."""
    import json
    before = sorted(os.listdir(tmp_path))
    for cmd, has_psf in ((["subtract", sim / "cube.fits", "--angles", sim / "angles.txt",
                           "--fwhm", "auto", "--out", tmp_path / "x.fits"], True),
                         (["inspect", sim / "cube.fits", "--fwhm", "auto"], True),
                         (["detect", sim / "cube.fits", "--fwhm", "auto", "--out",
                           tmp_path / "d"], False)):
        p = gloam(*cmd, ok=False)
        lines = p.stderr.strip().splitlines()
        assert p.returncode == 1 and len(lines) == 1, p.stderr
        line = lines[0]
        assert f"{sim / 'cube.fits'}: --fwhm auto" in line, line
        assert "no earlier gloam step recorded one in this file" in line, line
        assert "give --fwhm PX" in line, line
        assert ("--psf PSF.fits" in line) and (("no --psf was given" in line) == has_psf), line
    assert sorted(os.listdir(tmp_path)) == before
    fwhm_psf = json.loads(gloam("inspect", sim / "cube.fits", "--psf", sim / "psf.fits",
                                "--json").stdout)["psf"]["fwhm_px"]
    for opts in (["--fwhm", "auto", "--psf", sim / "psf.fits"], ["--psf", sim / "psf.fits"]):
        out = tmp_path / f"s{len(opts)}.fits"
        p = gloam("subtract", aligned, *opts, "--out", out)
        assert f"FWHM {fwhm_psf:.3f} px, measured on {sim / 'psf.fits'}" in p.stderr
        assert abs(fits.getheader(out)["GLSFWHM"] - fwhm_psf) < 1e-9
    p = gloam("subtract", aligned, "--fwhm", "4", "--psf", sim / "psf.fits", "--out",
              tmp_path / "y.fits", ok=False)
    assert p.returncode == 1 and "--psf is read only to measure the FWHM" in p.stderr
    assert not (tmp_path / "y.fits").exists()


def test_detect_maps_and_old_spelling(aligned, tmp_path):
    gloam("subtract", aligned, "--fwhm", "4", "--out", tmp_path / "s.fits", "--quiet")
    gloam("detect", tmp_path / "s.fits", "--out", tmp_path / "new", "--skip-flanking", "--quiet")
    p = gloam("detect", tmp_path / "s.fits", "--out", tmp_path / "old", "--exclude-adjacent")
    assert "--exclude-adjacent is the old spelling of --skip-flanking" in p.stderr
    with fits.open(tmp_path / "new.snr.fits") as a, fits.open(tmp_path / "old.snr.fits") as b:
        assert [h.name for h in a] == ["SNR", "FPF", "SIGMA"]
        for k in range(3):
            assert np.array_equal(a[k].data, b[k].data, equal_nan=True)
        # a ratio: dimensionless, not the input's unit (electron)
        assert fits.getheader(aligned).get("BUNIT", "") != ""
        assert all(h.header["BUNIT"] == "" for h in a)
    assert "sigma" in open(tmp_path / "new.candidates.csv").readline().split(",")


def test_detect_on_a_raw_cube_warns(sim, tmp_path):
    p = gloam("detect", sim / "cube.fits", "--fwhm", "4", "--out", tmp_path / "r", "--quiet")
    assert "not a product of gloam subtract" in p.stderr


def test_out_folder_rule(sim, tmp_path):
    red = tmp_path / "red"
    red.mkdir()
    gloam("align", sim / "cube.fits", "--out", red, "--angles", sim / "angles.txt", "--quiet")
    assert (red / "cube.aligned.fits").exists()
    gloam("subtract", red / "cube.aligned.fits", "--fwhm", "4", "--out", str(red) + "/",
          "--quiet")
    assert (red / "cube.aligned.subtracted.fits").exists()
    gloam("detect", red / "cube.aligned.subtracted.fits", "--out", red, "--quiet")
    assert (red / "cube.aligned.subtracted.snr.fits").exists()
    assert (red / "cube.aligned.subtracted.candidates.csv").exists()


@pytest.mark.parametrize("cmd", [
    ["align", "{cube}", "--out", "{missing}/a.fits"],
    ["subtract", "{cube}", "--angles", "{angles}", "--fwhm", "4", "--out", "{missing}/s.fits"],
    ["detect", "{cube}", "--fwhm", "4", "--out", "{missing}/d"],
    ["inject", "{cube}", "--angles", "{angles}", "--psf", "{psf}", "--companion", "10:0:1e-3",
     "--out", "{missing}/i.fits"],
    ["limits", "{cube}", "--angles", "{angles}", "--psf", "{psf}", "--fwhm", "4", "--out",
     "{missing}/l"],
    ["simulate", "{missing}/sub/dir", "--frames", "3", "--size", "32"],
])
def test_missing_output_folder_is_named(sim, tmp_path, cmd):
    missing = tmp_path / "no_such_folder"
    args = [a.format(cube=sim / "cube.fits", angles=sim / "angles.txt", psf=sim / "psf.fits",
                     missing=missing) for a in cmd]
    p = gloam(*args, ok=False)
    assert p.returncode == 1
    lines = p.stderr.strip().splitlines()
    assert len(lines) == 1, p.stderr
    assert str(missing) in lines[0] and "does not exist" in lines[0], lines[0]
    assert ".tmp-" not in lines[0]
    assert os.listdir(tmp_path) == []


@pytest.mark.parametrize("cmd", [
    ["align", "{cube}", "--out", "{file}/a.fits"],
    ["subtract", "{cube}", "--angles", "{angles}", "--fwhm", "4", "--out", "{file}/s.fits"],
    ["subtract", "{cube}", "--angles", "{angles}", "--fwhm", "4", "--out", "{file}/"],
    ["subtract", "{cube}", "--angles", "{angles}", "--fwhm", "4", "--out", "{file}/sub/s.fits"],
    ["detect", "{cube}", "--fwhm", "4", "--out", "{file}/d"],
    ["inject", "{cube}", "--angles", "{angles}", "--psf", "{psf}", "--companion", "10:0:1e-3",
     "--out", "{file}/i.fits"],
    ["limits", "{cube}", "--angles", "{angles}", "--psf", "{psf}", "--fwhm", "4", "--out",
     "{file}/l"],
    ["simulate", "{file}/dir", "--frames", "3", "--size", "32"],
    ["simulate", "{file}/sub/dir", "--frames", "3", "--size", "32"],
    ["run", "{plan}", "--out", "{file}/run"],
])
def test_output_folder_that_is_a_file_is_named(sim, tmp_path, cmd):
    """The folder part of --out (or a folder above it) is an existing
    regular file: the one line says that path is a file, not a folder (not
    that a folder is missing), exit 1, nothing written, the file untouched."""
    blocker = tmp_path / "some.txt"
    blocker.write_text("notes\n")
    plan = tmp_path / "plan.ini"
    plan.write_text(f"[inputs]\ncube = {sim / 'cube.fits'}\nangles = {sim / 'angles.txt'}\n"
                    f"psf = {sim / 'psf.fits'}\nfwhm = 4\n[steps]\nrun = subtract\n")
    args = [a.format(cube=sim / "cube.fits", angles=sim / "angles.txt", psf=sim / "psf.fits",
                     file=blocker, plan=plan) for a in cmd]
    p = gloam(*args, ok=False)
    assert p.returncode == 1
    lines = p.stderr.strip().splitlines()
    assert len(lines) == 1, p.stderr
    assert f"{blocker} is a file, not a folder" in lines[0], lines[0]
    assert "does not exist" not in lines[0] and ".tmp-" not in lines[0]
    assert sorted(os.listdir(tmp_path)) == ["plan.ini", "some.txt"]
    assert blocker.read_text() == "notes\n"

"""Whole reductions: the plan file and the HTML report.

References: Python's configparser (the standard library's INI reader) reads
the same plans as gloam's libinih-based parser; Python's base64 (RFC 4648)
and csv (RFC 4180) modules check what the report embeds and tabulates, and
html.parser checks that the page is well formed; headless Chromium (Debian
package chromium) opens the page offline and reports whether every embedded
image decoded and whether any console message (an error) was printed.
"""
import base64
import csv
import html.parser
import os
import re
import shutil
import struct
import subprocess
import zlib
from pathlib import Path

import pytest

TOOLS = Path(os.environ["GLOAM_TEST_TOOLS"])

CHROMIUM_FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                  "--disable-background-networking", "--disable-component-update", "--disable-sync",
                  "--enable-logging=stderr", "--v=0"]


def write_png(path, w=48, h=32):
    """A small RGB gradient PNG written with zlib and struct (PNG spec, RFC 2083)."""
    raw = b"".join(b"\0" + b"".join(bytes([(x * 5) % 256, (y * 7) % 256, 120]) for x in range(w))
                   for y in range(h))

    def chunk(tag, data):
        return struct.pack(">I", len(data)) + tag + data + struct.pack(">I", zlib.crc32(tag + data))

    path.write_bytes(b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", struct.pack(">IIBBBBB", w, h, 8, 2, 0, 0, 0))
                     + chunk(b"IDAT", zlib.compress(raw)) + chunk(b"IEND", b""))


def report(tmp_path, *pieces, title="Veyra-3141 <night 1>"):
    out = tmp_path / "report.html"
    r = subprocess.run([str(TOOLS / "report_tool"), str(out), title, *pieces], capture_output=True,
                       text=True)
    return r, out


class Collector(html.parser.HTMLParser):
    def __init__(self):
        super().__init__()
        self.stack, self.imgs, self.cells, self.title, self._in_title = [], [], [], "", False

    def handle_starttag(self, tag, attrs):
        if tag not in ("meta", "img", "br", "link"):
            self.stack.append(tag)
        if tag == "img":
            self.imgs.append(dict(attrs))
        if tag in ("td", "th"):
            self.cells.append("")
        self._in_title = tag == "title"

    def handle_endtag(self, tag):
        assert self.stack and self.stack[-1] == tag, f"</{tag}> closes <{self.stack[-1:]}>"
        self.stack.pop()
        self._in_title = False

    def handle_data(self, data):
        if self._in_title:
            self.title += data
        if self.stack and self.stack[-1] in ("td", "th"):
            self.cells[-1] += data


def test_report_embeds_images_and_tables_exactly(tmp_path):
    write_png(tmp_path / "a.png")
    (tmp_path / "t.csv").write_text('frame,x,y,reason\n0,64.1,63.9,\n1,64.0,"6,4",centre-jump\n'
                                    '2,1,2,"said ""no"""\n')
    r, out = report(tmp_path, "section:Residual image", f"image:{tmp_path / 'a.png'}:residual & map",
                    f"table:{tmp_path / 't.csv'}:star positions:2", "caution:contrast <is> optimistic")
    assert r.returncode == 0, r.stderr
    page = out.read_text()
    p = Collector()
    p.feed(page)
    p.close()
    assert p.stack == [], f"unclosed tags {p.stack}"
    assert p.title == "Veyra-3141 <night 1>"  # escaped in the file, the same text once parsed
    assert len(p.imgs) == 1
    src = p.imgs[0]["src"]
    assert src.startswith("data:image/png;base64,")
    assert src.split(",", 1)[1] == base64.b64encode((tmp_path / "a.png").read_bytes()).decode()
    rows = list(csv.reader((tmp_path / "t.csv").open()))
    shown = [c for row in rows[:3] for c in row]  # header and max_rows = 2 rows
    assert p.cells == shown
    assert "1 more row in the file" in page
    assert "contrast &lt;is&gt; optimistic" in page
    assert "http" not in page.replace('"http', "")  # nothing fetched


@pytest.mark.parametrize("size", [1, 2, 3, 4, 5, 97, 1000])
def test_base64_of_every_tail_length(tmp_path, size):
    """Every remainder of the 3-byte groups (padding '=' and '==') against RFC 4648 (Python)."""
    data = bytes((i * 37 + 11) % 256 for i in range(size))
    f = tmp_path / "x.png"
    f.write_bytes(b"\x89PNG\r\n\x1a\n" + data)
    r, out = report(tmp_path, f"image:{f}:x")
    assert r.returncode == 0, r.stderr
    p = Collector()
    p.feed(out.read_text())
    assert p.imgs[0]["src"].split(",", 1)[1] == base64.b64encode(f.read_bytes()).decode()


def test_report_refuses_what_is_not_a_png_or_missing(tmp_path):
    (tmp_path / "fake.png").write_text("not an image")
    r, out = report(tmp_path, f"image:{tmp_path / 'fake.png'}:x")
    assert r.returncode == 1 and "fake.png: not a PNG image" in r.stderr
    assert not out.exists()
    r, out = report(tmp_path, f"table:{tmp_path / 'none.csv'}:x:5")
    assert r.returncode == 1 and "none.csv: cannot open the table" in r.stderr
    (tmp_path / "empty.csv").write_text("")
    r, out = report(tmp_path, f"table:{tmp_path / 'empty.csv'}:x:5")
    assert r.returncode == 1 and "empty.csv: the table is empty" in r.stderr


def chromium():
    for name in ("chromium", "chromium-browser"):
        if shutil.which(name):
            return shutil.which(name)
    return None


def open_in_chromium(page, tmp_path):
    exe = chromium()
    if not exe:
        pytest.skip("chromium is not installed (Debian package chromium)")
    r = subprocess.run([exe, *CHROMIUM_FLAGS, f"--user-data-dir={tmp_path / 'profile'}", "--dump-dom",
                        page.as_uri()], capture_output=True, text=True, timeout=120)
    assert r.returncode == 0, r.stderr[-2000:]
    console = [line for line in r.stderr.splitlines() if ":CONSOLE" in line]
    return r.stdout, console


def test_report_renders_offline_in_chromium(tmp_path):
    write_png(tmp_path / "a.png")
    write_png(tmp_path / "b.png", 64, 64)
    (tmp_path / "t.csv").write_text("sep_px,contrast\n5,1e-4\n10,2e-5\n")
    r, out = report(tmp_path, "section:Figures", f"image:{tmp_path / 'a.png'}:first",
                    f"image:{tmp_path / 'b.png'}:second", f"table:{tmp_path / 't.csv'}:limits:10")
    assert r.returncode == 0, r.stderr
    dom, console = open_in_chromium(out, tmp_path)
    assert 'data-images="2/2"' in dom, "not every embedded image decoded"
    assert console == [], console


def test_the_browser_check_sees_a_broken_page(tmp_path):
    """The check above can fail: a page with a script error and an image that
    does not decode is caught."""
    bad = tmp_path / "bad.html"
    bad.write_text("<!DOCTYPE html><html><body><img src='data:image/png;base64,AAAA'>"
                   "<script>window.addEventListener('load', function () {"
                   "var im = document.images, ok = 0; for (var i = 0; i < im.length; i++) "
                   "if (im[i].complete && im[i].naturalWidth > 0) ok++;"
                   "document.body.setAttribute('data-images', ok + '/' + im.length); no_such();});"
                   "</script></body></html>")
    dom, console = open_in_chromium(bad, tmp_path)
    assert 'data-images="0/1"' in dom
    assert any("no_such" in line for line in console)


# ---- gloam run -----------------------------------------------------------------

GLOAM = os.environ["GLOAM"]
STEPS = ("inspect", "align", "subtract", "detect", "limits")


def gloam(*args, **kw):
    return subprocess.run([GLOAM, *map(str, args)], capture_output=True, text=True, **kw)


@pytest.fixture(scope="module")
def sequence(tmp_path_factory):
    """A small simulated sequence with one companion (gloam simulate's truth)."""
    d = tmp_path_factory.mktemp("seq")
    r = gloam("simulate", d / "sim", "--frames", 24, "--size", 64, "--seed", 5, "--companion",
              "14:60:3e-3")
    assert r.returncode == 0, r.stderr
    return d


def write_plan(d, name="plan.ini", extra="", steps=STEPS, modes="3,6"):
    text = f"""# a plan for the tests
[run]
name = Tarn-12
[inputs]
cube = sim/cube.fits
angles = sim/angles.txt
psf = sim/psf.fits
[steps]
run = {", ".join(steps)}
[subtract]
method = pca
modes = {modes}   ; two planes
mask-radius = 4
[detect]
mask-radius = 4
[limits]
fake-runs = 1
{extra}"""
    (d / name).write_text(text)
    return d / name


def test_example_plan_reads_the_same_with_configparser(tmp_path):
    import configparser
    r = gloam("run", "--example")
    assert r.returncode == 0
    (tmp_path / "p.ini").write_text(r.stdout)
    cp = configparser.ConfigParser(inline_comment_prefixes=(";", "#"))
    cp.read(tmp_path / "p.ini")
    # paths relative to the plan's folder: the demo's files beside it
    assert cp["inputs"]["cube"] == "cube.fits" and cp["inputs"]["psf"] == "psf.fits"
    assert set(cp.sections()) >= {"run", "inputs", "steps", "align", "subtract", "detect", "limits"}
    # gloam's reading of the same file: every [subtract] key reaches the
    # subtract step's command line with configparser's value
    src = Path(os.environ["GLOAM_SOURCE"])
    for name in ("cube.fits", "psf.fits"):
        (tmp_path / name).symlink_to(src / "demo-frames" / name)
    dry = gloam("run", tmp_path / "p.ini", "--dry-run")
    assert dry.returncode == 0, dry.stderr
    line = next(x for x in dry.stderr.splitlines() if " gloam subtract " in x)
    for key, value in cp["subtract"].items():
        assert f"--{key} {value}" in line, (key, value, line)


def test_run_writes_the_folder_and_a_second_run_skips_every_step(sequence, tmp_path):
    plan = write_plan(sequence)
    out = tmp_path / "run"
    r = gloam("run", plan, "--out", out)
    assert r.returncode == 0, r.stderr
    for name in ("inspect.json", "aligned.fits", "star-positions.csv", "result.fits",
                 "detect.snr.fits", "detect.candidates.csv", "limits.limits.csv",
                 "limits.limits.png", "summary.json", "report.html", "log.txt", "ledger.json"):
        assert (out / name).exists(), name
    import json
    s = json.loads((out / "summary.json").read_text())
    assert s["target"] == "Tarn-12"
    assert [s["steps"][k]["state"] for k in STEPS] == ["ran"] * 5
    assert s["steps"]["vet"]["state"] == "not asked"
    assert s["steps"]["subtract"]["command"][:3] == ["gloam", "subtract", str(out / "aligned.fits")]
    # the detections are those of the candidate table, and the companion is among them
    rows = list(csv.DictReader((out / "detect.candidates.csv").open()))
    assert len(s["detections"]) == len(rows)
    assert any(abs(float(d["sep_px"]) - 14) < 1 for d in s["detections"])
    # contrast at fixed separations interpolates the table (numpy.interp, plane 1)
    import numpy as np
    t = np.genfromtxt(out / "limits.limits.csv", delimiter=",", names=True)
    t = t[t["plane"] == 1]
    for e in s["contrast"]["at_fwhm"]:
        want = np.interp(e["sep_px"], t["sep_px"], t["contrast_c50"], left=np.nan, right=np.nan)
        if e["contrast_c50"] is None:
            assert np.isnan(want)
        else:
            assert e["contrast_c50"] == pytest.approx(want, rel=1e-9)
    # the cube's WCS gives the pixel scale, so the contrast is also given in
    # arcsec (astropy.wcs: proj_plane_pixel_scales of the simulated cube)
    from astropy.io import fits as afits
    from astropy.wcs import WCS
    from astropy.wcs.utils import proj_plane_pixel_scales
    w = WCS(afits.getheader(sequence / "sim" / "cube.fits")).celestial
    scale = 3.6e6 * np.sqrt(np.prod(proj_plane_pixel_scales(w)))
    assert s["pixscale_mas"] == pytest.approx(scale, rel=1e-9)
    for e in s["contrast"]["at_arcsec"]:
        assert e["sep_px"] == pytest.approx(e["sep_arcsec"] * 1000 / scale, rel=1e-9)
    # the field rotation of the angles (numpy)
    ang = np.loadtxt(out / "angles.txt")
    assert s["field_rotation_deg"] == pytest.approx(abs(ang[-1] - ang[0]), abs=1e-6)
    # the residual figure has a title band above the image (the target's
    # name in dark text on the light band), as the other figures have titles
    from PIL import Image
    img = np.asarray(Image.open(out / "result.png").convert("L")).astype(float)
    nx = afits.getheader(out / "result.fits")["NAXIS1"]
    zoom = 3 if nx < 200 else 2 if nx < 400 else 1
    assert img.shape == (nx * zoom + 28 + 22, nx * zoom)
    band = img[:22]
    assert np.median(band) > 200 and (band < 100).sum() > 20, "a dark title on a light band"

    # a step's warnings (align's uncertain centring here: a coronagraph
    # without spots) are in the summary and the report, as in the log
    logged = [line.split("warning: ", 1)[1] for line in (out / "log.txt").read_text().splitlines()
              if line.startswith("gloam align: warning: ")]
    assert logged and s["steps"]["align"]["warnings"] == logged
    assert "centring uncertain" in " ".join(logged)
    assert "align warned: " in (out / "report.html").read_text()
    assert "warnings" not in s["steps"]["inspect"]

    before = {p.name: p.read_bytes() for p in out.iterdir() if p.suffix in (".fits", ".csv")}
    r2 = gloam("run", plan, "--out", out)
    assert r2.returncode == 0, r2.stderr
    assert r2.stderr.count("not run again") == 5
    s2 = json.loads((out / "summary.json").read_text())
    assert [s2["steps"][k]["state"] for k in STEPS] == ["unchanged"] * 5
    # an unchanged step keeps the warnings of the run that made its products
    assert s2["steps"]["align"]["warnings"] == logged
    after = {p.name: p.read_bytes() for p in out.iterdir() if p.suffix in (".fits", ".csv")}
    assert before == after

    # a changed option reruns its step; later steps rerun only if their inputs changed
    write_plan(sequence, modes="3,5")
    r3 = gloam("run", plan, "--out", out)
    assert r3.returncode == 0, r3.stderr
    s3 = json.loads((out / "summary.json").read_text())
    assert [s3["steps"][k]["state"] for k in STEPS] == ["unchanged", "unchanged", "ran", "ran", "ran"]
    # --force reruns a step that is current
    r4 = gloam("run", plan, "--out", out, "--force", "align")
    s4 = json.loads((out / "summary.json").read_text())
    assert r4.returncode == 0 and s4["steps"]["align"]["state"] == "ran"
    write_plan(sequence)


def test_run_report_renders_in_chromium(sequence, tmp_path):
    plan = write_plan(sequence)
    out = tmp_path / "run"
    r = gloam("run", plan, "--out", out)
    assert r.returncode == 0, r.stderr
    page = (out / "report.html").read_text()
    p = Collector()
    p.feed(page)
    assert p.stack == []
    assert len(p.imgs) >= 4  # residual, S/N map, contrast curve, star positions
    assert "Tarn-12" in p.title
    dom, console = open_in_chromium(out / "report.html", tmp_path)
    assert f'data-images="{len(p.imgs)}/{len(p.imgs)}"' in dom
    assert console == [], console


def test_vet_gets_the_star_table_of_align(sequence, tmp_path):
    """The vetting's astrometric errors include the star-centring error:
    the run hands align's star table to vet (--star-table), and the ledger
    counts it among vet's inputs (a new centring reruns the vetting)."""
    plan = write_plan(sequence, steps=("align", "subtract", "detect", "vet"))
    out = tmp_path / "run"
    r = gloam("run", plan, "--out", out, "--dry-run")
    assert r.returncode == 0, r.stderr
    line = next(x for x in r.stderr.splitlines() if " gloam vet " in x)
    assert f"--star-table {out / 'star-positions.csv'}" in line, line
    # without align there is no star table to give
    plan = write_plan(sequence, name="noalign.ini", steps=("subtract", "detect", "vet"))
    r = gloam("run", plan, "--out", out, "--dry-run")
    line = next(x for x in r.stderr.splitlines() if " gloam vet " in x)
    assert "--star-table" not in line


def test_bad_plans_are_refused_before_anything_runs(sequence, tmp_path):
    cases = [
        ("[subtract]\nmodez = 5\n", "'modez' in [subtract] is not an option of gloam subtract"),
        ("[detect]\nthreshold = 5\n[detect_]\nx = 1\n", "unknown section [detect_]"),
        ("[inputs]\nbogus = 1\n", "'bogus' in [inputs] is not used by gloam"),
    ]
    for extra, message in cases:
        plan = write_plan(sequence, name="bad.ini", extra=extra)
        out = tmp_path / "never"
        r = gloam("run", plan, "--out", out)
        assert r.returncode == 1, (extra, r.stderr)
        assert "bad.ini:" in r.stderr and message in r.stderr, r.stderr
        assert len(r.stderr.strip().splitlines()) == 1
        assert not out.exists()
    (sequence / "missing.ini").write_text("[inputs]\ncube = nowhere.fits\nangles = sim/angles.txt\n")
    r = gloam("run", sequence / "missing.ini", "--out", tmp_path / "never")
    assert r.returncode == 1 and "missing.ini:2: cube = nowhere.fits: cannot read" in r.stderr
    # a folder that is not a run folder is not written into
    busy = tmp_path / "busy"
    busy.mkdir()
    (busy / "thesis.tex").write_text("keep me")
    r = gloam("run", write_plan(sequence), "--out", busy)
    assert r.returncode == 1 and "not a gloam run folder" in r.stderr
    assert [p.name for p in busy.iterdir()] == ["thesis.tex"]


def test_a_failed_step_is_reported_and_the_run_stops(sequence, tmp_path):
    plan = write_plan(sequence, name="fail.ini", extra="[align]\ncrop = 100000\n")
    out = tmp_path / "run"
    r = gloam("run", plan, "--out", out)
    assert r.returncode == 1
    assert "step align failed" in r.stderr and "log.txt" in r.stderr
    import json
    s = json.loads((out / "summary.json").read_text())
    assert s["steps"]["align"]["state"] == "failed"
    assert s["steps"]["subtract"]["state"] == "not reached"
    assert not (out / "result.fits").exists()
    # fixed, the plan runs into the same folder; the finished step is kept
    plan = write_plan(sequence, name="fail.ini")
    r = gloam("run", plan, "--out", out)
    assert r.returncode == 0, r.stderr
    s = json.loads((out / "summary.json").read_text())
    assert s["steps"]["inspect"]["state"] == "unchanged"
    assert s["steps"]["align"]["state"] == "ran"
    # like every product, a run folder needs its parent folder
    r = gloam("run", plan, "--out", tmp_path / "no" / "such")
    assert r.returncode == 1 and "the output folder" in r.stderr
    assert str(tmp_path / "no") in r.stderr and "does not exist" in r.stderr
    assert not (tmp_path / "no").exists()


def test_an_empty_frame_is_reported_and_the_run_goes_on(sequence, tmp_path):
    """inspect reports an all-NaN frame (as empty) instead of failing the run;
    align's warning about it is shown on the terminal as well as logged."""
    import json
    import numpy as np
    from astropy.io import fits as afits
    d = tmp_path / "seq"
    shutil.copytree(sequence / "sim", d / "sim")
    with afits.open(sequence / "sim" / "cube.fits") as h:
        data, hdr = h[0].data.copy(), h[0].header
    data[3] = np.nan
    afits.PrimaryHDU(data, hdr).writeto(d / "sim" / "cube.fits", overwrite=True)
    plan = write_plan(d, steps=("inspect", "align"))
    r = gloam("run", plan, "--out", tmp_path / "run")
    assert r.returncode == 0, r.stderr
    rep = json.loads((tmp_path / "run" / "inspect.json").read_text())
    assert rep["empty_frames"] == [{"frame": 3, "channel": 0}]
    # the steps' warnings reach the terminal, named by the step, not only the log
    warn = [ln for ln in r.stderr.splitlines() if "warning:" in ln and "align:" in ln]
    assert any("frame 3 rejected" in ln for ln in warn), r.stderr
    assert "frame 3 rejected" in (tmp_path / "run" / "log.txt").read_text()


def test_a_failed_step_leaves_no_partial_product(sequence, tmp_path):
    (tmp_path / "sim").mkdir()
    (tmp_path / "sim" / "cube.fits").write_text("not FITS")
    for f in ("angles.txt", "psf.fits"):
        shutil.copy(sequence / "sim" / f, tmp_path / "sim" / f)
    plan = write_plan(tmp_path, steps=("inspect", "align"))
    out = tmp_path / "run"
    r = gloam("run", plan, "--out", out)
    assert r.returncode == 1 and "step inspect failed" in r.stderr
    names = sorted(p.name for p in out.iterdir())
    # the run's own record of what happened, and no product (not even an empty one)
    assert names == ["ledger.json", "log.txt", "report.html", "summary.json"], names


def test_a_missing_or_changed_product_reruns_its_step(sequence, tmp_path):
    """Every file a step wrote is in the ledger: figures and ECSV twins too."""
    import json
    plan = write_plan(sequence, steps=("inspect", "align", "subtract", "detect"))
    out = tmp_path / "run"
    r = gloam("run", plan, "--out", out)
    assert r.returncode == 0, r.stderr
    led = json.loads((out / "ledger.json").read_text())["steps"]
    det = {Path(p).name for p in led["detect"]["products"]}
    assert {"detect.snr.fits", "detect.snr.png", "detect.candidates.csv",
            "detect.candidates.ecsv", "detect.candidates.fits"} <= det, det
    assert {"aligned.fits", "star-positions.csv", "star-positions.ecsv", "angles.txt"} <= {
        Path(p).name for p in led["align"]["products"]}
    assert all(Path(p).name not in ("log.txt", "ledger.json", "summary.json", "report.html")
               for s in led.values() for p in s["products"])
    (out / "detect.snr.png").unlink()
    r = gloam("run", plan, "--out", out)
    assert r.returncode == 0, r.stderr
    s = json.loads((out / "summary.json").read_text())
    assert [s["steps"][k]["state"] for k in ("inspect", "align", "subtract", "detect")] == [
        "unchanged", "unchanged", "unchanged", "ran"]
    assert (out / "detect.snr.png").exists()
    (out / "star-positions.ecsv").write_text("# edited\n")
    r = gloam("run", plan, "--out", out)
    assert r.returncode == 0, r.stderr
    s = json.loads((out / "summary.json").read_text())
    assert s["steps"]["align"]["state"] == "ran" and s["steps"]["inspect"]["state"] == "unchanged"
    assert (out / "star-positions.ecsv").read_text() != "# edited\n"


def test_option_values_are_checked_before_anything_runs(sequence, tmp_path):
    """Each step's command line is parsed by its own command first: a bad value
    is one line naming the plan's line, section and key, and nothing is written."""
    cases = [
        ("method = pca", "method = klip-ringz",
         "[subtract] method = klip-ringz: --method: 'klip-ringz' is not"),
        ("modes = 3,6", "modes = 3,x", "[subtract] modes = 3,x: --modes:"),
        ("[limits]\nfake-runs = 1", "[limits]\nfake-runs = many", "[limits] fake-runs = many:"),
        ("[detect]\nmask-radius = 4", "[detect]\nmask-rad = 4",
         "'mask-rad' in [detect] is not an option of gloam detect"),  # no abbreviations
        # what the run sets for every step itself: a step printing its help,
        # or writing elsewhere, would leave the run without its product
        ("[detect]\nmask-radius = 4", "[detect]\nmask-radius = 4\nhelp = yes",
         "'help' in [detect] is set by the run itself"),
        ("[limits]\nfake-runs = 1", "[limits]\nfake-runs = 1\nout = elsewhere",
         "'out' in [limits] is set by the run itself"),
        ("method = pca", "method = pca\noverwrite = yes",
         "'overwrite' in [subtract] is set by the run itself"),
    ]
    for old, new, message in cases:
        plan = write_plan(sequence, name="bad.ini", modes="3,6")
        text = plan.read_text()
        assert old in text, old
        plan.write_text(text.replace(old, new))
        out = tmp_path / "never"
        r = gloam("run", plan, "--out", out)
        assert r.returncode == 1, (new, r.stderr)
        lines = r.stderr.strip().splitlines()
        assert len(lines) == 1 and "bad.ini:" in lines[0] and message in lines[0], (new, r.stderr)
        assert not out.exists()
        r = gloam("run", plan, "--dry-run")
        assert r.returncode == 1 and message in r.stderr


def test_figures_are_titled_with_the_target(sequence, tmp_path):
    plan = write_plan(sequence)
    r = gloam("run", plan, "--dry-run")
    assert r.returncode == 0, r.stderr
    for step in ("detect", "limits"):
        line = next(x for x in r.stderr.splitlines() if f" gloam {step} " in x)
        assert "--title Tarn-12" in line, line


# ---- gloam survey ----------------------------------------------------------------

SURVEY_PLAN = """[run]
name = night-1
[survey]
folders = data/*
[inputs]
cube = cube.fits
angles = angles.txt
psf = psf.fits
pixscale = 12.25
[steps]
run = inspect, align, subtract, detect, limits
[subtract]
method = pca
modes = 3
mask-radius = 4
[detect]
mask-radius = 4
[limits]
fake-runs = 1
"""


@pytest.fixture(scope="module")
def survey(tmp_path_factory):
    d = tmp_path_factory.mktemp("survey")
    (d / "data").mkdir()
    for seed, name in ((11, "Tarn-12"), (12, "Orlen-7")):
        r = gloam("simulate", d / "data" / name, "--frames", 20, "--size", 64, "--seed", seed,
                  "--companion", "14:60:3e-3")
        assert r.returncode == 0, r.stderr
    (d / "plan.ini").write_text(SURVEY_PLAN)
    return d


def fits_data(path):
    from astropy.io import fits
    with fits.open(path) as h:
        return [hdu.data.copy() if hdu.data is not None else None for hdu in h]


def same_products(a, b):
    """Two run folders hold the same results: CSV tables byte for byte, FITS
    data arrays equal (headers differ only in paths, dates and checksums)."""
    import numpy as np
    for p in sorted(a.iterdir()):
        q = b / p.name
        assert q.exists(), p.name
        if p.suffix == ".csv":
            assert p.read_bytes() == q.read_bytes(), p.name
        elif p.suffix == ".fits":
            for x, y in zip(fits_data(p), fits_data(q)):
                if x is None:
                    assert y is None
                elif x.dtype.names:
                    for col in x.dtype.names:
                        assert np.array_equal(x[col], y[col], equal_nan=True), (p.name, col)
                else:
                    assert np.array_equal(x, y, equal_nan=True), p.name


def test_survey_serial_writes_one_row_and_one_report_per_target(survey, tmp_path):
    out = tmp_path / "S"
    r = gloam("survey", survey / "plan.ini", "--out", out)
    assert r.returncode == 0, r.stderr
    rows = list(csv.DictReader((out / "survey.csv").open()))
    assert [row["target"] for row in rows] == ["Orlen-7", "Tarn-12"]  # the folders, sorted
    for name in ("Orlen-7", "Tarn-12"):  # process 0 logs every target's outcome
        assert f"target {name}: done, run folder {out}/{name}" in r.stderr, r.stderr
    import json
    from astropy.io import fits
    for row in rows:
        s = json.loads((out / row["target"] / "summary.json").read_text())
        assert row["ok"] == "1"
        assert float(row["field_rotation_deg"]) == pytest.approx(s["field_rotation_deg"], rel=1e-9)
        for sep, col in ((0.2, "contrast_c50_0.2arcsec"), (0.5, "contrast_c50_0.5arcsec")):
            c = next(e for e in s["contrast"]["at_arcsec"] if e["sep_arcsec"] == sep)
            if c["contrast_c50"] is None:  # outside the contrast table: an empty field
                assert row[col] == ""
            else:
                assert float(row[col]) == pytest.approx(c["contrast_c50"], rel=1e-9)
        # 16 px: inside the 64-px frames; empty where the companion's own
        # self-subtraction lobes cap its S/N (14 deg of rotation, docs/limits.md)
        assert "contrast_c50_0.2arcsec" in row
    with fits.open(out / "survey.fits") as h:
        t = h["SURVEY"].data
        assert [x.strip() for x in t["target"]] == ["Orlen-7", "Tarn-12"]
        assert h["SURVEY"].columns["field_rotation_deg"].unit == "deg"
    page = (out / "survey.html").read_text()
    assert 'href="Orlen-7/report.html"' in page and 'href="Tarn-12/report.html"' in page
    dom, console = open_in_chromium(out / "survey.html", tmp_path)
    assert 'data-images="1/1"' in dom and console == []


def test_a_failed_target_does_not_stop_the_others(survey, tmp_path):
    import shutil as sh
    d = tmp_path / "copy"
    sh.copytree(survey, d)
    (d / "data" / "Broken-1").mkdir()
    (d / "data" / "Broken-1" / "cube.fits").write_text("not FITS")
    sh.copy(d / "data" / "Tarn-12" / "angles.txt", d / "data" / "Broken-1")
    sh.copy(d / "data" / "Tarn-12" / "psf.fits", d / "data" / "Broken-1")
    out = tmp_path / "S"
    r = gloam("survey", d / "plan.ini", "--out", out)
    assert r.returncode == 1
    assert "target Broken-1 failed" in r.stderr
    assert "3 targets, 1 failed" in r.stdout
    rows = {row["target"]: row for row in csv.DictReader((out / "survey.csv").open())}
    assert rows["Broken-1"]["ok"] == "0" and rows["Tarn-12"]["ok"] == "1" and rows["Orlen-7"]["ok"] == "1"
    assert "Broken-1 FAILED" in (out / "survey.html").read_text()


def test_survey_under_mpirun_equals_the_serial_survey(survey, tmp_path):
    mpirun = shutil.which("mpirun")
    if not mpirun:
        pytest.skip("mpirun is not installed (Debian package openmpi-bin)")
    if "has no MPI" in gloam("survey", "--help").stdout:
        pytest.skip("this gloam was built without MPI (meson option mpi; libopenmpi-dev)")
    serial, parallel = tmp_path / "serial", tmp_path / "mpi"
    r = gloam("survey", survey / "plan.ini", "--out", serial)
    assert r.returncode == 0, r.stderr
    r = subprocess.run([mpirun, "--allow-run-as-root", "--oversubscribe", "-np", "2", GLOAM, "survey",
                        str(survey / "plan.ini"), "--out", str(parallel)], capture_output=True,
                       text=True, timeout=600)
    assert r.returncode == 0, r.stdout + r.stderr
    assert "[MPI]" in r.stdout
    assert (serial / "survey.csv").read_bytes() == (parallel / "survey.csv").read_bytes()
    for name in ("Orlen-7", "Tarn-12"):
        same_products(serial / name, parallel / name)


# ---- progress on a terminal ----------------------------------------------------

BAR = __import__("re").compile(r"^  (\S.{0,11}?) *\[[#.]{24}\] +\d+%")


def run_on_terminal(*args):
    """Runs gloam with stderr on a pseudo-terminal (Python's pty module), as
    a user at a terminal would; returns the exit status and what the
    terminal received."""
    import pty
    import select
    master, slave = pty.openpty()
    p = subprocess.Popen([GLOAM, *map(str, args)], stdin=subprocess.DEVNULL,
                         stdout=subprocess.DEVNULL, stderr=slave)
    os.close(slave)
    got = b""
    while True:
        ready, _, _ = select.select([master], [], [], 0.2)
        if ready:
            try:
                chunk = os.read(master, 1 << 16)
            except OSError:  # the child closed the terminal
                break
            if not chunk:
                break
            got += chunk
        elif p.poll() is not None:
            break
    p.wait()
    os.close(master)
    return p.returncode, got.decode()


def bars(text):
    """The pieces of terminal output between carriage returns and newlines,
    and the task named by each progress bar among them."""
    pieces = [s for line in text.replace("\r\n", "\n").split("\n") for s in line.split("\r")]
    return pieces, [m.group(1) for m in map(BAR.match, pieces) if m]


@pytest.mark.parametrize("what", ["limits", "vet", "run"])
def test_one_progress_bar_on_a_terminal_none_when_piped(sequence, tmp_path, what):
    """Commands that run other stages inside (limits its subtractions, vet
    its fits and fakes, run whole commands) draw one bar at a time on a
    terminal: the outer task's, the inner one only as its label, never a
    second bar, never a message on the bar's line, no line wider than 79
    characters. Piped, stderr holds no progress at all (no carriage return,
    no bar), and neither does a run folder's log.txt."""
    d = sequence
    common = ["--angles", d / "sim" / "angles.txt", "--psf", d / "sim" / "psf.fits",
              "--method", "median-frame", "--mask-radius", 4]
    if what == "limits":
        args = ["limits", d / "sim" / "cube.fits", *common, "--out", tmp_path / "l"]
    elif what == "vet":
        (tmp_path / "c.csv").write_text("sep_px,pa_deg\n14,60\n")
        args = ["vet", d / "sim" / "cube.fits", *common, "--candidates", tmp_path / "c.csv",
                "--error-fakes", 2, "--out", tmp_path / "v"]
    else:
        plan = write_plan(d, name="bars.ini", steps=("subtract", "detect", "limits", "vet"))
        args = ["run", plan, "--out", tmp_path / "run"]
    rc, text = run_on_terminal(*args)
    assert rc == 0, text
    pieces, tasks = bars(text)
    assert tasks, text  # on a terminal the progress is shown
    drawn = [p for p in pieces if BAR.match(p) or (p and not p.strip())]  # bars, clearings
    assert all(len(p) <= 79 for p in drawn), [p for p in drawn if len(p) > 79]
    for p in pieces:  # a message never shares the bar's line
        assert not (BAR.match(p) and "gloam " in p), p
        assert p.count("] ") <= 1 and p.count("[") <= 2, p  # one bar (and one label)
    outer = {"limits": "limits", "vet": "vet", "run": "run"}[what]
    assert outer in tasks
    # once the outer task has started, every bar is the outer one until it ends
    first = tasks.index(outer)
    assert set(tasks[first:]) == {outer}, tasks
    if what == "run":
        assert set(tasks) == {"run"}, tasks
    # piped: nothing of the bar
    out = tmp_path / "piped"
    out.mkdir()
    args = [str(a).replace(str(tmp_path / "l"), str(out / "l"))
            .replace(str(tmp_path / "v"), str(out / "v"))
            .replace(str(tmp_path / "run"), str(out / "run")) for a in args]
    r = gloam(*args)
    assert r.returncode == 0, r.stderr
    assert "\r" not in r.stderr and not bars(r.stderr)[1], r.stderr
    if what == "run":
        log = (out / "run" / "log.txt").read_text()
        assert "\r" not in log and not bars(log)[1]


def dry_marks(r):
    """step -> its mark in a --dry-run listing ('up to date' or the reason)."""
    marks = {}
    for line in r.stderr.splitlines():
        m = re.search(r"Tarn-12: (\w+): (up to date, would not run again|would run \((.*?)\)): gloam ",
                      line)
        if m:
            marks[m.group(1)] = "up to date" if m.group(2).startswith("up") else m.group(3)
    return marks


def test_dry_run_marks_what_would_run_again(sequence, tmp_path):
    """--dry-run marks each step up to date or to run again with its reason,
    as the run then does: a fresh folder (not created by the dry run), the
    same plan again, a changed option, --force, and a step that reads what a
    forced step rewrites."""
    steps = ("inspect", "align", "subtract", "detect")
    plan = write_plan(sequence, name="dry.ini", steps=steps)
    out = tmp_path / "run"
    r = gloam("run", plan, "--out", out, "--dry-run")
    assert r.returncode == 0, r.stderr
    assert dry_marks(r) == {s: "not run in this folder before" for s in steps}, r.stderr
    assert not out.exists()
    assert gloam("run", plan, "--out", out).returncode == 0
    r = gloam("run", plan, "--out", out, "--dry-run")
    assert dry_marks(r) == {s: "up to date" for s in steps}, r.stderr
    # a changed detect option: only detect would run, and only detect runs
    plan.write_text(plan.read_text().replace("[detect]\nmask-radius = 4", "[detect]\nmask-radius = 5"))
    r = gloam("run", plan, "--out", out, "--dry-run")
    want = {"inspect": "up to date", "align": "up to date", "subtract": "up to date",
            "detect": "its options changed"}
    assert dry_marks(r) == want, r.stderr
    r = gloam("run", plan, "--out", out, "--force", "align", "--dry-run")
    assert dry_marks(r) == {"inspect": "up to date", "align": "--force align",
                            "subtract": "align, whose products it reads, runs again",
                            "detect": "its options changed"}, r.stderr
    r = gloam("run", plan, "--out", out, "--verbose")
    assert r.returncode == 0, r.stderr
    skipped = {s for s in steps if f"Tarn-12: {s}: unchanged since the last run" in r.stderr}
    assert skipped == {"inspect", "align", "subtract"}, r.stderr

"""The contrast figure for a journal: gloam limits writes PREFIX.limits.pdf,
one column (3.5 in = 252 pt) wide with readable fonts and the assumptions on
the page.

References: poppler's pdfinfo (page size), pdffonts (fonts embedded) and
pdftotext -bbox (the words and their heights in pt) read the PDF; the sizes
are the common practice of journals for a one-column figure (fonts of 6 pt
or more in print; from memory, no single style guide quoted).
"""
import os
import re
import shutil
import subprocess

import pytest

GLOAM = os.environ["GLOAM"]


def run(*args):
    return subprocess.run([GLOAM, *map(str, args)], capture_output=True, text=True)


@pytest.fixture(scope="module")
def pdf(tmp_path_factory):
    for tool in ("pdfinfo", "pdffonts", "pdftotext"):
        if not shutil.which(tool):
            pytest.skip(f"{tool} is not installed (Debian package poppler-utils)")
    d = tmp_path_factory.mktemp("fig")
    r = run("simulate", d / "sim", "--frames", 20, "--size", 64, "--seed", 4)
    assert r.returncode == 0, r.stderr
    r = run("limits", d / "sim" / "cube.fits", "--angles", d / "sim" / "angles.txt", "--psf",
            d / "sim" / "psf.fits", "--fwhm", 4, "--method", "klip-frame", "--modes", "3,5",
            "--mask-radius", 4, "--fake-runs", 1, "--pixscale", 12.25, "--out", d / "lim")
    assert r.returncode == 0, r.stderr
    return d / "lim.limits.pdf"


def test_one_column_wide(pdf):
    info = subprocess.run(["pdfinfo", str(pdf)], capture_output=True, text=True).stdout
    w, h = map(float, re.search(r"Page size:\s+([\d.]+) x ([\d.]+) pts", info).groups())
    assert w == pytest.approx(252, abs=0.5)  # 3.5 in
    assert 150 < h < 300
    assert re.search(r"Pages:\s+1\n", info)


def test_fonts_embedded_and_readable(pdf):
    fonts = subprocess.run(["pdffonts", str(pdf)], capture_output=True, text=True).stdout
    rows = fonts.strip().splitlines()[2:]
    assert rows, "no font in the PDF"
    assert all(" yes " in row for row in rows), fonts  # every font embedded
    words = subprocess.run(["pdftotext", "-bbox", str(pdf), "-"], capture_output=True,
                           text=True).stdout
    boxes = re.findall(r'yMin="([\d.]+)" xMax="[\d.]+" yMax="([\d.]+)">([^<]+)<', words)
    heights = {}
    for y0, y1, word in boxes:
        heights.setdefault(word, []).append(float(y1) - float(y0))
    # axis titles and legend at 6 pt or more in print (word box heights)
    for word in ("separation", "contrast", "completeness"):
        assert word in heights, word
        assert min(heights[word]) >= 6.0, (word, heights[word])


def test_assumptions_travel_with_the_figure(pdf):
    text = subprocess.run(["pdftotext", str(pdf), "-"], capture_output=True, text=True).stdout
    assert "50% completeness" in text
    assert "FPF" in text and "Student-t" in text
    assert "throughput" in text


def test_every_plane_and_the_candidates_on_the_figure(pdf, tmp_path):
    """--plot-every-plane draws one 50% curve per mode count (named in the
    legend), and --candidates marks each candidate, numbered."""
    d = pdf.parent
    cand = tmp_path / "cand.csv"
    cand.write_text("rank,x,y,sep_px,pa_deg,snr\n1,40,40,12.0,45.0,7.0\n")
    r = run("limits", d / "sim" / "cube.fits", "--angles", d / "sim" / "angles.txt", "--psf",
            d / "sim" / "psf.fits", "--fwhm", 4, "--method", "klip-frame", "--modes", "3,5",
            "--mask-radius", 4, "--fake-runs", 1, "--candidates", cand, "--plot-every-plane",
            "--out", tmp_path / "lim")
    assert r.returncode == 0, r.stderr
    text = subprocess.run(["pdftotext", str(tmp_path / "lim.limits.pdf"), "-"], capture_output=True,
                          text=True).stdout
    assert "3 modes" in text and "5 modes" in text
    assert "every plane" in text
    assert (tmp_path / "lim.limits.png").exists() and (tmp_path / "lim.limits.svg").exists()

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

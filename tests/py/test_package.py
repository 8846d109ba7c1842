"""libgloam as a package for other programs: install, pkg-config, the
shared library's version and exported symbols, the man pages and the bash
completion.

References: pkg-config (freedesktop.org) is the outside reader of the
installed gloam.pc; the ELF dynamic section (SONAME) and symbol table are
read with binutils' readelf and nm; the robust statistics a small client
computes through the shared library are checked against numpy's median and
scipy.stats.median_abs_deviation(scale="normal") (Hampel 1974).
"""
import os
import re
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

BUILD = Path(os.environ["GLOAM_TEST_TOOLS"]).parent

CLIENT = r"""
#include <gloam/gloam.h>
#include <stdio.h>
int main(void)
{
    double x[] = {X};
    double work[sizeof x / sizeof x[0]], med, sig;
    size_t n = gl_stats_robust(x, sizeof x / sizeof x[0], work, &med, &sig);
    printf("%s %zu %.17g %.17g\n", gl_version(), n, med, sig);
    return 0;
}
"""


@pytest.fixture(scope="module")
def installed(tmp_path_factory):
    for tool in ("meson", "pkg-config", "cc", "readelf", "nm"):
        if not shutil.which(tool):
            pytest.skip(f"{tool} is not installed")
    dest = tmp_path_factory.mktemp("destdir")
    r = subprocess.run(["meson", "install", "-C", str(BUILD), "--destdir", str(dest), "--no-rebuild",
                        "--quiet"], capture_output=True, text=True)
    assert r.returncode == 0, r.stdout + r.stderr
    pcs = list(dest.rglob("gloam.pc"))
    assert len(pcs) == 1, pcs
    return dest, pcs[0]


def pkgconfig(dest, pc, *args):
    env = dict(os.environ, PKG_CONFIG_PATH=str(pc.parent), PKG_CONFIG_SYSROOT_DIR=str(dest))
    r = subprocess.run(["pkg-config", *args, "gloam"], capture_output=True, text=True, env=env)
    assert r.returncode == 0, r.stderr
    return r.stdout.split()


def shared_lib(dest):
    libs = [p for p in dest.rglob("libgloam.so.*") if not p.is_symlink()]
    assert len(libs) == 1, libs
    return libs[0]


def test_pkgconfig_builds_a_client_against_the_shared_library(installed, tmp_path):
    dest, pc = installed
    data = np.array([3.0, -1.5, 7.25, 0.5, 2.0, 100.0, 1.0])
    (tmp_path / "client.c").write_text(CLIENT.replace("X", ", ".join(repr(v) for v in data)))
    cflags = pkgconfig(dest, pc, "--cflags")
    libs = pkgconfig(dest, pc, "--libs")
    r = subprocess.run(["cc", "-std=c17", "-o", str(tmp_path / "client"), str(tmp_path / "client.c"),
                        *cflags, *libs], capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    lib = shared_lib(dest)
    env = dict(os.environ, LD_LIBRARY_PATH=str(lib.parent))
    out = subprocess.run([str(tmp_path / "client")], capture_output=True, text=True, env=env)
    assert out.returncode == 0, out.stderr
    version, n, med, sig = out.stdout.split()
    assert version == pkgconfig(dest, pc, "--modversion")[0]
    assert int(n) == data.size
    # numpy/scipy reference: median and the normal-consistent median absolute
    # deviation (1 / Phi^-1(3/4) = 1.4826... x MAD)
    assert float(med) == pytest.approx(np.median(data), rel=1e-12)
    assert float(sig) == pytest.approx(stats.median_abs_deviation(data, scale="normal"), rel=1e-12)


def test_shared_library_is_versioned_and_exports_only_the_api(installed):
    dest, pc = installed
    lib = shared_lib(dest)
    version = pkgconfig(dest, pc, "--modversion")[0]
    assert lib.name == f"libgloam.so.{version}"
    dyn = subprocess.run(["readelf", "-d", str(lib)], capture_output=True, text=True).stdout
    assert f"[libgloam.so.{version.split('.')[0]}]" in dyn  # SONAME carries the major version
    syms = subprocess.run(["nm", "-D", "--defined-only", str(lib)], capture_output=True,
                          text=True).stdout.split("\n")
    names = [s.split()[-1] for s in syms if s.strip() and s.split()[1] in "TDBR"]
    assert names, "no exported symbols"
    # GCC's OpenMP runtime gives each named critical section a global lock
    # symbol (.gomp_critical_user_NAME); it is the compiler's, not our API
    stray = [n for n in names if not n.startswith(("gl_", ".gomp_critical_user_"))]
    assert not stray, f"exported symbols outside the gl_ API: {stray[:10]}"
    # the command layer's entry points are API; its helpers are not
    for api in ("gl_command_exec", "gl_command_list", "gl_command_set_processes", "gl_run_target"):
        assert api in names, f"{api} is not exported"
    assert not [n for n in names if n.startswith(("cli_", "cmd_"))]


COMMAND_CLIENT = r"""
#include <gloam/gloam.h>
#include <stdio.h>
#include <stdlib.h>
int main(int argc, char **argv)
{
    char *text = NULL;
    size_t len = 0;
    FILE *m = open_memstream(&text, &len);
    int rc = gl_command_exec(argc, argv, m, m);
    fclose(m);
    printf("rc=%d\n%s", rc, text);
    free(text);
    return 0;
}
"""


def test_a_client_runs_a_command_through_the_shared_library(installed, tmp_path):
    """A program of others runs `gloam inspect` with its own streams."""
    dest, pc = installed
    (tmp_path / "client.c").write_text(COMMAND_CLIENT)
    r = subprocess.run(["cc", "-std=gnu17", "-o", str(tmp_path / "client"), str(tmp_path / "client.c"),
                        *pkgconfig(dest, pc, "--cflags"), *pkgconfig(dest, pc, "--libs")],
                       capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    env = dict(os.environ, LD_LIBRARY_PATH=str(shared_lib(dest).parent))
    out = subprocess.run([str(tmp_path / "client"), "inspect", "--help"], capture_output=True,
                         text=True, env=env)
    assert out.returncode == 0 and out.stderr == "", out.stderr
    assert out.stdout.startswith("rc=0\nusage: gloam inspect")
    bad = subprocess.run([str(tmp_path / "client"), "inspect", str(tmp_path / "none.fits")],
                         capture_output=True, text=True, env=env)
    assert bad.stderr == "" and bad.stdout.startswith("rc=1\ngloam inspect: ")
    assert "none.fits" in bad.stdout


def commands(gloam):
    out = subprocess.run([gloam, "--help"], capture_output=True, text=True).stdout
    block = out.split("commands:")[1].split("\n\n")[0]
    return [line.split()[0] for line in block.strip().splitlines()]


def help_options(gloam, cmd):
    out = subprocess.run([gloam, cmd, "--help"], capture_output=True, text=True).stdout
    return sorted(set(re.findall(r"(?<![\w-])--[a-z][a-z0-9-]*", out)))


def test_a_man_page_per_command_renders_cleanly_and_lists_every_option(installed):
    """groff (GNU troff, -ww: all warnings) is the outside reader of the pages."""
    if not shutil.which("groff"):
        pytest.skip("groff is not installed")
    dest, _ = installed
    gloam = os.environ["GLOAM"]
    cmds = commands(gloam)
    assert "subtract" in cmds and "limits" in cmds
    pages = {p.name: p for p in dest.rglob("man1/*.1")}
    assert sorted(pages) == sorted(["gloam.1"] + [f"gloam-{c}.1" for c in cmds]), \
        "the man pages (src/cli/meson.build, read from src/command/command.c) differ from gloam --help"
    for name, page in pages.items():
        r = subprocess.run(["groff", "-man", "-ww", "-z", str(page)], capture_output=True, text=True)
        assert r.returncode == 0 and r.stderr == "", f"{name}: {r.stderr}"
    for c in cmds:
        text = subprocess.run(["groff", "-man", "-Tutf8", "-P-cbou", str(pages[f"gloam-{c}.1"])],
                              capture_output=True, text=True, env=dict(os.environ, MANWIDTH="200")).stdout
        text = text.replace("\u2010", "-").replace("\u2212", "-")
        missing = [o for o in help_options(gloam, c) if o not in text]
        assert not missing, f"gloam-{c}.1 lacks {missing}"


def test_bash_completion_offers_commands_and_options(installed, tmp_path):
    """bash's own programmable completion runs the installed script."""
    dest, _ = installed
    script = next(dest.rglob("bash-completion/completions/gloam"))
    gloam = os.environ["GLOAM"]
    probe = tmp_path / "probe.sh"
    probe.write_text(f"""shopt -s extglob
source {script}
COMP_WORDS=({gloam} sub); COMP_CWORD=1; _gloam; echo "${{COMPREPLY[*]}}"
COMP_WORDS=({gloam} subtract cube.fits --mo); COMP_CWORD=3; _gloam; echo "${{COMPREPLY[*]}}"
COMP_WORDS=({gloam} detect --); COMP_CWORD=2; _gloam; echo "${{COMPREPLY[*]}}"
""")
    r = subprocess.run(["bash", "--norc", str(probe)], capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    first, second, third = r.stdout.splitlines()
    assert first.split() == ["subtract"]
    assert "--modes" in second.split()
    assert sorted(third.split()) == help_options(gloam, "detect")

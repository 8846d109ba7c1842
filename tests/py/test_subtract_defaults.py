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


def test_clear_sequence_keeps_all_modes(tmp_path, clear):
    """--modes 5,30 keeps 30 modes; the raw K=30 residual equals the float64
    numpy.linalg.svd projection (Soummer et al. 2012 eqs. 5-9) within 5% rms."""
    raw = tmp_path / "raw.fits"
    r = run("subtract", clear / "cube.fits", "--angles", clear / "angles.txt", "--fwhm", 4,
            "--method", "klip-frame", "--modes", "5,30", "--out", tmp_path / "o.fits",
            "--raw-residuals", raw)
    assert r.returncode == 0, r.stderr
    assert "carry signal" not in r.stderr, r.stderr
    cube = fits.getdata(clear / "cube.fits").astype(np.float64)
    got = fits.getdata(raw).astype(np.float64)  # (frame, mode, y, x)
    n = cube.shape[-1]
    m = region(n, 0, n // 2)
    X = cube[:, m]
    X = X - X.mean(axis=1, keepdims=True)
    _, _, Z = np.linalg.svd(X, full_matrices=False)
    for q, k in enumerate([5, 30]):
        want = X - (X @ Z[:k].T) @ Z[:k]
        rms = np.linalg.norm(got[:, q][:, m] - want) / np.linalg.norm(want)
        assert rms < 0.05, (k, rms)

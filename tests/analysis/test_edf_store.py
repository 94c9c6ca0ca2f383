"""Greenhall–Riley EDFs kept in the cache folder between runs (analysis/edf.py)."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import allantools
import numpy as np

ROOT = Path(__file__).resolve().parents[2]

RUN = """
import sys
from noisecal.analysis.edf import edf
values = [edf(a, 2, m, 4097, True, False) for a in (0, -1, -2) for m in (1, 8, 64, 512)]
print(repr(values))
print("allantools" in sys.modules)
"""


def _run(cache: Path, **env):
    out = subprocess.run([sys.executable, "-c", RUN], capture_output=True, text=True,
                         check=True, cwd=ROOT,
                         env=dict(os.environ, NOISECAL_CACHE=str(cache), **env))
    values, loaded = out.stdout.strip().splitlines()
    return eval(values), loaded == "True"  # noqa: S307 - our own repr of floats


def test_second_run_reads_the_stored_values_without_allantools(tmp_path):
    """The first process computes with allantools and stores; the second gets the same
    numbers without loading it. The values are allantools.edf_greenhall's (the
    Greenhall & Riley (2003) algorithm)."""
    first, loaded_first = _run(tmp_path)
    second, loaded_second = _run(tmp_path)
    assert loaded_first and not loaded_second
    assert first == second
    ref = [allantools.edf_greenhall(alpha=a, d=2, m=m, N=4097, overlapping=True,
                                    modified=False) for a in (0, -1, -2) for m in (1, 8, 64, 512)]
    np.testing.assert_allclose(first, ref, rtol=1e-12)


def test_a_damaged_store_is_ignored_and_rewritten(tmp_path):
    """A truncated or foreign file changes nothing but the time taken."""
    good, _ = _run(tmp_path)
    (store,) = tmp_path.glob("edf-v1-*.json")
    store.write_text('{"0,2,1,4097,1,0": ')
    again, loaded = _run(tmp_path)
    assert loaded and again == good
    json.loads(store.read_text())  # rewritten whole
    store.write_text('{"0,2,1,4097,1,0": -5, "x": "y"}')
    third, _ = _run(tmp_path)
    assert third == good


def test_store_can_be_switched_off(tmp_path):
    """NOISECAL_NO_EDF_STORE: nothing read, nothing written."""
    _run(tmp_path, NOISECAL_NO_EDF_STORE="1")
    assert not list(tmp_path.glob("edf-v1-*.json"))

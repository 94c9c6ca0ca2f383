"""The demo's replacement unit re-checked against the first unit's block.

tools/make_demo_recordings.py documents the truth: the replacement unit's gyro_z white
noise is 1.6 times the first unit's, every other term is the same.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from noisecal.jobs.recheck import run_recheck

ROOT = Path(__file__).resolve().parents[2]
BASELINE = ROOT / "reports" / "demo" / "static.yaml"
SWAP = ROOT / "recordings" / "bench_static_swap.parquet"


@pytest.mark.skipif(not (BASELINE.exists() and SWAP.exists()), reason="demo files not present")
def test_swapped_unit_is_flagged_on_its_noisier_gyro_only(tmp_path):
    """gyro_z's white noise comes out worse and its new value's interval holds the
    documented 6.981e-5 rad/s/√Hz; every other channel's white noise stays consistent
    (the truths of the committed generator, not of this code)."""
    base = tmp_path / "static.yaml"
    shutil.copy(BASELINE, base)
    for side in ("static.png", "static.allan.yaml"):
        if (BASELINE.parent / side).exists():
            shutil.copy(BASELINE.parent / side, tmp_path / side)
    res = run_recheck(str(base), str(SWAP), str(tmp_path / "recheck.yaml"))
    white = {c.channel: c for c in res.comparisons if c.name == "white_noise"}
    assert white["gyro_z"].verdict == "worse", white["gyro_z"]
    assert res.verdict == "changed"
    new = res.new_sections["channels"]["gyro_z"]["white_noise"]
    assert new["ci95"][0] <= 6.981e-5 <= new["ci95"][1], new
    for name in ("gyro_x", "gyro_y", "accel_x", "accel_y", "accel_z"):
        assert white[name].verdict == "consistent", white[name]

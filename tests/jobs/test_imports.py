"""What loading the command line and a job costs: heavy libraries only where used."""

from __future__ import annotations

import subprocess
import sys

import pytest

HEAVY = ("pint", "matplotlib", "pandas", "pyarrow", "rosbags", "jinja2", "dask",
         "scipy.stats", "scipy.optimize", "numba")


@pytest.mark.parametrize("module", ["noisecal.cli", "noisecal.jobs.static",
                                    "noisecal.jobs.consistency", "noisecal.jobs.odometry"])
def test_loading_a_job_loads_no_heavy_library(module):
    """Each of these libraries takes 0.1-0.7 s to import; a job loads them where it
    uses them (the unit registry for an unusual unit, the other jobs' plots, numba
    when its kernels run), so a run that fails on its arguments or input stops at
    once: common practice, no source."""
    code = (f"import sys, {module}\n"
            f"print(' '.join(m for m in {HEAVY!r} if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip() == ""


def test_a_cold_static_run_loads_no_statistics_library(tmp_path):
    """A whole static run with an empty cache folder — the EDFs of every point computed
    afresh (noisecal.analysis.greenhall) — loads neither allantools nor scipy.stats
    nor scipy.signal (together about 0.5 s of a run), nor scipy.special and
    scipy.ndimage (0.15 s more; noisecal.analysis.special and a numpy running
    median stand in for them): common practice, no source."""
    import os

    import numpy as np

    rng = np.random.default_rng(3)
    path = tmp_path / "white.csv"
    np.savetxt(path, np.column_stack([np.arange(4096) * 0.01, rng.normal(0, 1e-3, 4096)]),
               delimiter=",", header="time [s],gyro_x [rad/s]", comments="", fmt="%.9g")
    code = ("import sys\nfrom noisecal.cli import main\n"
            f"status = main(['static', {str(path)!r}, '-o', {str(tmp_path / 'w.yaml')!r}, "
            "'--reps', '40', '--quiet'])\n"
            "print(status, *[m for m in ('allantools', 'scipy.stats', 'scipy.signal', "
            "'scipy.special', 'scipy.ndimage') "
            "if m in sys.modules])")
    cache = tmp_path / "cache"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         env=dict(os.environ, NOISECAL_CACHE=str(cache)))
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip().splitlines()[-1].split() == ["0"]
    assert (tmp_path / "w.yaml").exists() and any(cache.iterdir())

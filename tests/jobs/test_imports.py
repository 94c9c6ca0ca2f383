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
    uses them (the unit registry for an unusual unit, the plot when one is written,
    the compiled kernels when a channel is fitted), so a run that fails on its
    arguments or input stops at once: common practice, no source."""
    code = (f"import sys, {module}\n"
            f"print(' '.join(m for m in {HEAVY!r} if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip() == ""

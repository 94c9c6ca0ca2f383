"""The ``noisecal`` command's quick exit keeps every output and exit handler.

``noisecal.cli.console`` ends the process with ``os._exit`` once ``main`` has
returned (skipping the interpreter's module teardown); the outputs, the exit status,
the streams and the exit handlers must be as with a normal exit.
Common practice, no source.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import yaml

ROOT = Path(__file__).resolve().parents[2]


def _cli(args, cache):
    return subprocess.run([sys.executable, "-m", "noisecal.cli", *args], capture_output=True,
                          text=True, cwd=ROOT, env=dict(os.environ, NOISECAL_CACHE=str(cache)))


def test_quick_exit_keeps_outputs_streams_and_exit_handlers(tmp_path):
    rng = np.random.default_rng(1)
    n = 4096
    path = tmp_path / "bench.csv"
    np.savetxt(path, np.column_stack([np.arange(n) * 0.01, rng.normal(0, 1e-3, n)]),
               delimiter=",", header="time [s],gyro_x [rad/s]", comments="", fmt="%.9g")
    out = _cli(["static", str(path), "-o", str(tmp_path / "b.yaml"), "--reps", "40"],
               tmp_path / "cache")
    assert out.returncode == 0, out.stderr
    assert "white_noise" in out.stdout  # the summary reached standard output
    block = yaml.safe_load((tmp_path / "b.yaml").read_text())
    assert block["channels"]["gyro_x"]["white_noise"]["value"] > 0
    assert (tmp_path / "b.png").stat().st_size > 0
    # An exit handler registered in the process still runs.
    marker = tmp_path / "handler-ran"
    code = ("import atexit, sys\n"
            f"atexit.register(lambda: open({str(marker)!r}, 'w').close())\n"
            "from noisecal.cli import console\n"
            f"sys.argv = ['noisecal', 'static', {str(path)!r}, '-o', "
            f"{str(tmp_path / 'c.yaml')!r}, '--reps', '40']\n"
            "console()\n")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          cwd=ROOT, env=dict(os.environ, NOISECAL_CACHE=str(tmp_path / "cache")))
    assert done.returncode == 0, done.stderr
    assert marker.exists()
    piped = _cli(["static", str(path), "-o", "-", "--reps", "40"], tmp_path / "cache")
    assert piped.returncode == 0 and yaml.safe_load(piped.stdout)["channels"]


def test_quick_exit_keeps_the_error_status(tmp_path):
    out = _cli(["static", str(tmp_path / "missing.csv"), "-o", str(tmp_path / "x.yaml")],
               tmp_path / "cache")
    assert out.returncode == 2
    assert len(out.stderr.strip().splitlines()) == 1
    assert not (tmp_path / "x.yaml").exists()


def test_no_cache_leaves_the_cache_folder_alone(tmp_path):
    """--no-cache: nothing is written in the cache folder."""
    rng = np.random.default_rng(2)
    path = tmp_path / "bench.csv"
    np.savetxt(path, np.column_stack([np.arange(4096) * 0.01, rng.normal(0, 1e-3, 4096)]),
               delimiter=",", header="time [s],gyro_x [rad/s]", comments="", fmt="%.9g")
    out = _cli(["static", str(path), "-o", str(tmp_path / "b.yaml"), "--reps", "40",
                "--no-cache"], tmp_path / "cache")
    assert out.returncode == 0, out.stderr
    assert not (tmp_path / "cache").exists() or not any((tmp_path / "cache").iterdir())

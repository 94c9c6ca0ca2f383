"""Shared helpers: write small recordings, run the CLI in-process."""

from __future__ import annotations

import hashlib
from pathlib import Path

import numpy as np
import pytest

from noisecal.cli import main


def write_csv(path: Path, header: list[str], rows) -> Path:
    """Write a CSV recording from a header and rows (any cell text allowed)."""
    lines = [",".join(header)] + [",".join(str(c) for c in row) for row in rows]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def rate_csv(path: Path, y: np.ndarray, period: float, name: str = "gyro_x",
             unit: str = "rad/s") -> Path:
    """A one-channel CSV of rate samples at a fixed period."""
    t = np.arange(y.shape[0]) * period
    with open(path, "w", encoding="utf-8") as fh:
        fh.write(f"time [s],{name} [{unit}]\n")
        np.savetxt(fh, np.column_stack([t, y]), delimiter=",", fmt="%.12g")
    return path


def sha(path: Path) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


@pytest.fixture(autouse=True, scope="session")
def _private_cache(tmp_path_factory):
    """Every test run gets its own cache folder, never the user's."""
    import os

    folder = tmp_path_factory.mktemp("cache")
    old = os.environ.get("NOISECAL_CACHE")
    os.environ["NOISECAL_CACHE"] = str(folder)
    yield folder
    if old is None:
        os.environ.pop("NOISECAL_CACHE", None)
    else:
        os.environ["NOISECAL_CACHE"] = old


@pytest.fixture
def run_cli(capsys):
    """Run ``noisecal ARGS`` in-process; return (status, stdout, stderr)."""
    def run(*args):
        status = main([str(a) for a in args])
        out, err = capsys.readouterr()
        return status, out, err
    return run

"""Small noisecal blocks and filter logs for the filter tests (values chosen per test)."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from noisecal.export import yaml_block
from noisecal.types import Estimate


def est(value, low=None, high=None, unit=""):
    """An Estimate; without low/high, an interval of ±10 % around value."""
    low = value * 0.9 if low is None else low
    high = value * 1.1 if high is None else high
    return Estimate(value, low, high, unit, "test value")


def static_block(path: Path, channels: dict) -> Path:
    """A static block: channel → {term: Estimate, 'gauss_markov': {sigma, correlation_time}}."""
    chans = {}
    for ch, terms in channels.items():
        entry = {"unit": "rad/s"}
        for name, e in terms.items():
            if name == "gauss_markov":
                entry[name] = {k: yaml_block.estimate(v) for k, v in e.items()}
            else:
                entry[name] = yaml_block.estimate(e)
        chans[ch] = entry
    sections = {"layout": "noisecal.static/1", "provenance": {"job": "static"},
                "channels": chans}
    path.write_text(yaml_block.render(sections), encoding="utf-8")
    return path


def motion_block(path: Path, sigmas: dict) -> Path:
    """A motion block with measurement.sigma per channel."""
    sections = {"layout": "noisecal.motion/1", "provenance": {"job": "motion"},
                "measurement": {"order": list(sigmas),
                                "sigma": {k: yaml_block.estimate(v) for k, v in sigmas.items()}}}
    path.write_text(yaml_block.render(sections), encoding="utf-8")
    return path


def write_log(path: Path, names: list, unit: str, nu: np.ndarray, S: np.ndarray,
              extra: dict | None = None) -> Path:
    """A filter log CSV: nu_<name> and S_<a>_<b> (upper triangle), plus extra columns."""
    K, m = nu.shape
    cols = {"time [s]": np.arange(K) * 0.1}
    for i, n in enumerate(names):
        cols[f"nu_{n} [{unit}]"] = nu[:, i]
    for i in range(m):
        for j in range(i, m):
            cols[f"S_{names[i]}_{names[j]} [{unit}**2]"] = S[:, i, j]
    cols.update(extra or {})
    with open(path, "w", encoding="utf-8") as fh:
        fh.write(",".join(cols) + "\n")
        np.savetxt(fh, np.column_stack(list(cols.values())), delimiter=",", fmt="%.12g")
    return path

"""Odometry plots: window errors against motion with the model's band, slip over time."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .atomic import atomic_path

_LABELS = (("δrot1", "rad"), ("δtrans", "m"), ("δrot2", "rad"))


def odometry_figure(res, path: Path) -> None:
    """Errors of (δrot1, δtrans, δrot2) per window against the motion's size, with
    the fitted model's ±2σ, and the translation error over time with slip marked;
    written atomically as PNG."""
    m = res.model
    keep = ~m.slip
    var = m.variances(m.motion_odo)
    from .plot import _figure

    fig = _figure(19, 4.2)
    axes = fig.subplots(1, 4)
    for j, (name, unit) in enumerate(_LABELS):
        ax = axes[j]
        # Against the truth's motion: the odometry's own includes the error itself.
        size = np.abs(m.motion_true[:, j])
        band = 2 * np.sqrt(var[:, j])
        ax.plot(size, band, "_", ms=4, color="0.55", label="model ±2σ of each window")
        ax.plot(size, -band, "_", ms=4, color="0.55")
        ax.plot(size[keep], m.errors[keep, j], ".", ms=2.5, color="#1f77b4", label="windows")
        ax.plot(size[~keep], m.errors[~keep, j], "x", ms=4, color="#d62728", label="slip")
        lim = 4 * np.sqrt(np.percentile(var[:, j], 99)) + 1e-12
        ax.set_ylim(-lim, lim)
        ax.set_xlabel(f"|{name}| of the truth [{unit}]")
        ax.set_ylabel(f"odometry − truth [{unit}]")
        ax.set_title(f"{name} error per {m.window_s:.3g} s window", fontsize=9)
        ax.legend(fontsize=6.5, frameon=False, markerscale=2)
    ax = axes[3]
    ax.plot(m.window_start[keep], m.errors[keep, 1], ".", ms=2, color="#1f77b4")
    ax.plot(m.window_start[~keep], m.errors[~keep, 1], "x", ms=4, color="#d62728")
    for e in m.episodes:
        ax.axvspan(e["start_s"], e["start_s"] + e["duration_s"], color="#d62728", alpha=0.15)
    ax.set_xlabel("time [s]")
    ax.set_ylabel("δtrans error [m]")
    ax.set_title(f"translation error over time: {len(m.episodes)} slip episode(s)", fontsize=9)
    a = res.alignment
    fig.suptitle(f"{Path(res.odometry.source.path).name} against "
                 f"{Path(res.truth.source.path).name} — time offset {a.offset * 1e3:.3g} ms",
                 fontsize=10)
    fig.tight_layout()
    with atomic_path(path) as tmp:
        fig.savefig(tmp, dpi=100, format="png")

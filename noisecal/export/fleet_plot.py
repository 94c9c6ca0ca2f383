"""The fleet figure: per parameter, each unit's value and interval against the fleet's."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from ..history import printable

MAX_PANELS = 12


def fleet_figure(result, path: Path) -> None:
    """Draw one panel per parameter (up to ``MAX_PANELS``) and save a PNG.

    Each unit is a point with its 95 % interval (a down-triangle at an upper bound),
    units outside the fleet in red; the fleet's median is a line with its interval
    as a dark band and the 95 % range of a unit's true value as a light band.

    Parameters
    ----------
    result : FleetResult
    path : Path or file object
        Where the PNG goes (a staged temporary file, or a buffer for a report).
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    params = [s for s in result.summaries if s.values][:MAX_PANELS]
    cols = min(3, max(1, len(params)))
    rows = max(1, math.ceil(len(params) / cols))
    fig = Figure(figsize=(5.2 * cols, 3.2 * rows))
    FigureCanvasAgg(fig)
    for i, s in enumerate(params):
        ax = fig.add_subplot(rows, cols, i + 1)
        names = [u.unit for u in s.values]
        x = np.arange(len(names))
        out = {o["unit"] for o in s.outliers}
        for xi, u in zip(x, s.values):
            if u.is_bound:
                ax.plot([xi], [u.upper], "v", color="0.5", ms=5)
                continue
            colour = "#d62728" if u.unit in out else "#1f77b4"
            ax.errorbar([xi], [u.value], yerr=[[u.value - u.lower], [u.upper - u.value]],
                        fmt="o", ms=4, color=colour, capsize=2, lw=1)
        f = s.fit
        if f is not None:
            ax.axhline(s.back(f.mu), color="k", lw=1)
            ax.axhspan(s.back(f.mu_lower), s.back(f.mu_upper), color="k", alpha=0.15, lw=0)
            if math.isfinite(f.pred_lower) and math.isfinite(f.pred_upper):
                ax.axhspan(s.back(f.pred_lower), s.back(f.pred_upper), color="k",
                           alpha=0.06, lw=0)
        if s.scale == "log":
            ax.set_yscale("log")
        ax.set_xticks(x)
        ax.set_xticklabels([printable(n) for n in names], rotation=60, fontsize=6)
        ax.set_title(printable(f"{s.channel}.{s.name} [{s.unit}]"), fontsize=8)
        ax.tick_params(axis="y", labelsize=7)
        ax.grid(True, axis="y", alpha=0.3)
    fig.suptitle("fleet: each unit (95 %), median (band: 95 %), range of a unit "
                 "(light band); red: outside the fleet", fontsize=9)
    height = 3.2 * rows
    fig.subplots_adjust(left=0.07, right=0.98, bottom=0.5 / height * 1.6,
                        top=1 - 0.6 / height, wspace=0.3, hspace=0.7)
    fig.savefig(path, dpi=90, format="png")

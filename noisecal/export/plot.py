"""Allan deviation plots: data with intervals, each fitted term, the total model."""

from __future__ import annotations

from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from ..fit.simulate import TERM_NAMES, basis  # noqa: E402
from ..types import AllanCurve, ChannelModel  # noqa: E402
from .atomic import atomic_path  # noqa: E402

_LABEL = {"quantization": "quantization Q", "white_noise": "white noise N",
          "bias_instability": "bias instability B", "bias_random_walk": "bias random walk K",
          "rate_ramp": "rate ramp R"}
_COLOR = {"quantization": "#8c564b", "white_noise": "#1f77b4", "bias_instability": "#2ca02c",
          "bias_random_walk": "#d62728", "rate_ramp": "#9467bd"}


def _fmt(e) -> str:
    if e.resolved:
        return f"{e.value:.3g} [{e.lower:.3g}, {e.upper:.3g}] {e.unit}"
    return f"< {e.upper:.3g} {e.unit} (bound)"


def _panel(ax, model: ChannelModel, dense: AllanCurve, hadamard: AllanCurve) -> None:
    ax.fill_between(dense.taus, dense.lower, dense.upper, color="0.8", label="95 % interval")
    ax.loglog(dense.taus, dense.dev, color="k", lw=1.2, label="overlapping ADEV")
    ax.loglog(hadamard.taus, hadamard.dev, color="0.45", lw=0.8, ls="-.",
              label="overlapping Hadamard dev. (ignores linear drift)")
    fit = model.curve
    ax.errorbar(fit.taus, fit.dev, yerr=[fit.dev - fit.lower, fit.upper - fit.dev],
                fmt="o", ms=3, color="k", elinewidth=0.8, capsize=2, label="fitted points")
    t = np.logspace(np.log10(dense.taus[0]), np.log10(dense.taus[-1]), 200)
    A = basis(t)
    for i, name in enumerate(TERM_NAMES):
        est = model.terms[name]
        if est.resolved:
            ax.loglog(t, np.sqrt(A[:, i] * model.coefficients[i]), "--", color=_COLOR[name],
                      lw=1.2, label=f"{_LABEL[name]}: {_fmt(est)}")
        else:
            ax.loglog(t, np.sqrt(A[:, i] * est.upper ** 2), ":", color=_COLOR[name], lw=0.9,
                      alpha=0.6, label=f"{_LABEL[name]}: {_fmt(est)}")
    ax.loglog(t, np.sqrt(A @ model.coefficients), color="#ff7f0e", lw=1.6, label="fitted model")
    lo, hi = np.nanmin(dense.lower), np.nanmax(dense.upper)
    ax.set_ylim(lo / 3.0, hi * 3.0)
    ax.set_xlim(t[0], t[-1])
    ax.set_title(f"{model.channel}")
    ax.set_xlabel("averaging time τ [s]")
    ax.set_ylabel(f"Allan deviation [{model.unit}]")
    ax.grid(True, which="both", alpha=0.3)
    ax.legend(fontsize=6.5, loc="upper left", bbox_to_anchor=(0.0, -0.16), frameon=False)


def allan_figure(models: list[ChannelModel], dense: list[AllanCurve],
                 hadamard: list[AllanCurve], path: Path, title: str) -> None:
    """One log–log Allan panel per channel, written atomically as PNG.

    Parameters
    ----------
    models : list of ChannelModel
        Fitted channels.
    dense : list of AllanCurve
        Dense-grid overlapping ADEV curves, same order.
    hadamard : list of AllanCurve
        Dense-grid overlapping Hadamard curves, same order.
    path : Path
        PNG path.
    title : str
        Figure title.
    """
    cols = min(3, len(models))
    rows = int(np.ceil(len(models) / cols))
    fig, axes = plt.subplots(rows, cols, figsize=(5.8 * cols, 6.4 * rows), squeeze=False)
    for ax, model, curve, had in zip(axes.flat, models, dense, hadamard):
        _panel(ax, model, curve, had)
    for ax in list(axes.flat)[len(models):]:
        ax.axis("off")
    fig.suptitle(title, fontsize=10)
    fig.tight_layout()
    with atomic_path(path) as tmp:
        fig.savefig(tmp, dpi=110, format="png")
    plt.close(fig)


def recheck_figure(base: dict, new: dict, path: Path) -> None:
    """Baseline and new Allan points with their 95 % intervals, one panel per channel,
    written atomically as PNG."""
    channels = [c for c in base["channels"] if c in new["channels"]]
    cols = min(3, len(channels))
    rows = int(np.ceil(len(channels) / cols))
    fig, axes = plt.subplots(rows, cols, figsize=(5.8 * cols, 4.6 * rows), squeeze=False)
    for ax, ch in zip(axes.flat, channels):
        for doc, label, color in ((base, "baseline", "0.35"), (new, "new", "#d62728")):
            pts = doc["channels"][ch]["allan_points"]
            tau = np.array(pts["tau_s"], dtype=float)
            dev = np.array(pts["deviation"], dtype=float)
            lo = np.array(pts["ci95_low"], dtype=float)
            hi = np.array(pts["ci95_high"], dtype=float)
            ax.fill_between(tau, lo, hi, color=color, alpha=0.18)
            ax.loglog(tau, dev, "o-", ms=3, color=color, lw=1.0, label=f"{label} (95 %)")
        ax.set_title(ch)
        ax.set_xlabel("averaging time τ [s]")
        ax.set_ylabel(f"Allan deviation [{base['channels'][ch]['unit']}]")
        ax.grid(True, which="both", alpha=0.3)
        ax.legend(fontsize=7, frameon=False)
    for ax in list(axes.flat)[len(channels):]:
        ax.axis("off")
    fig.suptitle("re-check: overlapping Allan deviation, baseline against new", fontsize=10)
    fig.tight_layout()
    with atomic_path(path) as tmp:
        fig.savefig(tmp, dpi=100, format="png")
    plt.close(fig)

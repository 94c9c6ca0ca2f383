"""Residual plots of the motion job: histograms, QQ, time, covariate, ACF, ellipses."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .atomic import atomic_path

_IN, _OUT = "#1f77b4", "#d62728"


def normal_pdf(x: np.ndarray, mean: float, sd: float) -> np.ndarray:
    """Gaussian density at ``x`` (a drawn curve: spares loading scipy.stats)."""
    z = (np.asarray(x, dtype=float) - mean) / sd
    return np.exp(-0.5 * z * z) / (sd * np.sqrt(2.0 * np.pi))


def ellipse(cov: np.ndarray, level2: float, points: int = 200) -> np.ndarray:
    """Points of the level curve xᵀ cov⁻¹ x = level2 of a 2-D Gaussian, shape (points, 2)."""
    vals, vecs = np.linalg.eigh(cov)
    a = np.linspace(0, 2 * np.pi, points)
    unit = np.column_stack([np.cos(a), np.sin(a)])
    return (unit * np.sqrt(np.maximum(vals, 0) * level2)) @ vecs.T


def _channel_row(axes, res, j):
    from scipy.special import ndtri  # the normal quantile function

    m = res.model
    ch = m.channels[j]
    r = res.residuals[:, j]
    inl = m.inliers
    ax = axes[0]
    lo, hi = np.percentile(r, [0.5, 99.5])
    span = max(hi - lo, 8 * ch.sigma.value)
    mid = 0.5 * (lo + hi)
    bins = np.linspace(mid - span / 2, mid + span / 2, 80)
    ax.hist(r, bins=bins, density=True, color="0.75", label="all residuals")
    x = np.linspace(bins[0], bins[-1], 400)
    share = np.count_nonzero(inl) / r.shape[0]
    ax.plot(x, share * normal_pdf(x, ch.bias.value, ch.sigma.value), color=_IN,
            label=f"inlier Gaussian, σ = {ch.sigma.value:.3g} {ch.unit}")
    all_sd = ch.sigma_all
    ax.plot(x, normal_pdf(x, r.mean(), all_sd), "--", color="0.3", lw=0.9,
            label=f"Gaussian of all samples, σ = {all_sd:.3g}")
    ax.plot(x, normal_pdf(x, m.robust_location[j], np.sqrt(m.robust_scatter[j, j])), ":",
            color="#2ca02c", lw=1.2, label="robust (MCD) fit")
    ax.set_yscale("log")
    ax.set_ylim(1e-3 / max(span, 1e-300), None)
    ax.set_title(f"{ch.name}: residual histogram", fontsize=9)
    ax.set_xlabel(f"sensor − truth [{ch.unit}]")
    ax.legend(fontsize=6.5, frameon=False)
    ax = axes[1]
    q = np.sort((r - ch.bias.value) / ch.sigma.value)
    p = (np.arange(q.shape[0]) + 0.5) / q.shape[0]
    ax.plot(ndtri(p), q, ".", ms=2, color=_IN)
    lim = ndtri(p[[0, -1]])
    ax.plot(lim, lim, color="k", lw=0.8)
    ax.set_ylim(-8, 8)
    ax.set_title(f"{ch.name}: QQ against the inlier Gaussian", fontsize=9)
    ax.set_xlabel("normal quantile")
    ax.set_ylabel("standardised residual")
    ax = axes[2]
    ax.plot(res.time[inl], r[inl], ".", ms=1.5, color=_IN, label="inside the gate")
    ax.plot(res.time[~inl], r[~inl], ".", ms=3, color=_OUT, label="outside the gate")
    ax.set_ylim(bins[0], bins[-1])
    ax.set_title(f"{ch.name}: residuals over time", fontsize=9)
    ax.set_xlabel("sensor time [s]")
    ax.legend(fontsize=6.5, frameon=False, markerscale=3)
    ax = axes[3]
    if res.covariate is not None and ch.law:
        c = res.covariate
        ax.plot(c[inl], r[inl] - ch.bias.value, ".", ms=1.5, color=_IN)
        xs = np.linspace(c.min(), c.max(), 200)
        a = ch.law["a"].value or 0.0
        b = ch.law["b"].value or 0.0
        band = np.sqrt(a + b * xs ** 2)
        for k, style in ((1, "-"), (2, "--")):
            ax.plot(xs, k * band, style, color="k", lw=0.9)
            ax.plot(xs, -k * band, style, color="k", lw=0.9)
        ax.set_ylim(bins[0] - ch.bias.value, bins[-1] - ch.bias.value)
        ax.set_title(f"{ch.name} against {ch.law['covariate']}: ±1σ, ±2σ of the law", fontsize=9)
        ax.set_xlabel(f"{ch.law['covariate']} [{res.covariate_unit}]")
    else:
        ax.text(0.5, 0.5, "no covariate named\n(--covariate speed, range, ...)",
                ha="center", va="center", transform=ax.transAxes, fontsize=8, color="0.4")
        ax.set_axis_off()
    ax = axes[4]
    lags = np.arange(ch.acf.shape[0]) * res.sensor.period
    ax.bar(lags, ch.acf, width=0.8 * res.sensor.period, color=_IN)
    band = 1.96 / np.sqrt(np.count_nonzero(inl))
    ax.axhspan(-band, band, color="0.85")
    ax.set_title(f"{ch.name}: autocorrelation (Ljung-Box p = {ch.ljung_box_p:.2g})",
                 fontsize=9)
    ax.set_xlabel("lag [s]")


def motion_figure(res, path: Path) -> None:
    """Residual figure of a motion result, written atomically as PNG.

    One row per channel (histogram with Gaussian and robust fits, QQ plot,
    residuals over time, residuals against the covariate, the ACF), and for
    two or more channels the first two channels' scatter with the inlier R's
    1-σ ellipse and the gate's level curve.
    """
    c = len(res.model.order)
    rows = c + (1 if c >= 2 else 0)
    from .plot import _figure

    fig = _figure(22, 3.6 * rows)
    axes = fig.subplots(rows, 5, squeeze=False)
    for j in range(c):
        _channel_row(axes[j], res, j)
    if c >= 2:
        m = res.model
        ax = axes[c][0]
        inl = m.inliers
        r = res.residuals[:, :2]
        ax.plot(r[inl, 0], r[inl, 1], ".", ms=1.5, color=_IN, label="inside the gate")
        ax.plot(r[~inl, 0], r[~inl, 1], ".", ms=3, color=_OUT, label="outside the gate")
        centre = np.array([ch.bias.value for ch in m.channels[:2]])
        one = ellipse(m.R[:2, :2], 1.0) + centre
        gate = ellipse(m.robust_scatter[:2, :2], m.gate_threshold) + m.robust_location[:2]
        ax.plot(one[:, 0], one[:, 1], color="k", lw=1.4, label="1-σ ellipse of R")
        ax.plot(gate[:, 0], gate[:, 1], "--", color="k", lw=1.0,
                label=f"gate, χ² ≤ {m.gate_threshold:.3g}")
        span = 1.6 * np.abs(gate - m.robust_location[:2]).max(axis=0)
        ax.set_xlim(m.robust_location[0] - span[0], m.robust_location[0] + span[0])
        ax.set_ylim(m.robust_location[1] - span[1], m.robust_location[1] + span[1])
        ax.set_xlabel(f"{m.order[0]} [{m.units[0]}]")
        ax.set_ylabel(f"{m.order[1]} [{m.units[1]}]")
        ax.set_title("residual scatter, covariance ellipses", fontsize=9)
        ax.legend(fontsize=6.5, frameon=False, markerscale=3)
        for extra in axes[c][1:]:
            extra.axis("off")
    a = res.alignment
    fig.suptitle(f"{Path(res.sensor.source.path).name} against {Path(res.truth.source.path).name}"
                 f" — time offset {a.offset * 1e3:.3g} ms [{a.lower * 1e3:.3g}, "
                 f"{a.upper * 1e3:.3g}]", fontsize=10)
    fig.tight_layout()
    with atomic_path(path) as tmp:
        fig.savefig(tmp, dpi=100, format="png")

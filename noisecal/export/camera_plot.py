"""Camera plots: residual arrows over the image, ground ellipses, σ against range."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..fit.camera import law_sigma
from .atomic import atomic_path
from .motion_plot import ellipse, normal_pdf


def camera_figure(res, path: Path) -> None:
    """Four panels, written atomically as PNG: each target's mean pixel residual as
    an arrow over the image (scaled) with outliers marked; ground-plane 1-σ
    ellipses per target (empirical and first-order, scaled); σ against range
    with the fitted laws and their bands and the propagated values; the pixel
    residual histograms with the inlier Gaussians."""
    m, cam, survey = res.model, res.camera, res.survey
    from .plot import _figure

    fig = _figure(22, 5)
    axes = fig.subplots(1, 4)
    ax = axes[0]
    idx = survey.index([t["id"] for t in m.targets])
    proj = res.projected[idx]
    bias = np.array([t["pixel_bias_px"] for t in m.targets])
    scale = 0.08 * cam.width / max(np.abs(bias).max(), 1e-9)
    ax.quiver(proj[:, 0], proj[:, 1], bias[:, 0] * scale, bias[:, 1] * scale, angles="xy",
              scale_units="xy", scale=1, color="#1f77b4", width=0.003)
    out = ~m.pixel.inliers
    ax.plot(m.detected[out, 0], m.detected[out, 1], "x", ms=3, color="#d62728",
            label="outliers (outside the gate)")
    ax.plot(proj[:, 0], proj[:, 1], "o", ms=3, color="k", label="surveyed targets, projected")
    ax.set_xlim(0, cam.width)
    ax.set_ylim(cam.height, 0)
    ax.set_aspect("equal")
    ax.set_title(f"mean pixel residual per target (arrows ×{scale:.3g})", fontsize=9)
    ax.set_xlabel("u [px]")
    ax.set_ylabel("v [px]")
    ax.legend(fontsize=6.5, frameon=False, loc="lower right")
    ax = axes[1]
    xy = survey.xyz[idx, :2]
    big = max(np.sqrt(np.trace(np.array(t["ground_cov_empirical"]))) for t in m.targets)
    cam_xy = np.asarray(cam.t)[..., :2].reshape(-1, 2)  # one pose, or the path
    span = np.ptp(np.vstack([xy, cam_xy]), axis=0).max()
    k = 0.04 * span / max(big, 1e-12)
    for t, p in zip(m.targets, xy):
        e = ellipse(np.array(t["ground_cov_empirical"]), 1.0) * k + p
        f = ellipse(np.array(t["ground_cov_first_order"]), 1.0) * k + p
        ax.plot(e[:, 0], e[:, 1], color="#1f77b4", lw=1.0)
        ax.plot(f[:, 0], f[:, 1], "--", color="k", lw=0.7)
        if not t["linear_ok"]:
            ax.plot(*p, "s", mfc="none", mec="#d62728", ms=9)
    if cam_xy.shape[0] == 1:
        ax.plot(*cam_xy[0], "^", color="k", ms=8, label="camera")
    else:
        ax.plot(cam_xy[:, 0], cam_xy[:, 1], "-", color="k", lw=1.0, label="camera path")
    ax.plot([], [], color="#1f77b4", label="empirical 1-σ")
    ax.plot([], [], "--", color="k", label="first-order 1-σ (J Σ Jᵀ)")
    ax.plot([], [], "s", mfc="none", mec="#d62728", label="linearisation off > 20 %")
    ax.set_aspect("equal")
    ax.set_title(f"ground-plane ellipses per target (×{k:.3g})", fontsize=9)
    ax.set_xlabel("x [m]")
    ax.set_ylabel("y [m]")
    ax.legend(fontsize=6.5, frameon=False)
    ax = axes[2]
    r = np.linspace(m.ground_range.min(), m.ground_range.max(), 200)
    for key, color in (("radial", "#1f77b4"), ("lateral", "#2ca02c")):
        law = m.laws[key]
        s, lo, hi = law_sigma(law, r)
        ax.fill_between(r, lo, hi, color=color, alpha=0.2)
        ax.plot(r, s, color=color, label=f"{key} law σ² = a + b r^{law['power']}")
        ax.plot([t["range_m"] for t in m.targets],
                [t[f"ground_sigma_{key}_m"] for t in m.targets], "o", ms=3, color=color)
    ax.plot([row["range_m"] for row in m.table], [row["propagated_radial_m"] for row in m.table],
            "k--", lw=0.9, label="first-order propagation (radial)")
    ax.set_xlabel("range [m]")
    ax.set_ylabel("ground σ [m]")
    ax.set_yscale("log")
    ax.set_title("ground noise against range (points: targets; bands: 95 %)", fontsize=9)
    ax.legend(fontsize=6.5, frameon=False)
    ax = axes[3]
    resid = res.model.residuals_px
    lim = 6 * max(m.sigma["u"].value, m.sigma["v"].value)
    bins = np.linspace(-lim, lim, 70)
    x = np.linspace(-lim, lim, 300)
    share = np.count_nonzero(m.pixel.inliers) / m.pixel.inliers.shape[0]
    for j, (name, color) in enumerate((("u", "#1f77b4"), ("v", "#ff7f0e"))):
        ax.hist(resid[:, j], bins=bins, density=True, histtype="step", color=color,
                label=f"{name} residuals")
        s = m.sigma[name].value
        ax.plot(x, share * normal_pdf(x, resid[m.pixel.inliers, j].mean(), s), color=color,
                lw=0.8, ls="--", label=f"{name}: Gaussian of R, σ = {s:.3g} px")
    ax.set_yscale("log")
    ax.set_ylim(1e-4, None)
    ax.set_xlabel("detected − projected [px]")
    ax.set_title("pixel residuals", fontsize=9)
    ax.legend(fontsize=6.5, frameon=False)
    fig.suptitle(f"{Path(res.detections.source).name} — camera noise against surveyed targets",
                 fontsize=10)
    fig.tight_layout()
    with atomic_path(path) as tmp:
        fig.savefig(tmp, dpi=100, format="png")

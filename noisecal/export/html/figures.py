"""Figures for the HTML report: the jobs' own plots as inline PNG, and a unit's history.

The job plots are drawn by the same functions that write the PNG beside a YAML
block (:mod:`noisecal.export.plot`, ``motion_plot``, ``odometry_plot``,
``camera_plot``), into a private temporary folder, and read back as bytes (the
static job's Allan panels straight to bytes); the report embeds them as
``data:`` URIs so that the file fetches nothing.
"""

from __future__ import annotations

import base64
import datetime as _dt
import io
import struct
import tempfile
from pathlib import Path

from ...history import printable


class Figure(dict):
    """One embedded image: ``title``, ``caption``, ``src`` (data URI), ``width``, ``height`` (px)."""


def png_size(data: bytes) -> tuple[int, int]:
    """Width and height of a PNG from its IHDR chunk, px."""
    if data[:8] != b"\x89PNG\r\n\x1a\n":
        raise ValueError("not a PNG")
    return struct.unpack(">II", data[16:24])


def embed(data: bytes, title: str, caption: str = "") -> Figure:
    """A PNG as a report figure (base64 data URI)."""
    w, h = png_size(data)
    return Figure(title=title, caption=caption, width=w, height=h,
                  src="data:image/png;base64," + base64.b64encode(data).decode("ascii"))


def drawn(draw) -> bytes:
    """The PNG bytes ``draw(path)`` writes (a job's figure function), via a private folder."""
    with tempfile.TemporaryDirectory(prefix="noisecal-report-") as folder:
        path = Path(folder) / "figure.png"
        draw(path)
        return path.read_bytes()


def job_figures(result) -> list[Figure]:
    """The plots of a job result, one figure per channel where the plot allows it.

    A result type this module does not know contributes the figures its own
    ``report_figures()`` returns (a list of ``(title, caption, png_bytes)``), if any.
    """
    from ...jobs.motion import MotionResult
    from ...jobs.odometry import OdometryResult
    from ...jobs.recheck import RecheckResult
    from ...jobs.static import StaticResult
    from ...jobs.targets import TargetsResult

    if isinstance(result, StaticResult):
        out = []
        # One panel a figure: at report width each stays legible, also on a phone.
        for name, ch in result.channels.items():
            png = allan_panel(ch.model, ch.dense, ch.hadamard)
            out.append(embed(png, f"{name}: Allan deviation",
                             "Overlapping Allan and Hadamard deviation with 95 % intervals; "
                             "the fitted IEEE Std 952 terms; dotted terms are upper bounds."))
        return out
    if isinstance(result, MotionResult):
        from ..motion_plot import motion_figure

        out = [embed(motion_rows(result, j), f"{ch.name}: residuals against truth",
                     "Histogram with Gaussian and robust fits, QQ plot against the inlier "
                     "Gaussian, residuals over time and against the covariate, "
                     "autocorrelation.") for j, ch in enumerate(result.model.channels)]
        if len(result.model.order) >= 2:
            out.append(embed(drawn(lambda p: motion_figure(result, p)), "All channels",
                             "The plot beside the YAML block: every channel's row and the "
                             "first two channels' residual scatter with the 1-σ ellipse of R "
                             "and the gate."))
        return out
    if isinstance(result, OdometryResult):
        from ..odometry_plot import odometry_figure

        return [embed(drawn(lambda p: odometry_figure(result, p)), "Odometry errors per window",
                      "Errors of rot1, trans and rot2 against the motion's size with the "
                      "fitted model's ±2σ; translation error over time, slip marked.")]
    if isinstance(result, TargetsResult):
        from ..camera_plot import camera_figure

        return [embed(drawn(lambda p: camera_figure(result, p)), "Camera noise",
                      "Pixel residuals, ground-plane noise against range with the fitted "
                      "laws, outliers.")]
    if isinstance(result, RecheckResult):
        base = getattr(result, "baseline", None)
        if result.job == "static" and isinstance(base, dict) and "channels" in base:
            from ..plot import recheck_figure

            return [embed(drawn(lambda p: recheck_figure(base, result.new_sections, p)),
                          "Baseline against new",
                          "Overlapping Allan deviation of both recordings with 95 % intervals.")]
        return []
    own = getattr(result, "report_figures", None)
    if callable(own):
        return [embed(png, title, caption) for title, caption, png in own()]
    return []


def motion_rows(result, j: int) -> bytes:
    """One motion channel's five residual panels (the job plot's row), two a row."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure as MplFigure

    from ..motion_plot import _channel_row

    fig = MplFigure(figsize=(9.0, 9.6))
    FigureCanvasAgg(fig)
    axes = fig.subplots(3, 2).ravel()
    _channel_row(axes, result, j)
    axes[5].axis("off")
    fig.tight_layout()
    buf = io.BytesIO()
    fig.savefig(buf, dpi=100, format="png")
    return buf.getvalue()


def allan_panel(model, dense, hadamard) -> bytes:
    """One channel's Allan panel as the static job's plot draws it (without
    matplotlib), with its style legend in two columns above it (the job's
    five-column legend is made for three panels)."""
    from ..plot import allan_canvas

    canvas = allan_canvas([model], [dense], [hadamard], None, cols=1, width=6.4, height=8.4,
                          margins=(0.8, 0.25, 1.5, 1.75), legend_cols=2, legend_top=0.005)
    return canvas.png()


_VERDICT_Y = {"consistent": 0, "better": 0, "inconclusive": 1, "changed": 2, "worse": 2}
_VERDICT_COLOR = {0: "#2ca02c", 1: "#ff7f0e", 2: "#d62728"}


def unit_figures(serial: str, runs: list[dict]) -> list[Figure]:
    """Each parameter over time with its interval, one figure per channel, with the
    re-check verdicts on the same time axis in the figure's top strip.

    Parameters
    ----------
    serial : str
        The unit's serial number (for the titles, shown escaped).
    runs : list of dict
        :func:`noisecal.history.runs_of` rows, oldest first.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure as MplFigure

    when = [_dt.datetime.fromisoformat(r["date"]) for r in runs]
    series: dict = {}
    for t, r in zip(when, runs):
        for p in r["parameters"]:
            series.setdefault(p.channel, {}).setdefault((p.name, p.unit), []).append((t, p))
    checks = [(t, r["verdict"]) for t, r in zip(when, runs) if r["verdict"]]
    out = []
    for channel in sorted(series):
        params = sorted(series[channel])
        rows = len(params) + 1
        fig = MplFigure(figsize=(6.4, 0.9 + 1.45 * rows))
        FigureCanvasAgg(fig)
        axes = fig.subplots(rows, 1, sharex=True, squeeze=False,
                            gridspec_kw={"height_ratios": [0.55] + [1.0] * len(params)})[:, 0]
        strip = axes[0]
        for t, verdict in checks:
            y = _VERDICT_Y.get(verdict, 1)
            strip.plot([t], [0], "s", ms=7, color=_VERDICT_COLOR[y])
            strip.annotate(verdict, (t, 0), xytext=(0, 7), textcoords="offset points",
                           ha="center", fontsize=7)
        strip.set_yticks([])
        strip.set_ylim(-1, 1.6)
        strip.set_title("re-check verdicts" if checks else "re-check verdicts: none stored",
                        fontsize=8, loc="left")
        for ax, (name, unit) in zip(axes[1:], params):
            pts = series[channel][(name, unit)]
            for t, p in pts:
                if p.is_bound:
                    ax.plot([t], [p.upper], "v", color="0.45", ms=5)
                else:
                    lo = p.value - (p.lower if p.lower is not None else p.value)
                    hi = (p.upper if p.upper is not None else p.value) - p.value
                    ax.errorbar([t], [p.value], yerr=[[max(lo, 0)], [max(hi, 0)]], fmt="o",
                                ms=4, color="#1f77b4", capsize=3)
            ax.set_title(printable(f"{name} [{unit}]"), fontsize=8, loc="left")
            ax.tick_params(labelsize=7)
            ax.grid(True, alpha=0.3)
        for ax in axes:
            # A single run still gets a readable date axis.
            ax.margins(x=0.15)
        axes[-1].tick_params(axis="x", labelrotation=25)
        # The serial stays out of the image (the page's heading shows it as text).
        fig.suptitle(printable(f"{channel}: 95 % intervals, ▼ upper bound"), fontsize=9)
        fig.tight_layout()
        buf = io.BytesIO()
        fig.savefig(buf, dpi=100, format="png")
        out.append(embed(buf.getvalue(), f"{channel} over time",
                         "Each parameter with its 95 % interval per run (▼: only an upper "
                         "bound); the top strip shows the re-check verdicts on the same dates."))
    return out


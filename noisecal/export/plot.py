"""Allan deviation plots: data with intervals, each fitted term, the total model.

The static job's figure (:func:`allan_figure`, and the HTML report's one-panel
version) is drawn without matplotlib, on the small Pillow canvas of
:mod:`noisecal.export.raster`: in a fresh process matplotlib cost about 0.6 s of
a 1.7 s warm static run (importing it, building the axes, drawing); the six-panel
figure now takes under 0.1 s, Pillow's import included. It keeps what the
matplotlib figure showed, in the same colours, line styles (matplotlib's dash
patterns) and pixel size: per channel a log–log panel with the dense overlapping
ADEV and its 95 % band, the overlapping Hadamard deviation, the fitted points
with their interval bars (hollow where left out of the fit, over a shaded span),
each term dashed (dotted at its upper bound when not resolved), the total model,
decade ticks labelled in plain text (``10⁻³``) where matplotlib's log locator
puts them, major grid lines, the term values by their letters under the panel
and the red note of a failed model check; one legend of the line styles for the
figure. The re-check figure stays on matplotlib (:func:`recheck_figure`, on a
bare ``Figure`` with the Agg canvas: no pyplot).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..fit.simulate import TERM_NAMES, basis
from ..types import AllanCurve, ChannelModel
from .atomic import atomic_path

_LABEL = {"quantization": "quantization Q", "white_noise": "white noise N",
          "bias_instability": "bias instability B", "bias_random_walk": "bias random walk K",
          "rate_ramp": "rate ramp R"}
_SYMBOL = {name: label.split()[-1] for name, label in _LABEL.items()}
_COLOR = {"quantization": "#8c564b", "white_noise": "#1f77b4", "bias_instability": "#2ca02c",
          "bias_random_walk": "#d62728", "rate_ramp": "#9467bd"}
MODEL_COLOR = "#ff7f0e"
LEFT_OUT_COLOR = "#fde9c9"
WARNING_COLOR = "#c00000"
DPI = 110


def _figure(width: float, height: float, dpi: float | None = None):
    """A matplotlib Figure on the Agg canvas, without pyplot (no global figure
    registry to clean); for the figures still drawn with matplotlib."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, height), dpi=dpi)
    FigureCanvasAgg(fig)
    return fig


def _fmt(e) -> str:
    if e.resolved:
        return f"{e.value:.3g} [{e.lower:.3g}, {e.upper:.3g}] {e.unit}"
    return f"< {e.upper:.3g} {e.unit}"


_SUPERSCRIPT = str.maketrans("-0123456789", "⁻⁰¹²³⁴⁵⁶⁷⁸⁹")


def _decade(value: float, _pos=None) -> str:
    """A log-axis tick label in plain text: ``10⁻³``, or ``2×10⁻⁶`` off a decade."""
    if not value > 0:
        return ""
    exp = int(np.floor(np.log10(value) + 1e-9))
    mantissa = value / 10.0 ** exp
    power = "10" + str(exp).translate(_SUPERSCRIPT)
    return power if abs(mantissa - 1.0) < 1e-9 else f"{mantissa:.3g}×{power}"


def _log_ticks(lo: float, hi: float, subs: tuple) -> np.ndarray:
    """Positions ``m·10^k`` (``m`` in ``subs``) inside ``[lo, hi]``, ascending."""
    k = np.arange(np.floor(np.log10(lo)), np.ceil(np.log10(hi)) + 1.0)
    v = (np.asarray(subs, dtype=float)[:, None] * 10.0 ** k).ravel()
    return np.sort(v[(v >= lo * (1.0 - 1e-9)) & (v <= hi * (1.0 + 1e-9))])


def _decade_ticks(lo: float, hi: float, most: int = 9) -> np.ndarray:
    """Decades inside ``[lo, hi]``, at most ``most`` of them, chosen as matplotlib's
    ``LogLocator(numticks=most)`` chooses them: all when they fit, else every
    ``stride``-th decade, the stride the smallest that fits and the ticks on its
    multiples (so 10⁰ keeps its label) when that gives as many ticks."""
    emin = int(np.ceil(np.log10(lo) - 1e-9))
    emax = int(np.floor(np.log10(hi) + 1e-9))
    n = emax - emin + 1
    if n <= 0:
        return np.empty(0)
    stride = n // (most + 1) + 1
    want = min(-(-n // stride), most)
    if want == 1:
        return np.array([10.0 ** emin])
    stride = (n - 1) // (want - 1)
    if stride < n / want:
        stride = n // want
    olo, ohi = max(n - stride * want, 0), min(n - stride * (want - 1), stride)
    offset = (-emin) % stride
    if not olo <= offset < ohi:
        offset = olo
    return 10.0 ** np.arange(emin + offset, emax + 1, stride, dtype=float)


def _ticks(x: tuple, y: tuple) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Tick positions of an Allan panel with limits ``x`` and ``y``: decades on both
    axes (every other one or sparser when more than nine show), unlabelled 2 and 5
    on y where every decade is ticked, and 2 and 5 labelled too when less than a
    decade of y shows (or the axis would have no number); as matplotlib's log
    locator places them. None minor on the long tau axis: they were clutter.

    Returns
    -------
    xmajor, ymajor, yminor : ndarray
        Data values, ascending.
    """
    xmajor = _decade_ticks(*x)
    ymajor = _decade_ticks(*y)
    yminor = _log_ticks(*y, (2.0, 5.0))
    if ymajor.shape[0] < 2:
        ymajor, yminor = _log_ticks(*y, (1.0, 2.0, 5.0)), yminor[:0]
    elif ymajor.shape[0] < _log_ticks(*y, (1.0,)).shape[0]:
        yminor = yminor[:0]  # decades skipped: minor ticks would read as decades
    return xmajor, ymajor, yminor


def _limits(lo: float, hi: float) -> tuple[float, float]:
    """Positive limits low < high: a single value or a bad one opens to a decade
    around what is there."""
    if not (np.isfinite(lo) and np.isfinite(hi) and 0 < lo < hi):
        mid = hi if np.isfinite(hi) and hi > 0 else (lo if np.isfinite(lo) and lo > 0 else 1.0)
        lo, hi = mid / 10 ** 0.5, mid * 10 ** 0.5
    return float(lo), float(hi)


def _panel(canvas, box: tuple, model: ChannelModel, dense: AllanCurve,
           hadamard: AllanCurve) -> None:
    """One channel's Allan panel on ``canvas`` with its data area at ``box``
    (left, top, right, bottom, final px), its labels and term values."""
    from .raster import LogAxes

    x = _limits(float(dense.taus[0]), float(dense.taus[-1]))
    y = _limits(float(np.nanmin(dense.lower)) / 3.0, float(np.nanmax(dense.upper)) * 3.0)
    ax = LogAxes(canvas, box, x, y)
    fit = model.curve
    used = (np.asarray(model.fit.used, dtype=bool) if model.fit is not None
            else np.ones(fit.taus.shape[0], dtype=bool))
    start = float(fit.taus[used][0]) if used.any() else float(fit.taus[0])
    if not used.all():
        # Taus left out of the fit (the sensor's low-pass): shaded and named.
        ax.axvspan(dense.taus[0], start / 1.2, LEFT_OUT_COLOR)
        above = model.check is not None and any(side == "above"
                                                for _, side in model.check.left_out)
        why = "the terms do not hold here" if above else "sensor's low-pass"
        ax.text(0.01, 0.02, f"left out of the fit:\n{why}", 6.5, "#a0522d", va="bottom")
    ax.fill_between(dense.taus, dense.lower, dense.upper, "0.8")
    xmajor, ymajor, yminor = _ticks(x, y)
    ax.grid(xmajor, ymajor)
    ax.plot(dense.taus, dense.dev, "k", 1.2)
    ax.plot(hadamard.taus, hadamard.dev, "0.45", 0.8, "-.")
    ax.vlines(fit.taus, fit.lower, fit.upper, "k", 0.8)
    ax.markers(fit.taus[used], fit.dev[used], 3.0, "k")
    ax.markers(fit.taus[~used], fit.dev[~used], 3.0, "k", face="white")
    t = np.logspace(np.log10(start), np.log10(dense.taus[-1]), 200)
    A = basis(t)
    lines = []
    for i, name in enumerate(TERM_NAMES):
        est = model.terms[name]
        with np.errstate(invalid="ignore"):
            if est.resolved:
                ax.plot(t, np.sqrt(A[:, i] * model.coefficients[i]), _COLOR[name], 1.2, "--")
            else:
                ax.plot(t, np.sqrt(A[:, i] * est.upper ** 2), _COLOR[name], 0.9, ":",
                        alpha=0.6)
        # The term's letter: the shared legend names it.
        lines.append(f"{_SYMBOL[name]}: {_fmt(est)}")
    with np.errstate(invalid="ignore"):
        ax.plot(t, np.sqrt(A @ model.coefficients), MODEL_COLOR, 1.6)
    ax.finish()
    ax.ticks(xmajor, ymajor, [_decade(v) for v in xmajor], [_decade(v) for v in ymajor],
             minor_ys=yminor)
    if model.check is not None and not model.check.consistent:
        ax.text(0.99, 0.98, "model check: NOT consistent\n" + model.check.cause[:60] + "…",
                6.5, WARNING_COLOR, ha="right", va="top")
    ax.title(f"{model.channel}", 12.0)
    ax.xlabel("averaging time τ [s]")
    ax.ylabel(f"Allan deviation [{model.unit}]")
    ax.text(0.0, -0.16, "\n".join(lines), 6.5, va="top", linespacing=1.5)


def _legend_entries() -> list[tuple]:
    """What each line style means: ``(label, kind, colour, width pt, style, marker)``
    with kind "patch" or "line" and marker None, "filled" (with its interval bar)
    or "hollow"."""
    entries = [("95 % interval", "patch", "0.8", 0.0, "-", None),
               ("overlapping ADEV", "line", "k", 1.2, "-", None),
               ("overlapping Hadamard dev. (ignores linear drift)", "line", "0.45", 0.8, "-.",
                None),
               ("fitted points (95 %)", "line", "k", 0.8, "-", "filled"),
               ("points left out of the fit", "line", "k", 0.8, "-", "hollow"),
               ("fitted model", "line", MODEL_COLOR, 1.6, "-", None)]
    entries += [(_LABEL[n], "line", _COLOR[n], 1.2, "--", None) for n in TERM_NAMES]
    entries.append(("dotted: term not resolved, drawn at its upper bound", "line", "0.5", 0.9,
                    ":", None))
    return entries


def _legend(canvas, top: float, ncol: int, size_pt: float = 7.0) -> None:
    """One legend for the whole figure, centred, its frame's top ``top`` px from the
    figure's top, in matplotlib's legend geometry (handle 2 em, gap 0.8 em, columns
    2 em apart, filled top to bottom with the first ``n % ncol`` one row longer)."""
    from .raster import Layer

    entries = _legend_entries()
    em = canvas.px(size_pt)
    handle, pad, gap, step = 2.0 * em, 0.8 * em, 2.0 * em, 1.585 * em
    rows, large = divmod(len(entries), ncol)
    per_col = [rows + 1] * large + [rows] * (ncol - large)
    columns, i = [], 0
    for n in per_col:
        if n:
            columns.append(entries[i:i + n])
        i += n
    widths = [handle + pad + max(canvas.text_width(e[0], size_pt) for e in col)
              for col in columns]
    x = (canvas.width - (sum(widths) + gap * (len(widths) - 1))) / 2
    first = top + 0.4 * em  # the frame's inner padding (matplotlib's borderpad)
    layer = Layer(canvas, (0, max(0, int(first - em)), canvas.width,
                           min(canvas.height, int(first + max(per_col) * step + em))))
    for col, w in zip(columns, widths):
        for r, (label, kind, ink, lw, style, marker) in enumerate(col):
            cy = first + r * step + 0.54 * em
            canvas.text(x + handle + pad, cy, label, size_pt, va="center")
            mid = x + handle / 2
            if kind == "patch":
                layer.polygon(layer.to_layer([x, x + handle, x + handle, x],
                                             [cy - 0.35 * em] * 2 + [cy + 0.35 * em] * 2), ink)
            elif marker:
                # The panels draw each point as a circle on its vertical interval bar.
                layer.polyline(layer.to_layer([mid, mid], [cy - 0.6 * em, cy + 0.6 * em]),
                               ink, lw)
                layer.circles(layer.to_layer([mid], [cy]), 3.0, ink,
                              None if marker == "filled" else "white")
            else:
                layer.polyline(layer.to_layer([x, x + handle], [cy, cy]), ink, lw, style)
        x += w + gap
    layer.paste()


def _grid_boxes(n: int, cols: int, width: float, height: float, margins: tuple,
                wspace: float, hspace: float, dpi: float) -> list[tuple[int, int, int, int]]:
    """Data areas of ``n`` panels in ``cols`` columns, row by row, final px.

    Parameters
    ----------
    n, cols : int
        Panels and columns (rows as needed).
    width, height : float
        Figure size, in.
    margins : (left, right, top, bottom)
        Space outside the panels' data areas, in.
    wspace, hspace : float
        Gaps between panels as fractions of a panel's width and height
        (matplotlib's ``subplots_adjust`` meaning, so the layout stays as it was).
    dpi : float

    Returns
    -------
    list of (left, top, right, bottom), int
    """
    rows = -(-n // cols)
    left, right, top, bottom = margins
    cell_w = (width - left - right) / (cols + wspace * (cols - 1))
    cell_h = (height - top - bottom) / (rows + hspace * (rows - 1))
    boxes = []
    for i in range(n):
        r, c = divmod(i, cols)
        x0 = left + c * cell_w * (1 + wspace)
        y0 = top + r * cell_h * (1 + hspace)
        boxes.append(tuple(int(round(v * dpi)) for v in (x0, y0, x0 + cell_w, y0 + cell_h)))
    return boxes


def allan_canvas(models: list[ChannelModel], dense: list[AllanCurve],
                 hadamard: list[AllanCurve], title: str | None, *, cols: int = 3,
                 width: float | None = None, height: float | None = None,
                 margins: tuple = (0.75, 0.25, 1.1, 1.75), legend_cols: int = 5,
                 legend_top: float = 0.015, dpi: float = DPI):
    """The Allan figure drawn on a :class:`~noisecal.export.raster.Canvas`.

    Parameters
    ----------
    models, dense, hadamard : list
        As :func:`allan_figure`.
    title : str or None
        Figure title (none on None).
    cols : int
        Most panels a row.
    width, height : float, optional
        Figure size, in (default 5.8 a column, 6.0 a row + 1.1).
    margins : (left, right, top, bottom)
        Around the panels' data areas, in.
    legend_cols : int
        Columns of the style legend.
    legend_top : float
        Fraction of the height above the legend's frame.
    dpi : float

    Returns
    -------
    Canvas
        Call ``.png()`` or ``.pixels()`` on it.
    """
    from .raster import Canvas

    cols = max(1, min(cols, len(models)))
    rows = -(-len(models) // cols)
    width = 5.8 * cols if width is None else width
    height = 6.0 * rows + 1.1 if height is None else height
    canvas = Canvas(round(width * dpi), round(height * dpi), dpi)
    # matplotlib's hspace for the same layout: the term text needs room under a panel.
    hspace = 1.75 * rows / height * 1.9
    boxes = _grid_boxes(len(models), cols, width, height, margins, 0.28, hspace, dpi)
    for box, model, curve, had in zip(boxes, models, dense, hadamard):
        _panel(canvas, box, model, curve, had)
    # The legend's frame sits half an em (matplotlib's borderaxespad) below its anchor.
    _legend(canvas, legend_top * canvas.height + 0.5 * canvas.px(7.0), legend_cols)
    if title:
        canvas.text(canvas.width / 2, 0.002 * canvas.height, title, 10.0, ha="center",
                    va="top")
    return canvas


def allan_figure(models: list[ChannelModel], dense: list[AllanCurve],
                 hadamard: list[AllanCurve], path: Path, title: str) -> None:
    """One log–log Allan panel per channel (three a row), written atomically as PNG.

    The figure is 5.8 in a column and 6.0 in a row + 1.1 in, at 110 dpi, drawn
    without matplotlib (:mod:`noisecal.export.raster`).

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
    png = allan_canvas(models, dense, hadamard, title).png()
    with atomic_path(path) as tmp:
        with open(tmp, "wb") as fh:
            fh.write(png)


def recheck_figure(base: dict, new: dict, path: Path) -> None:
    """Baseline and new Allan points with their 95 % intervals, one panel per channel,
    written atomically as PNG."""
    channels = [c for c in base["channels"] if c in new["channels"]]
    cols = min(3, len(channels))
    rows = int(np.ceil(len(channels) / cols))
    fig = _figure(5.8 * cols, 4.6 * rows)
    axes = fig.subplots(rows, cols, squeeze=False)
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

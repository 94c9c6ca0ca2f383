"""A small raster canvas for log–log line figures, drawn with Pillow and numpy.

What the Allan figure needs and no more: data mapped to pixels on log axes,
polylines (solid, dashed, dotted, dash-dot) clipped to the panel, filled bands
and spans, vertical bars, circle markers, text anchored and rotated, decade
ticks and grid lines, and a plain PNG writer (:func:`png_bytes`).

Why not matplotlib: in a fresh process it cost about 0.6 s for the six-panel
Allan figure (importing it, building the axes, drawing), the largest serial cost
of a warm static run; this canvas draws the same figure in well under 0.1 s,
its imports included.

How: Pillow's lines and ellipses are not anti-aliased, so shapes are drawn on
:class:`Layer` s at twice the size and reduced by averaging 2 × 2 samples
(:meth:`PIL.Image.Image.reduce`); only the rectangles that hold shapes (each
panel's data area, the legend's strip) are supersampled, not the whole figure.
Text is drawn last, at the final size, where FreeType anti-aliases it itself.
Frames, ticks and grid lines sit on whole pixels so that they stay crisp. A
panel's data are drawn on a layer of the panel's own size, so every stroke and
marker stops at the frame as matplotlib clips them; lines and polygons are also
clipped in numpy to a margin around it first, so that a line running far off
the panel neither makes thousands of dashes nor hands Pillow coordinates in the
millions.

Lengths given in points (1/72 in) are converted at the canvas's dpi; pixel
coordinates are those of the final image (x to the right, y down, origin at the
top left corner of the top left pixel, pixel ``i`` covering ``[i, i + 1)``).
"""

from __future__ import annotations

import importlib.util
import math
import os
import struct
import zlib
from collections.abc import Sequence
from functools import lru_cache

import numpy as np
from PIL import Image, ImageDraw, ImageFont

DASHES = {"-": None, "--": (3.7, 1.6), "-.": (6.4, 1.6, 1.0, 1.6), ":": (1.0, 1.65)}
"""On/off lengths of each line style in line widths (matplotlib's defaults, so the
figure keeps its look: scaled by the line width, butt ends)."""


def font_file() -> str | None:
    """Path of DejaVu Sans as shipped in matplotlib's package data, or None.

    ``find_spec`` locates the package without importing it (importing matplotlib
    is what this module avoids); the font has τ, superscript digits, ×, √, …
    and °, which the tick labels and units use.
    """
    try:
        spec = importlib.util.find_spec("matplotlib")
    except (ImportError, ValueError):
        return None
    for folder in (spec.submodule_search_locations or []) if spec else []:
        path = os.path.join(folder, "mpl-data", "fonts", "ttf", "DejaVuSans.ttf")
        if os.path.isfile(path):
            return path
    return None


@lru_cache(maxsize=64)
def font(size_px: float):
    """DejaVu Sans at an em size of ``size_px`` pixels (Pillow's default font
    without it), with Pillow's basic layout: the text is left-to-right Latin and
    symbols, and the complex-script engine costs time per call."""
    path = font_file()
    if path is not None:
        return ImageFont.truetype(path, size_px, layout_engine=ImageFont.Layout.BASIC)
    return ImageFont.load_default(size=size_px)


@lru_cache(maxsize=64)
def _line_metrics(size_px: float) -> tuple[float, float]:
    """Ink height above and below the baseline of "lp", px: the height of a line as
    matplotlib measures it, so that alignments and line spacing match its figures."""
    left, top, right, bottom = font(size_px).getbbox("lp", anchor="ls")
    return float(-top), float(bottom)


def color(spec, alpha: float = 1.0) -> tuple[int, int, int]:
    """An RGB triple from ``"#rrggbb"``, a grey level string (``"0.45"``, as in
    matplotlib) or a tuple, blended with white by ``alpha`` (figures are opaque,
    so a translucent line is drawn in its colour over white)."""
    if isinstance(spec, str):
        if spec.startswith("#"):
            rgb = [int(spec[i:i + 2], 16) for i in (1, 3, 5)]
        elif spec in ("k", "black"):
            rgb = [0, 0, 0]
        elif spec in ("w", "white"):
            rgb = [255, 255, 255]
        else:
            rgb = [round(float(spec) * 255)] * 3
    else:
        rgb = [int(v) for v in spec[:3]]
    return tuple(round(255 + alpha * (c - 255)) for c in rgb)


def png_bytes(rgb: np.ndarray, dpi: float, level: int = 3) -> bytes:
    """An 8-bit RGB PNG of ``rgb``: signature, IHDR, pHYs (the dpi), one IDAT, IEND.

    Rows are stored unfiltered (filter type 0): figures are flat line art, which
    zlib at level 3 packs as well as the per-row filter search Pillow does, in
    half the time.

    Parameters
    ----------
    rgb : ndarray, shape (height, width, 3), uint8
        Pixels, top row first.
    dpi : float
        Resolution written to pHYs (as pixels per metre).
    level : int
        zlib compression level.

    Returns
    -------
    bytes
        The PNG file (ISO/IEC 15948).
    """
    rgb = np.asarray(rgb)
    if rgb.dtype != np.uint8 or rgb.ndim != 3 or rgb.shape[2] != 3:
        raise ValueError("png_bytes needs a (height, width, 3) uint8 array")
    h, w = rgb.shape[:2]
    rows = np.empty((h, 1 + 3 * w), dtype=np.uint8)
    rows[:, 0] = 0  # each row: filter type 0 (none), then its RGB bytes
    rows[:, 1:] = rgb.reshape(h, 3 * w)

    def chunk(tag: bytes, data: bytes) -> bytes:
        return (struct.pack(">I", len(data)) + tag + data
                + struct.pack(">I", zlib.crc32(tag + data)))

    per_metre = round(dpi / 0.0254)
    return b"".join([b"\x89PNG\r\n\x1a\n",
                     chunk(b"IHDR", struct.pack(">IIBBBBB", w, h, 8, 2, 0, 0, 0)),
                     chunk(b"pHYs", struct.pack(">IIB", per_metre, per_metre, 1)),
                     chunk(b"IDAT", zlib.compress(rows, level)),
                     chunk(b"IEND", b"")])


def clip_polygon(points: np.ndarray, box: Sequence[float]) -> np.ndarray:
    """A polygon clipped to a rectangle (Sutherland–Hodgman, one edge at a time).

    Parameters
    ----------
    points : ndarray, shape (n, 2)
        Vertices, px, finite.
    box : (x0, y0, x1, y1)
        The rectangle, px, ``x0 < x1``, ``y0 < y1``.

    Returns
    -------
    ndarray, shape (m, 2)
        Vertices of the clipped polygon (``m`` may be 0).
    """
    p = np.asarray(points, dtype=float).reshape(-1, 2)
    for axis, bound, below in ((0, box[0], False), (0, box[2], True),
                               (1, box[1], False), (1, box[3], True)):
        if p.shape[0] == 0:
            break
        q = np.roll(p, -1, axis=0)  # edge i runs from p[i] to q[i]
        a = p[:, axis] <= bound if below else p[:, axis] >= bound
        b = np.roll(a, -1)
        with np.errstate(divide="ignore", invalid="ignore"):
            t = (bound - p[:, axis]) / (q[:, axis] - p[:, axis])
            cross = p + t[:, None] * (q - p)
        cross[:, axis] = bound
        # Per edge, in order: the crossing where it leaves or enters, then its end
        # if the end is inside.
        out = np.stack([cross, q], axis=1)
        keep = np.stack([a != b, b], axis=1)
        p = out[keep]
    return p


def clip_segments(start: np.ndarray, end: np.ndarray,
                  box: Sequence[float]) -> tuple[np.ndarray, np.ndarray]:
    """The part of each segment inside a rectangle (Liang–Barsky).

    Parameters
    ----------
    start, end : ndarray, shape (n, 2)
        Segment ends, px.
    box : (x0, y0, x1, y1)
        The rectangle, px.

    Returns
    -------
    t0, t1 : ndarray, shape (n,)
        The visible part runs from ``start + t0·(end − start)`` to
        ``start + t1·(end − start)``; none where ``t0 >= t1``.
    """
    d = end - start
    x0, y0, x1, y1 = box
    t0, t1 = np.zeros(d.shape[0]), np.ones(d.shape[0])
    with np.errstate(divide="ignore", invalid="ignore"):
        for dp, q in ((-d[:, 0], start[:, 0] - x0), (d[:, 0], x1 - start[:, 0]),
                      (-d[:, 1], start[:, 1] - y0), (d[:, 1], y1 - start[:, 1])):
            r = q / dp
            t0 = np.where(dp < 0, np.maximum(t0, r), t0)
            t1 = np.where(dp > 0, np.minimum(t1, r), t1)
            t1 = np.where((dp == 0) & (q < 0), -1.0, t1)
    return t0, t1


def _runs(mask: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Start and stop indices of the runs of True in a boolean array."""
    edges = np.flatnonzero(np.diff(np.concatenate(([0], mask.astype(np.int8), [0]))))
    return edges[::2], edges[1::2]


def stroke_runs(points: np.ndarray, box: Sequence[float],
                pattern: Sequence[float] | None = None) -> list[np.ndarray]:
    """The pieces of a polyline to stroke: inside ``box``, cut into dashes.

    The dash pattern runs along the whole line's length, so it is the same
    whether or not part of the line is clipped; dashes carry on round corners.

    Parameters
    ----------
    points : ndarray, shape (n, 2)
        Vertices, px; a row with a non-finite value breaks the line.
    box : (x0, y0, x1, y1)
        Clip rectangle, px.
    pattern : sequence of float, optional
        On and off lengths, px, alternating, starting with on (an even count).
        None for a solid line.

    Returns
    -------
    list of ndarray, each shape (k, 2), k >= 2
        Polylines to draw, px.
    """
    p = np.asarray(points, dtype=float).reshape(-1, 2)
    out: list[np.ndarray] = []
    starts, stops = _runs(np.isfinite(p).all(axis=1))
    for i, j in zip(starts, stops):
        out += _stroke_run(p[i:j], box, pattern)
    return out


def _stroke_run(p: np.ndarray, box, pattern) -> list[np.ndarray]:
    d = np.diff(p, axis=0)
    length = np.hypot(d[:, 0], d[:, 1])
    if (length == 0).any():
        # Repeated vertices would give np.interp a flat step in arc length.
        p = p[np.concatenate(([True], length > 0))]
        d = np.diff(p, axis=0)
        length = np.hypot(d[:, 0], d[:, 1])
    if p.shape[0] < 2:
        return []
    s = np.concatenate(([0.0], np.cumsum(length)))
    x0, y0, x1, y1 = box
    t0, t1 = clip_segments(p[:-1], p[1:], box)
    vis = t0 < t1
    if not vis.any():
        return []
    a, b = (s[:-1] + t0 * length)[vis], (s[:-1] + t1 * length)[vis]
    cuts = [s, a, b]
    if pattern is not None:
        ends = np.cumsum(np.asarray(pattern, dtype=float))
        period = ends[-1]
        # Dash ends only where the line shows: its length off the panel may be huge.
        k0 = np.floor(a / period)
        count = (np.floor(b / period) - k0 + 1).astype(np.int64)
        first = np.cumsum(count) - count
        k = np.repeat(k0, count) + (np.arange(count.sum()) - np.repeat(first, count))
        starts = np.concatenate(([0.0], ends[:-1]))
        cuts.append((k[:, None] * period + starts[None, :]).ravel())
    c = np.unique(np.concatenate(cuts))
    c = c[(c >= 0.0) & (c <= s[-1])]
    x, y = np.interp(c, s, p[:, 0]), np.interp(c, s, p[:, 1])
    # Between two cuts a piece is wholly in or out, on or off: test its middle.
    xm, ym = (x[:-1] + x[1:]) / 2, (y[:-1] + y[1:]) / 2
    on = (xm >= x0) & (xm <= x1) & (ym >= y0) & (ym <= y1) & (np.diff(c) > 0)
    if pattern is not None:
        phase = np.mod((c[:-1] + c[1:]) / 2, period)
        on &= np.searchsorted(ends, phase, side="right") % 2 == 0
    i0, i1 = _runs(on)
    xy = np.column_stack((x, y))
    return [xy[i:j + 1] for i, j in zip(i0, i1)]


class Canvas:
    """An RGB figure at its final size; shapes go on supersampled :class:`Layer` s.

    Text is queued and drawn last (:meth:`pixels`), so a layer pasted later does
    not cover it; frames and ticks, which sit on whole pixels, are drawn at the
    final size directly.

    Parameters
    ----------
    width, height : int
        Size, px.
    dpi : float
        Pixels per inch: converts points to pixels and goes into the PNG.
    scale : int
        Supersampling factor of the layers (2: each final pixel averages four
        samples; measured on the six-panel Allan figure, 3 drew 10 % slower and 4
        25 % slower, for edges barely smoother at 110 dpi).
    """

    def __init__(self, width: int, height: int, dpi: float, scale: int = 2):
        self.width, self.height, self.dpi, self.scale = int(width), int(height), dpi, scale
        self.image = Image.new("RGB", (self.width, self.height), "white")
        self.draw = ImageDraw.Draw(self.image)
        self._texts: list[tuple] = []

    def px(self, points: float) -> float:
        """A length in points as final pixels."""
        return points * self.dpi / 72.0

    def stroke(self, points: float) -> int:
        """A line width in points as whole supersampled pixels (at least one), rounded
        up from a quarter: 0.8 pt at 110 dpi and 2× is 2.44, and 2 (one final pixel)
        read visibly lighter than the same line in matplotlib."""
        return max(1, math.ceil(points * self.dpi / 72.0 * self.scale - 0.25))

    def font(self, size_pt: float):
        """The font at ``size_pt`` points for this canvas's dpi."""
        return font(round(self.px(size_pt), 2))

    def text_width(self, text: str, size_pt: float) -> float:
        """Advance width of the widest line of ``text``, px."""
        f = self.font(size_pt)
        return max(f.getlength(line) for line in text.split("\n"))

    def text(self, x: float, y: float, text: str, size_pt: float, fill="k",
             ha: str = "left", va: str = "baseline", rotation: int = 0,
             linespacing: float = 1.2) -> None:
        """Queue text at ``(x, y)`` (px), drawn after the shapes.

        Parameters
        ----------
        ha : {"left", "center", "right"}
            Which side of the text box sits at ``x``.
        va : {"top", "center", "baseline", "bottom"}
            Which line of the text box sits at ``y``: the top of the first line's
            "lp" ink, the box's middle, the first baseline, or the bottom of the last
            line's ink (matplotlib's alignments).
        rotation : {0, 90}
            90 turns the text to read upwards; ``ha``/``va`` then place the turned
            box.
        linespacing : float
            Baseline step of multi-line text in "lp" line heights.
        """
        self._texts.append((x, y, text, size_pt, color(fill), ha, va, rotation, linespacing))

    def texts(self) -> list[tuple[str, tuple[int, int, int]]]:
        """The text queued so far and its colour, in order: what the figure says."""
        return [(item[2], item[4]) for item in self._texts]

    def rectangle(self, box: Sequence[int], fill) -> None:
        """Fill whole pixels ``left..right``, ``top..bottom`` (inclusive), px."""
        self.draw.rectangle(tuple(int(v) for v in box), fill=color(fill))

    def pixels(self) -> np.ndarray:
        """The finished figure with its text drawn.

        Returns
        -------
        ndarray, shape (height, width, 3), uint8
        """
        for item in self._texts:
            self._draw_text(*item)
        self._texts.clear()
        # Through bytes: numpy's array interface path for a Pillow image is slower.
        return np.frombuffer(self.image.tobytes(), dtype=np.uint8).reshape(
            self.height, self.width, 3)

    def png(self, level: int = 3) -> bytes:
        """The finished figure as PNG bytes (:func:`png_bytes`)."""
        return png_bytes(self.pixels(), self.dpi, level)

    def _draw_text(self, x, y, text, size_pt, fill, ha, va, rotation, linespacing) -> None:
        size = round(self.px(size_pt), 2)
        f = font(size)
        up, down = _line_metrics(size)
        lines = text.split("\n")
        step = linespacing * (up + down)
        widths = [f.getlength(line) for line in lines]
        box_w, box_h = max(widths), up + down + step * (len(lines) - 1)
        if rotation:
            # Lay the text out flat on a mask, turn it, place the turned box.
            w, h = math.ceil(box_w) + 2, math.ceil(box_h) + 2
            mask = Image.new("L", (w, h), 0)
            draw = ImageDraw.Draw(mask)
            for i, (line, lw) in enumerate(zip(lines, widths)):
                lx = {"left": 1, "center": 1 + (box_w - lw) / 2, "right": 1 + box_w - lw}[ha]
                draw.text((lx, 1 + up + i * step), line, fill=255, font=f, anchor="ls")
            mask = mask.transpose(Image.Transpose.ROTATE_90)
            w, h = mask.size
            left = {"left": x, "center": x - w / 2, "right": x - w}[ha]
            top = {"top": y, "center": y - h / 2, "bottom": y - h, "baseline": y - h / 2}[va]
            left, top = round(left), round(top)
            self.image.paste(fill, (left, top, left + w, top + h), mask)
            return
        first = {"top": y + up, "baseline": y, "center": y - box_h / 2 + up,
                 "bottom": y - down - step * (len(lines) - 1)}[va]
        for i, (line, lw) in enumerate(zip(lines, widths)):
            lx = {"left": x, "center": x - lw / 2, "right": x - lw}[ha]
            self.draw.text((lx, first + i * step), line, fill=fill, font=f, anchor="ls")


class Layer:
    """A rectangle of a :class:`Canvas` drawn at the canvas's ``scale`` and pasted
    back reduced (each final pixel the mean of its ``scale × scale`` samples):
    Pillow's lines and ellipses are not anti-aliased, the average is.

    Coordinates of the drawing methods are supersampled pixels of the layer
    (:meth:`to_layer` converts final canvas px); drawing stops at the layer's
    edge, which is what clips a panel's data to its frame.

    Parameters
    ----------
    canvas : Canvas
    box : (left, top, right, bottom)
        The canvas pixels the layer covers, whole numbers, right/bottom exclusive.
    """

    def __init__(self, canvas: Canvas, box: Sequence[int]):
        self.canvas, self.box, s = canvas, tuple(int(v) for v in box), canvas.scale
        left, top, right, bottom = self.box
        self.image = Image.new("RGB", ((right - left) * s, (bottom - top) * s), "white")
        self.draw = ImageDraw.Draw(self.image)
        # Lines and polygons are clipped in numpy to this margin first; the image's
        # own edge then cuts strokes and markers exactly.
        m = 8.0 * s
        self.clip = (-m, -m, (right - left) * s + m, (bottom - top) * s + m)

    def to_layer(self, x, y) -> np.ndarray:
        """Canvas px to layer (supersampled) px, shape (n, 2).

        Pillow truncates a coordinate to the sample it falls in and draws at that
        sample's centre: the nearest centre to the point, so no half-sample shift.
        """
        s = self.canvas.scale
        return np.column_stack(((np.ravel(x) - self.box[0]) * s,
                                (np.ravel(y) - self.box[1]) * s))

    def polyline(self, points: np.ndarray, fill, width_pt: float, style: str = "-",
                 alpha: float = 1.0) -> None:
        """A line through ``points`` (layer px, shape (n, 2); non-finite rows break it).

        ``style`` is one of :data:`DASHES` (on/off lengths in line widths, as
        matplotlib scales them); ``alpha`` is the opacity against white.
        """
        c = self.canvas
        dashes = DASHES[style]
        pattern = (None if dashes is None
                   else [v * width_pt * c.dpi / 72.0 * c.scale for v in dashes])
        ink, w = color(fill, alpha), c.stroke(width_pt)
        for piece in stroke_runs(points, self.clip, pattern):
            self.draw.line(piece.ravel().tolist(), fill=ink, width=w)
        if pattern is None and w > 2 and len(points) > 2:
            # Round joins (matplotlib's default) only where a solid line turns enough
            # to leave a notch: Pillow's own joins cost a Python call at every vertex.
            p = np.asarray(points, dtype=float)
            d = np.diff(p, axis=0)
            with np.errstate(invalid="ignore"):
                turn = np.diff(np.arctan2(d[:, 1], d[:, 0]))
                turn = np.abs((turn + np.pi) % (2 * np.pi) - np.pi)
                x0, y0, x1, y1 = self.clip
                q = p[1:-1][(turn > 0.2) & (p[1:-1, 0] >= x0) & (p[1:-1, 0] <= x1)
                            & (p[1:-1, 1] >= y0) & (p[1:-1, 1] <= y1)]
            r = (w - 1) / 2
            for x, y in q.tolist():
                self.draw.ellipse((x - r, y - r, x + r, y + r), fill=ink)

    def segments(self, start: np.ndarray, end: np.ndarray, fill, width_pt: float) -> None:
        """Solid straight segments from each ``start`` to its ``end`` (layer px, shape
        (n, 2) each; a segment with a non-finite end is left out)."""
        ok = np.isfinite(start).all(axis=1) & np.isfinite(end).all(axis=1)
        a, b = start[ok], end[ok]
        t0, t1 = clip_segments(a, b, self.clip)
        vis = t0 < t1
        d = (b - a)[vis]
        a, t0, t1 = a[vis], t0[vis, None], t1[vis, None]
        ink, w = color(fill), self.canvas.stroke(width_pt)
        for seg in np.hstack((a + t0 * d, a + t1 * d)).tolist():
            self.draw.line(seg, fill=ink, width=w)

    def polygon(self, points: np.ndarray, fill) -> None:
        """A filled polygon (layer px, shape (n, 2), finite)."""
        poly = clip_polygon(points, self.clip)
        if poly.shape[0] >= 3:
            self.draw.polygon(poly.ravel().tolist(), fill=color(fill))

    def circles(self, points: np.ndarray, size_pt: float, fill="k", face=None,
                edge_pt: float = 1.0) -> None:
        """Circle markers of diameter ``size_pt`` (pt) centred on ``points`` (layer
        px, shape (n, 2)), the edge centred on the circle as matplotlib strokes a
        marker; ``face`` None fills with the edge colour, ``"white"`` leaves it
        hollow."""
        c = self.canvas
        # Pillow's box includes its last sample: half a sample less each side.
        r = (size_pt + edge_pt) / 2 * c.dpi / 72.0 * c.scale - 0.5
        ink = color(fill)
        inner = ink if face is None else color(face)
        edge = c.stroke(edge_pt)
        w, h = self.image.size
        for x, y in np.asarray(points, dtype=float).reshape(-1, 2):
            if -r <= x <= w + r and -r <= y <= h + r:
                self.draw.ellipse((x - r, y - r, x + r, y + r), fill=inner, outline=ink,
                                  width=edge)

    def paste(self) -> None:
        """Reduce the layer and put it into the canvas at its box."""
        s = self.canvas.scale
        self.canvas.image.paste(self.image.reduce(s) if s > 1 else self.image, self.box[:2])


class LogAxes:
    """A log–log panel on a :class:`Canvas`: data mapped to pixels, clipped to the box.

    Data are drawn in call order on a :class:`Layer` of the panel's data area,
    which :meth:`finish` pastes into the canvas with a frame around it; ticks and
    labels go on the canvas.

    Parameters
    ----------
    canvas : Canvas
    box : (left, top, right, bottom)
        The data area, canvas px, whole numbers, right/bottom exclusive: the frame
        is drawn on the pixels just outside it.
    xlim, ylim : (float, float)
        Data limits, positive, low < high; the low x at the left edge, the low y
        at the bottom edge.
    """

    def __init__(self, canvas: Canvas, box: Sequence[int], xlim: Sequence[float],
                 ylim: Sequence[float]):
        self.canvas = canvas
        self.box = tuple(int(v) for v in box)
        self.xlim, self.ylim = (float(xlim[0]), float(xlim[1])), (float(ylim[0]), float(ylim[1]))
        if not (0 < self.xlim[0] < self.xlim[1] and 0 < self.ylim[0] < self.ylim[1]):
            raise ValueError(f"log axes need 0 < low < high limits, got {xlim}, {ylim}")
        self._lx, self._ly = np.log10(self.xlim), np.log10(self.ylim)
        self.layer = Layer(canvas, self.box)
        self._xlabels_bottom, self._ylabels_left = self.box[3], self.box[0]

    def to_px(self, x, y) -> tuple[np.ndarray, np.ndarray]:
        """Data to canvas pixel coordinates: linear in the log10 of each value.

        Parameters
        ----------
        x, y : array_like
            Positive data values (others map to non-finite coordinates).

        Returns
        -------
        (ndarray, ndarray)
            x and y, canvas px (fractional; the box's left/top edge at its
            ``left``/``top`` value, right/bottom edge at ``right``/``bottom``).
        """
        left, top, right, bottom = self.box
        with np.errstate(divide="ignore", invalid="ignore"):
            fx = (np.log10(np.asarray(x, dtype=float)) - self._lx[0]) / (self._lx[1] - self._lx[0])
            fy = (np.log10(np.asarray(y, dtype=float)) - self._ly[0]) / (self._ly[1] - self._ly[0])
        return left + fx * (right - left), bottom - fy * (bottom - top)

    def _at(self, x, y) -> np.ndarray:
        """Data to layer px, shape (n, 2)."""
        return self.layer.to_layer(*self.to_px(x, y))

    def plot(self, x, y, fill="k", width_pt: float = 1.0, style: str = "-",
             alpha: float = 1.0) -> None:
        """A polyline through ``(x, y)``, shape (n,) each; a non-positive or
        non-finite value breaks it. ``width_pt`` in pt; ``style`` one of "-", "--",
        "-.", ":"; ``alpha`` the opacity against white."""
        self.layer.polyline(self._at(x, y), fill, width_pt, style, alpha)

    def fill_between(self, x, lower, upper, fill="0.8") -> None:
        """The band between two curves over the same ``x``, shape (n,) each; gaps
        where any of the three is non-positive or non-finite."""
        lo, hi = self._at(x, lower), self._at(x, upper)
        ok = np.isfinite(lo).all(axis=1) & np.isfinite(hi).all(axis=1)
        for i, j in zip(*_runs(ok)):
            if j - i >= 2:
                self.layer.polygon(np.concatenate((hi[i:j], lo[i:j][::-1])), fill)

    def axvspan(self, x0: float, x1: float, fill) -> None:
        """A full-height band between two x values."""
        a = self._at([x0, x1], self.ylim)
        self.layer.polygon(np.array([[a[0, 0], a[0, 1]], [a[1, 0], a[0, 1]],
                                     [a[1, 0], a[1, 1]], [a[0, 0], a[1, 1]]]), fill)

    def vlines(self, x, lower, upper, fill="k", width_pt: float = 0.8) -> None:
        """A vertical bar from ``lower`` to ``upper`` at each ``x``, shape (n,) each.

        Each bar covers whole pixel columns (the one its x falls in, and more for a
        wider bar), as matplotlib snaps straight lines: a one-pixel bar spread over
        two half-covered columns reads grey.
        """
        c, s = self.canvas, self.canvas.scale
        left, top, right, bottom = self.box
        px, y0 = self.to_px(x, lower)
        _, y1 = self.to_px(x, upper)
        w = max(1, round(c.px(width_pt)))
        k = np.floor(np.asarray(px, dtype=float) - (w - 1) / 2)
        ok = np.isfinite(k) & np.isfinite(y0) & np.isfinite(y1) & (k + w > left) & (k < right)
        height = (bottom - top) * s
        ink = color(fill)
        for col, a, b in zip(k[ok].tolist(), np.atleast_1d(y0)[ok].tolist(),
                             np.atleast_1d(y1)[ok].tolist()):
            a, b = sorted(((a - top) * s, (b - top) * s))
            if b >= 0 and a <= height:
                x0 = (col - left) * s
                self.layer.draw.rectangle((x0, max(a, -1), x0 + w * s - 1, min(b, height + 1)),
                                          fill=ink)

    def markers(self, x, y, size_pt: float = 3.0, fill="k", face=None,
                edge_pt: float = 1.0) -> None:
        """Circles at the finite points ``(x, y)`` (:meth:`Layer.circles`)."""
        pts = self._at(x, y)
        self.layer.circles(pts[np.isfinite(pts).all(axis=1)], size_pt, fill, face, edge_pt)

    def columns(self, xs) -> np.ndarray:
        """The canvas pixel column each x value falls in, kept inside the box."""
        px, _ = self.to_px(np.asarray(xs, dtype=float), np.full(len(xs), self.ylim[0]))
        return np.clip(np.floor(px), self.box[0], self.box[2] - 1).astype(int)

    def rows(self, ys) -> np.ndarray:
        """The canvas pixel row each y value falls in, kept inside the box."""
        _, py = self.to_px(np.full(len(ys), self.xlim[0]), np.asarray(ys, dtype=float))
        return np.clip(np.floor(py), self.box[1], self.box[3] - 1).astype(int)

    def grid(self, xs, ys, fill="#b0b0b0", width_pt: float = 0.8,
             alpha: float = 0.3) -> None:
        """Grid lines at data values ``xs`` (vertical) and ``ys`` (horizontal), each on
        whole canvas pixels (:meth:`columns`, :meth:`rows`) so that they stay crisp."""
        s, ink = self.canvas.scale, color(fill, alpha)
        w = s * max(1, round(self.canvas.px(width_pt)))
        width, height = self.layer.image.size
        draw = self.layer.draw
        for k in self.columns(xs):
            x = (k - self.box[0]) * s
            draw.rectangle((x, 0, x + w - 1, height), fill=ink)
        for k in self.rows(ys):
            y = (k - self.box[1]) * s
            draw.rectangle((0, y, width, y + w - 1), fill=ink)

    def finish(self) -> None:
        """Paste the panel's data into the canvas and frame it (one pixel wide, on
        the pixels just outside the data area)."""
        self.layer.paste()
        left, top, right, bottom = self.box
        c = self.canvas
        c.rectangle((left - 1, top - 1, right, top - 1), "k")
        c.rectangle((left - 1, bottom, right, bottom), "k")
        c.rectangle((left - 1, top - 1, left - 1, bottom), "k")
        c.rectangle((right, top - 1, right, bottom), "k")

    def ticks(self, xs=(), ys=(), xlabels=(), ylabels=(), minor_ys=(), size_pt: float = 10.0,
              length_pt: float = 3.5, minor_length_pt: float = 2.0,
              pad_pt: float = 3.5) -> None:
        """Tick marks outside the frame (bottom and left) and their labels.

        Parameters
        ----------
        xs, ys : sequence of float
            Major tick positions, data.
        xlabels, ylabels : sequence of str
            Their labels, same lengths (or empty for none).
        minor_ys : sequence of float
            Unlabelled shorter ticks on the y axis.
        size_pt, length_pt, minor_length_pt, pad_pt : float
            Label size, tick lengths, gap between tick and label, pt (matplotlib's
            defaults).
        """
        c = self.canvas
        left, top, right, bottom = self.box
        major, minor = round(c.px(length_pt)), round(c.px(minor_length_pt))
        # From the frame's pixel outwards by the tick's length.
        for k in self.columns(xs):
            c.rectangle((k, bottom, k, bottom + major), "k")
        for k in self.rows(ys):
            c.rectangle((left - 1 - major, k, left - 1, k), "k")
        for k in self.rows(minor_ys):
            c.rectangle((left - 1 - minor, k, left - 1, k), "k")
        gap = c.px(length_pt + pad_pt)
        px, _ = self.to_px(np.asarray(xs, dtype=float), np.full(len(xs), self.ylim[0]))
        for x, label in zip(px, xlabels):
            c.text(x, bottom + gap, label, size_pt, ha="center", va="top")
        _, py = self.to_px(np.full(len(ys), self.xlim[0]), np.asarray(ys, dtype=float))
        for y, label in zip(py, ylabels):
            c.text(left - gap, y, label, size_pt, ha="right", va="center")
        up, down = _line_metrics(round(c.px(size_pt), 2))
        if len(xlabels):
            self._xlabels_bottom = bottom + gap + up + down
        if len(ylabels):
            self._ylabels_left = left - gap - max(c.text_width(t, size_pt) for t in ylabels)

    def title(self, text: str, size_pt: float = 12.0, pad_pt: float = 6.0) -> None:
        """Centred above the panel, its baseline ``pad_pt`` above 1.01 of the height
        (where matplotlib puts a title given ``y=1.01``)."""
        left, top, right, bottom = self.box
        self.canvas.text((left + right) / 2, top - 0.01 * (bottom - top) - self.canvas.px(pad_pt),
                         text, size_pt, ha="center", va="baseline")

    def xlabel(self, text: str, size_pt: float = 10.0, pad_pt: float = 4.0) -> None:
        """Centred under the tick labels (after :meth:`ticks`)."""
        left, _, right, _ = self.box
        self.canvas.text((left + right) / 2, self._xlabels_bottom + self.canvas.px(pad_pt), text,
                         size_pt, ha="center", va="top")

    def ylabel(self, text: str, size_pt: float = 10.0, pad_pt: float = 4.0) -> None:
        """Turned to read upwards, left of the tick labels (after :meth:`ticks`)."""
        _, top, _, bottom = self.box
        self.canvas.text(self._ylabels_left - self.canvas.px(pad_pt), (top + bottom) / 2, text,
                         size_pt, ha="right", va="center", rotation=90)

    def text(self, fx: float, fy: float, text: str, size_pt: float, fill="k",
             ha: str = "left", va: str = "baseline", linespacing: float = 1.2) -> None:
        """Text at a fraction of the panel (0, 0 bottom left; 1, 1 top right; may lie
        outside), aligned as :meth:`Canvas.text`."""
        left, top, right, bottom = self.box
        self.canvas.text(left + fx * (right - left), bottom - fy * (bottom - top), text,
                         size_pt, fill, ha=ha, va=va, linespacing=linespacing)

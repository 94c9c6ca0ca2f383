"""The raster canvas under the Allan figure: PNG bytes, pixel mapping, clipping, dashes,
ticks, fonts."""

from __future__ import annotations

import io
import struct
import zlib

import numpy as np
import pytest

from noisecal.export.raster import (DASHES, Canvas, LogAxes, clip_polygon, font, font_file,
                                    png_bytes, stroke_runs)


def _chunks(data: bytes) -> list[tuple[bytes, bytes, int]]:
    """(type, data, stored CRC) of every chunk, read by hand."""
    out, i = [], 8
    while i < len(data):
        (length,) = struct.unpack(">I", data[i:i + 4])
        tag, body = data[i + 4:i + 8], data[i + 8:i + 8 + length]
        (crc,) = struct.unpack(">I", data[i + 8 + length:i + 12 + length])
        out.append((tag, body, crc))
        i += 12 + length
    return out


def test_png_layout_read_by_hand():
    """PNG, ISO/IEC 15948 (W3C PNG specification, 2nd edition): the 8-byte
    signature; IHDR first with width, height, bit depth 8, colour type 2 (RGB),
    compression 0, filter 0, interlace 0; pHYs with pixels per metre and unit 1;
    the image in IDAT as a zlib stream of rows each led by a filter-type byte;
    IEND last; every chunk's CRC-32 over its type and data."""
    rng = np.random.default_rng(3)
    rgb = rng.integers(0, 256, size=(7, 11, 3), dtype=np.uint8)
    data = png_bytes(rgb, dpi=110, level=6)
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    chunks = _chunks(data)
    assert [c[0] for c in chunks] == [b"IHDR", b"pHYs", b"IDAT", b"IEND"]
    for tag, body, crc in chunks:
        assert zlib.crc32(tag + body) == crc
    assert struct.unpack(">IIBBBBB", chunks[0][1]) == (11, 7, 8, 2, 0, 0, 0)
    ppm_x, ppm_y, unit = struct.unpack(">IIB", chunks[1][1])
    assert ppm_x == ppm_y == round(110 / 0.0254) and unit == 1
    rows = np.frombuffer(zlib.decompress(chunks[2][1]), dtype=np.uint8).reshape(7, 1 + 33)
    assert (rows[:, 0] == 0).all()
    np.testing.assert_array_equal(rows[:, 1:].reshape(7, 11, 3), rgb)
    assert chunks[3][1] == b""


def test_png_decodes_with_pillow():
    """Reference library: Pillow's PNG decoder reads the bytes back to the same
    pixels, in RGB mode, at the written dpi."""
    from PIL import Image

    rng = np.random.default_rng(4)
    rgb = rng.integers(0, 256, size=(40, 90, 3), dtype=np.uint8)
    with Image.open(io.BytesIO(png_bytes(rgb, dpi=90))) as im:
        im.load()
        assert im.mode == "RGB" and im.size == (90, 40)
        assert im.info["dpi"] == pytest.approx((90.0, 90.0), abs=0.01)
        np.testing.assert_array_equal(np.asarray(im), rgb)
    with pytest.raises(ValueError):
        png_bytes(rgb[:, :, :2], dpi=90)


def test_log_mapping_puts_known_points_on_known_pixels():
    """Log axes are linear in log10 of the value (common practice, no source): the
    limits land on the box's edges, the geometric middle on its centre, a decade
    on its share of the width; a marker drawn there is centred on that pixel
    position (ink centroid within a fifth of a pixel)."""
    c = Canvas(120, 240, 110)
    ax = LogAxes(c, (10, 20, 110, 220), (1e-2, 1e2), (1e-6, 1e-3))
    x, y = ax.to_px([1e-2, 1e2, 1.0, 0.1], [1e-6, 1e-3, 10 ** -4.5, 1e-5])
    np.testing.assert_allclose(x, [10, 110, 60, 35], atol=1e-9)
    np.testing.assert_allclose(y, [220, 20, 120, 220 - 200 / 3], atol=1e-9)
    ax.markers([0.1], [1e-5], 6.0, "k")
    ax.finish()
    ink = 255.0 - c.pixels()[20:220, 10:110].mean(axis=2)
    rows, cols = np.mgrid[20:220, 10:110] + 0.5  # pixel centres
    assert (ink * cols).sum() / ink.sum() == pytest.approx(35, abs=0.2)
    assert (ink * rows).sum() / ink.sum() == pytest.approx(220 - 200 / 3, abs=0.2)


def test_limits_must_be_positive_and_ordered():
    """A log axis has no zero (common practice, no source)."""
    c = Canvas(50, 50, 72)
    for xlim, ylim in (((0, 1), (1, 2)), ((1, 1), (1, 2)), ((1, 2), (3, 2))):
        with pytest.raises(ValueError):
            LogAxes(c, (5, 5, 45, 45), xlim, ylim)


def test_lines_stay_inside_the_panel():
    """A thick line and markers running far past the limits leave no ink outside the
    frame, and do leave ink inside (common practice, no source)."""
    c = Canvas(300, 300, 110)
    ax = LogAxes(c, (100, 100, 200, 200), (1.0, 10.0), (1.0, 10.0))
    x = np.logspace(-3, 4, 50)
    ax.plot(x, x ** 3, "#ff0000", 4.0)
    ax.plot(x, np.full_like(x, 3.0), "#ff0000", 4.0, "--")
    ax.markers([0.5, 1.0, 20.0], [3.0, 3.0, 3.0], 8.0, "#ff0000")
    ax.fill_between(x, x * 0 + 1e-9, x * 0 + 1e9, "#ff0000")
    ax.finish()
    rgb = c.pixels().astype(int)
    red = (rgb[:, :, 0] > 200) & (rgb[:, :, 1] < 120)
    inside = np.zeros_like(red)
    inside[100:200, 100:200] = True
    assert red[inside].sum() > 5000
    assert red[~inside].sum() == 0


def test_stroke_runs_clip_and_dash_by_arc_length():
    """Liang–Barsky clipping and a dash pattern along the arc length, checked by
    hand arithmetic (common practice, no source): pieces lie in the box and end on
    its edges; a dashed line's inked length is on/(on + off) of the visible length
    up to one dash; a clipped dashed line's dashes are the unclipped line's dashes
    cut to the box (the pattern does not restart at the edge)."""
    box = (0.0, 0.0, 100.0, 50.0)
    line = np.array([[-50.0, 25.0], [150.0, 25.0]])
    (piece,) = stroke_runs(line, box)
    np.testing.assert_allclose(piece, [[0, 25], [100, 25]])
    assert stroke_runs(np.array([[-5.0, -5.0], [-1.0, 60.0]]), box) == []
    # A polyline leaving and re-entering: two pieces.
    zig = np.array([[10.0, 10.0], [50.0, 80.0], [90.0, 10.0]])
    pieces = stroke_runs(zig, box)
    assert len(pieces) == 2
    for p in pieces:
        assert (p[:, 0] >= -1e-9).all() and (p[:, 0] <= 100 + 1e-9).all()
        assert (p[:, 1] >= -1e-9).all() and (p[:, 1] <= 50 + 1e-9).all()
    assert pieces[0][-1][1] == pytest.approx(50) and pieces[1][0][1] == pytest.approx(50)

    on, off = 3.7, 1.6
    diag = np.array([[0.0, 0.0], [300.0, 400.0]])  # 500 long
    dashes = stroke_runs(diag, (-1, -1, 1000, 1000), (on, off))
    inked = sum(np.hypot(*(p[-1] - p[0])) for p in dashes)
    assert abs(inked - 500 * on / (on + off)) < on
    assert all(np.hypot(*(p[-1] - p[0])) <= on + 1e-9 for p in dashes)
    clipped = stroke_runs(diag, (0, 100, 300, 300), (on, off))
    expected = stroke_runs(diag, (-1, -1, 1000, 1000), (on, off))
    expected = [p for p in expected if 100 <= p[0, 1] and p[-1, 1] <= 300]
    inner = [p for p in clipped if 100 < p[0, 1] and p[-1, 1] < 300]
    assert len(inner) >= len(expected) - 1
    for p in inner:
        assert any(np.allclose(p, q) for q in expected)


def test_dotted_pattern_is_matplotlibs():
    """Reference library: the dash patterns in line widths are matplotlib's default
    rcParams (lines.dashed_pattern, lines.dashdot_pattern, lines.dotted_pattern)."""
    import matplotlib

    ref = matplotlib.rcParamsDefault
    for style, key in (("--", "dashed"), ("-.", "dashdot"), (":", "dotted")):
        assert DASHES[style] == pytest.approx(tuple(ref[f"lines.{key}_pattern"]))


def test_clip_polygon_areas():
    """Sutherland–Hodgman against a rectangle, areas by the shoelace formula worked
    by hand (common practice, no source)."""
    def area(p):
        x, y = p[:, 0], p[:, 1]
        return 0.5 * abs(np.dot(x, np.roll(y, -1)) - np.dot(y, np.roll(x, -1)))

    square = np.array([[-1.0, -1.0], [3.0, -1.0], [3.0, 3.0], [-1.0, 3.0]])
    assert area(clip_polygon(square, (0, 0, 2, 2))) == pytest.approx(4.0)
    tri = np.array([[0.0, 0.0], [4.0, 0.0], [0.0, 4.0]])  # clipped to x <= 2: area 8 - 2
    assert area(clip_polygon(tri, (-10, -10, 2, 10))) == pytest.approx(6.0)
    assert clip_polygon(tri, (10, 10, 20, 20)).shape[0] == 0


def test_font_has_the_glyphs_the_labels_use():
    """Reference library: fontTools reads the cmap of the font file found in
    matplotlib's package data (found without importing matplotlib): τ, the
    superscript digits and minus, ×, √, … and ° all map to glyphs."""
    from fontTools.ttLib import TTFont

    path = font_file()
    assert path is not None and path.endswith("DejaVuSans.ttf")
    cmap = TTFont(path).getBestCmap()
    for ch in "τ⁻⁰¹²³⁴⁵⁶⁷⁸⁹×√…°":
        assert ord(ch) in cmap, ch
    assert font(12.0).getlength("10⁻³") > 0


def test_text_without_the_font_file(monkeypatch):
    """Without DejaVu Sans the canvas still writes its text with Pillow's own font
    (common practice, no source)."""
    import noisecal.export.raster as raster

    monkeypatch.setattr(raster, "font_file", lambda: None)
    raster.font.cache_clear()
    raster._line_metrics.cache_clear()
    try:
        c = Canvas(120, 40, 110)
        c.text(5, 20, "averaging time", 10.0, va="center")
        assert (c.pixels() < 128).any()
    finally:
        raster.font.cache_clear()
        raster._line_metrics.cache_clear()


def test_turned_text_reads_upwards():
    """A y-axis label is turned 90° counter-clockwise (common practice, no source):
    its ink is taller than wide, and a label longer in characters is taller."""
    heights = []
    for label in ("Allan", "Allan deviation [rad/s]"):
        c = Canvas(80, 300, 110)
        c.text(60, 150, label, 10.0, ha="right", va="center", rotation=90)
        ink = np.argwhere(c.pixels().min(axis=2) < 128)
        h, w = ink.max(axis=0) - ink.min(axis=0) + 1
        assert h > w
        assert ink[:, 1].max() <= 60
        heights.append(h)
    assert heights[1] > 2 * heights[0]

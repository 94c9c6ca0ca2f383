"""The Allan figure: what it must show, its tick labels, the PNG it writes."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest


@pytest.fixture(scope="module")
def fitted():
    """Two channels of white noise plus a random walk, fitted by the static job."""
    import noisecal
    from noisecal.fit.simulate import simulate_rate

    rng = np.random.default_rng(5)
    period, n = 0.01, 16384
    cols = {name: simulate_rate(np.array([0, 1e-6, 0, k, 0]), period, n, rng)
            for name, k in (("gyro_a", 1e-9), ("gyro_b", 4e-9))}
    rec = noisecal.read(cols, period=period, units={c: "rad/s" for c in cols})
    return noisecal.static(rec, reps=20, seed=2)


def _drawn_panel(res, model=None):
    from noisecal.export.plot import LOG_AXES, _figure, _panel

    fig = _figure(5.8, 6.0, dpi=80)
    ax = fig.subplots(1, 1, subplot_kw=LOG_AXES)
    _panel(ax, model or res.models[0], res.dense[0], res.hadamard[0])
    fig.canvas.draw()
    return fig, ax


def test_tick_labels_name_the_decades_matplotlib_would(fitted):
    """Reference library: the plain-text labels (10⁻³) stand at the decades inside the
    view and give the exponents that matplotlib's own log locator and mathtext
    formatter (LogLocator, LogFormatterSciNotation) give for the same axis."""
    from matplotlib.ticker import LogFormatterSciNotation, LogLocator

    _, ax = _drawn_panel(fitted)
    sup = str.maketrans("⁻⁰¹²³⁴⁵⁶⁷⁸⁹", "-0123456789")
    for axis, (lo, hi) in ((ax.xaxis, ax.get_xlim()), (ax.yaxis, ax.get_ylim())):
        locs = axis.get_majorticklocs()
        ref = [v for v in LogLocator(10.0).tick_values(lo, hi) if lo <= v <= hi]
        np.testing.assert_allclose(locs, ref, rtol=1e-12)
        fmt = LogFormatterSciNotation()
        fmt.set_axis(axis)
        fmt.set_locs(locs)
        for text, v in zip([t.get_text() for t in axis.get_majorticklabels()], locs):
            mathtext = fmt(v)  # e.g. '$\\mathdefault{10^{-3}}$'
            exponent = mathtext.split("^{")[1].split("}")[0]
            assert text.startswith("10") and text[2:].translate(sup) == exponent, (text,
                                                                                   mathtext)


def test_panel_keeps_its_content(fitted):
    """One band per interval (not one artist per point), the curve, the fitted model,
    the five terms, the left-out band where a fit leaves taus out, and the red warning
    of a failed model check: common practice, no source."""
    from matplotlib.collections import LineCollection, PolyCollection

    res = fitted
    model = res.models[0]
    used = np.ones(model.curve.taus.shape[0], dtype=bool)
    used[:2] = False
    failed = replace(model, fit=replace(model.fit, used=used),
                     check=replace(model.check, consistent=False,
                                   cause="points below the model at short taus"))
    _, ax = _drawn_panel(res, failed)
    bands = [c for c in ax.collections if isinstance(c, PolyCollection)]
    bars = [c for c in ax.collections if isinstance(c, LineCollection)]
    assert len(bands) == 1  # the dense curve's 95 % band
    assert len(ax.patches) == 1  # the left-out shading
    assert len(bars) == 1 and len(bars[0].get_segments()) == model.curve.taus.shape[0]
    assert len(ax.lines) >= 2 + 2 + 5 + 1  # ADEV, Hadamard, points, terms, model
    red = [t for t in ax.texts if t.get_color() == "#c00000"]
    assert len(red) == 1 and "NOT consistent" in red[0].get_text()
    assert any("left out of the fit" in t.get_text() for t in ax.texts)
    block = next(t.get_text() for t in ax.texts if t.get_text().startswith("Q: ")).split("\n")
    assert [line.split(":")[0] for line in block] == ["Q", "N", "B", "K", "R"]
    for line, name in zip(block, ("quantization", "white_noise", "bias_instability",
                                  "bias_random_walk", "rate_ramp")):
        est = model.terms[name]
        assert (f"{est.value:.3g} [{est.lower:.3g}, {est.upper:.3g}]" if est.resolved
                else f"< {est.upper:.3g}") in line and line.endswith(est.unit)


def test_legend_names_every_term_symbol(fitted):
    """The panels write each term by its letter; the shared legend names them all
    (IEEE Std 952 symbols Q, N, B, K, R)."""
    from noisecal.export.plot import _figure, _style_legend

    fig = _figure(4.0, 3.0)
    _style_legend(fig)
    labels = [t.get_text() for t in fig.legends[0].get_texts()]
    for label in ("quantization Q", "white noise N", "bias instability B",
                  "bias random walk K", "rate ramp R"):
        assert label in labels


def test_figure_written_as_rgb_png(fitted, tmp_path):
    """The PNG decodes (Pillow) at the figure's size in pixels, without an alpha channel."""
    from PIL import Image

    from noisecal.export.plot import allan_figure

    path = tmp_path / "a.png"
    allan_figure(fitted.models, fitted.dense, fitted.hadamard, path, "title")
    with Image.open(path) as im:
        im.load()
        assert im.mode == "RGB"
        assert im.size == (round(5.8 * 2 * 110), round((6.0 + 1.1) * 110))
        assert np.asarray(im).std() > 10  # something drawn
    assert not list(tmp_path.glob(".*"))


def test_png_decodes_to_the_drawn_pixels():
    """Reference library: Pillow's PNG decoder reads the written file back to exactly
    the canvas's RGB pixels, at the figure's dpi (PNG, ISO/IEC 15948)."""
    import io

    from PIL import Image

    from noisecal.export.plot import _figure, _write_png

    fig = _figure(3.0, 2.0, dpi=90)
    ax = fig.subplots()
    ax.fill_between([1, 2, 3], [1, 2, 1], [2, 3, 3], color="0.8")
    ax.plot([1, 3], [3, 1], color="#d62728")
    ax.set_title("τ 10⁻³")
    buf = io.BytesIO()
    _write_png(fig, buf, level=6)
    with Image.open(io.BytesIO(buf.getvalue())) as im:
        im.load()
        assert im.mode == "RGB" and im.size == (270, 180)
        assert im.info["dpi"] == pytest.approx((90.0, 90.0), abs=0.01)
        np.testing.assert_array_equal(np.asarray(im),
                                      np.asarray(fig.canvas.buffer_rgba())[:, :, :3])

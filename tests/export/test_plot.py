"""The Allan figure: what it must show, its ticks and labels, the PNG it writes, and that
drawing it loads no matplotlib."""

from __future__ import annotations

import subprocess
import sys
from dataclasses import replace

import numpy as np
import pytest

ORANGE, LEFT_OUT, RED = (255, 127, 14), (253, 233, 201), (192, 0, 0)
TERMS = ("quantization", "white_noise", "bias_instability", "bias_random_walk", "rate_ramp")
TERM_RGB = {"quantization": (140, 86, 75), "white_noise": (31, 119, 180),
            "bias_instability": (44, 160, 44), "bias_random_walk": (214, 39, 40),
            "rate_ramp": (148, 103, 189)}


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


def _pixels(models, dense, hadamard, title="title"):
    from noisecal.export.plot import allan_canvas

    canvas = allan_canvas(models, dense, hadamard, title)
    texts = canvas.texts()
    return canvas.pixels().astype(int), texts


def _near(rgb, color, tol=10):
    return (np.abs(rgb - np.array(color)) <= tol).all(axis=2)


def _frames(rgb, least=200):
    """Panel frames found in the image: black horizontal runs of at least ``least``
    px, grouped by their columns; a frame is a pair of such edges (top, bottom).
    Returns (left, top, right, bottom) boxes of the data areas, row by row."""
    dark = (rgb < 40).all(axis=2)
    edges: dict = {}
    for y in range(dark.shape[0]):
        row = np.concatenate(([0], dark[y].astype(np.int8), [0]))
        change = np.flatnonzero(np.diff(row))
        for x0, x1 in zip(change[::2], change[1::2]):
            if x1 - x0 >= least:
                edges.setdefault((x0, x1), []).append(y)
    boxes = []
    for (x0, x1), ys in edges.items():
        # One-pixel edges, one frame above the other: top, bottom, top, bottom...
        for top, bottom in zip(ys[::2], ys[1::2]):
            boxes.append((x0 + 1, top + 1, x1 - 1, bottom))
    return sorted(boxes, key=lambda b: (b[1], b[0]))


def _limits(dense):
    """The plot's rule for a panel's limits: the dense curve's taus, its band's
    extremes a factor 3 out."""
    return ((dense.taus[0], dense.taus[-1]),
            (np.nanmin(dense.lower) / 3.0, np.nanmax(dense.upper) * 3.0))


def _to_px(box, xlim, ylim, x, y):
    """Log mapping (common practice, no source)."""
    left, top, right, bottom = box
    fx = (np.log10(x) - np.log10(xlim[0])) / (np.log10(xlim[1]) - np.log10(xlim[0]))
    fy = (np.log10(y) - np.log10(ylim[0])) / (np.log10(ylim[1]) - np.log10(ylim[0]))
    return left + fx * (right - left), bottom - fy * (bottom - top)


def test_tick_positions_and_labels_are_matplotlibs():
    """Reference library: for the same limits, the decade ticks are those of
    matplotlib's LogLocator (every other decade beyond nine, as its default of
    nine ticks gives), the 1-2-5 ticks of a view shorter than a decade those of
    LogLocator(subs=(1, 2, 5)), and each plain-text label (10⁻³) carries the
    exponent LogFormatterSciNotation writes in mathtext."""
    from matplotlib.ticker import LogFormatterSciNotation, LogLocator

    from noisecal.export.plot import _decade, _ticks

    sup = str.maketrans("⁻⁰¹²³⁴⁵⁶⁷⁸⁹", "-0123456789")
    fmt = LogFormatterSciNotation()
    for x, y in (((2.5e-3, 1.8e3), (2.9e-6, 2.6e-3)), ((0.05, 3.4e3), (4.4e-6, 3.3e-4)),
                 ((1e-3, 2e8), (1e-12, 1e-1)), ((0.01, 5.0), (1.5e-5, 8.8e-5))):
        xmajor, ymajor, yminor = _ticks(x, y)
        for values, (lo, hi) in ((xmajor, x), (ymajor, y)):
            if hi / lo > 10:
                ref = [v for v in LogLocator(10.0, numticks=9).tick_values(lo, hi)
                       if lo <= v <= hi]
                np.testing.assert_allclose(values, ref, rtol=1e-12)
                for v in values:
                    label = _decade(v)
                    exponent = fmt(v).split("^{")[1].split("}")[0]
                    assert label.startswith("10") and label[2:].translate(sup) == exponent
        if y[1] / y[0] < 10:
            ref = [v for v in LogLocator(10.0, subs=(1.0, 2.0, 5.0)).tick_values(*y)
                   if y[0] <= v <= y[1]]
            np.testing.assert_allclose(ymajor, ref, rtol=1e-12)
            assert yminor.shape[0] == 0
            assert _decade(ymajor[0]) == "2×10⁻⁵"
        else:
            ref = [v for v in LogLocator(10.0, subs=(2.0, 5.0)).tick_values(*y)
                   if y[0] <= v <= y[1]]
            np.testing.assert_allclose(yminor, ref, rtol=1e-12)


def test_figure_written_as_rgb_png(fitted, tmp_path):
    """The PNG decodes (Pillow) at the figure's size in pixels (5.8 in a column,
    6.0 in a row + 1.1 in, 110 dpi), RGB, with its dpi; the write leaves no
    temporary file."""
    from PIL import Image

    from noisecal.export.plot import allan_figure

    path = tmp_path / "a.png"
    allan_figure(fitted.models, fitted.dense, fitted.hadamard, path, "title")
    with Image.open(path) as im:
        im.load()
        assert im.mode == "RGB"
        assert im.size == (round(5.8 * 2 * 110), round((6.0 + 1.1) * 110))
        assert im.info["dpi"] == pytest.approx((110.0, 110.0), abs=0.01)
        assert np.asarray(im).std() > 10  # something drawn
    assert [p.name for p in tmp_path.iterdir()] == ["a.png"]


def test_one_framed_panel_per_channel(fitted):
    """Five channels make five panels, three a row: five frames found in the pixels,
    at three columns and two rows (common practice, no source)."""
    models = [replace(fitted.models[i % 2], channel=f"ch{i}") for i in range(5)]
    dense = [fitted.dense[i % 2] for i in range(5)]
    had = [fitted.hadamard[i % 2] for i in range(5)]
    rgb, texts = _pixels(models, dense, had)
    boxes = _frames(rgb)
    assert len(boxes) == 5
    assert len({b[0] for b in boxes}) == 3 and len({b[1] for b in boxes}) == 2
    assert rgb.shape[:2] == (round((6.0 * 2 + 1.1) * 110), round(5.8 * 3 * 110))
    assert [t for t, _ in texts if t.startswith("ch")] == [f"ch{i}" for i in range(5)]


def _three_terms(model):
    """The fitted channel with a bias instability and a random walk added, resolved,
    so that three terms show apart from the total (the simulated data resolve only
    white noise, whose line the total covers)."""
    from noisecal.types import Estimate

    n = model.terms["white_noise"].value
    b, k = 3.7e-4, 1.1e-4  # B flat at 3e-4 rad/s, K 4e-4 rad/s at 40 s
    terms = dict(model.terms)
    terms["bias_instability"] = Estimate(b, 0.9 * b, 1.1 * b, "rad/s", "test")
    terms["bias_random_walk"] = Estimate(k, 0.9 * k, 1.1 * k, "rad/s*Hz^0.5", "test")
    return replace(model, terms=terms, coefficients=np.array([0.0, n * n, b * b, k * k, 0.0]))


def test_panel_shows_terms_model_and_points(fitted):
    """Inside the panel: the total model's orange; each resolved term's colour (a
    dashed line); an unresolved term's full colour absent (it is dotted and faint);
    filled dots at the fitted points and hollow ones at points left out, with the
    left-out span's colour; the red warning only for a failed model check; the
    term values by letter under the panel (IEEE Std 952 symbols Q, N, B, K, R)."""
    res = fitted
    model, dense, had = _three_terms(res.models[0]), res.dense[0], res.hadamard[0]
    assert model.check.consistent
    rgb, texts = _pixels([model], [dense], [had])
    (box,) = _frames(rgb)
    left, top, right, bottom = box
    inside = rgb[top:bottom, left:right]
    assert _near(inside, ORANGE, 6).sum() > 100
    for name in TERMS:
        est = model.terms[name]
        count = _near(inside, TERM_RGB[name], 6).sum()
        assert count > 30 if est.resolved else count == 0, (name, est.resolved, count)
    # The check is worth something only with both kinds of term in the panel.
    assert {model.terms[n].resolved for n in TERMS} == {True, False}
    assert _near(rgb, LEFT_OUT, 3).sum() == 0
    assert _near(rgb, RED, 12).sum() == 0
    assert not any("NOT consistent" in t for t, _ in texts)
    (block,) = [t for t, _ in texts if t.startswith("Q: ")]
    lines = block.split("\n")
    assert [line.split(":")[0] for line in lines] == ["Q", "N", "B", "K", "R"]
    for line, name in zip(lines, TERMS):
        est = model.terms[name]
        assert (f"{est.value:.3g} [{est.lower:.3g}, {est.upper:.3g}]" if est.resolved
                else f"< {est.upper:.3g}") in line and line.endswith(est.unit)

    # The same channel with its first three points left out and a failed check.
    used = np.ones(model.curve.taus.shape[0], dtype=bool)
    used[:3] = False
    failed = replace(model, fit=replace(model.fit, used=used),
                     check=replace(model.check, consistent=False,
                                   cause="points below the model at short taus"))
    rgb2, texts2 = _pixels([failed], [dense], [had])
    inside2 = rgb2[top:bottom, left:right]
    shade = np.argwhere(_near(inside2, LEFT_OUT, 3))
    assert shade.shape[0] > 500
    xlim, ylim = _limits(dense)
    start, _ = _to_px(box, xlim, ylim, model.curve.taus[3], 1.0)
    assert shade[:, 1].max() + left < start  # the span ends before the first fitted tau
    assert _near(rgb2, RED, 12).sum() > 5
    assert any(t.startswith("model check: NOT consistent") and c == RED for t, c in texts2)
    assert any(t.startswith("left out of the fit:\nsensor's low-pass") for t, _ in texts2)
    # Centre pixel of each marker: white in a hollow one; in a filled one black (or
    # the orange model drawn over it), never white.
    px, py = _to_px(box, xlim, ylim, model.curve.taus, model.curve.dev)
    checked = 0
    for i in range(3):
        y, x = int(py[i]), int(px[i])
        if left + 3 <= x < right - 3 and top + 3 <= y < bottom - 3:
            assert rgb2[y, x].min() > 180, (i, rgb2[y, x])
            assert rgb[y, x].min() < 60, (i, rgb[y, x])
            checked += 1
    assert checked >= 2


def test_legend_names_every_style_and_term_symbol(fitted):
    """One legend for the figure names each line style and the five terms with their
    IEEE Std 952 symbols (Q, N, B, K, R), once per figure whatever the panel count."""
    models = [replace(fitted.models[0], channel=f"c{i}") for i in range(3)]
    _, texts = _pixels(models, [fitted.dense[0]] * 3, [fitted.hadamard[0]] * 3)
    said = [t for t, _ in texts]
    for label in ("quantization Q", "white noise N", "bias instability B",
                  "bias random walk K", "rate ramp R", "95 % interval", "overlapping ADEV",
                  "fitted model", "points left out of the fit"):
        assert said.count(label) == 1, label


def test_html_panel_is_one_panel_png(fitted):
    """The report's one-channel figure: one framed panel, PNG at 6.4 × 8.4 in and
    110 dpi (common practice, no source)."""
    import io

    from PIL import Image

    from noisecal.export.html.figures import allan_panel

    png = allan_panel(fitted.models[1], fitted.dense[1], fitted.hadamard[1])
    with Image.open(io.BytesIO(png)) as im:
        im.load()
        assert im.size == (round(6.4 * 110), round(8.4 * 110))
        assert len(_frames(np.asarray(im).astype(int))) == 1


def test_static_job_draws_without_matplotlib(tmp_path):
    """The static job writes its Allan figure and its HTML report (one panel a
    channel) without importing matplotlib, which cost 0.2 s of a fresh process
    before it drew anything: common practice, no source."""
    from tests.conftest import rate_csv

    rng = np.random.default_rng(8)
    csv = rate_csv(tmp_path / "rec.csv", 1e-3 * rng.standard_normal(8192), 0.01)
    out, png, html = (tmp_path / n for n in ("s.yaml", "s.png", "s.html"))
    code = ("import sys\n"
            "from noisecal.jobs.static import run_static\n"
            f"run_static({str(csv)!r}, {str(out)!r}, {str(png)!r}, reps=20, quiet=True, "
            f"report={str(html)!r})\n"
            "print(' '.join(k for k in ('matplotlib', 'matplotlib.pyplot') if k in sys.modules))")
    run = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert run.returncode == 0, run.stderr
    assert run.stdout.strip() == ""
    assert png.stat().st_size > 10_000 and "data:image/png;base64," in html.read_text()

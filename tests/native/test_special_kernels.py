"""The C special functions (noisecal/_native/special.c) against the numpy code of
noisecal.analysis.special they stand in for, and against scipy.special
(independent reference library: Cephes / Boost implementations).

Against the numpy code the agreement is to rounding: ndtr and ndtri are
identical; P, Q and I_x are within 1e-14 · max(1, |ln v|) relative (v the value:
in the tails both sides take exp of a log-prefactor of size |ln v|, and libm's
exp, log and lgamma are not bit-identical to numpy's and Python's math.lgamma,
so one unit in the last place of the prefactor is |ln v| · 1.1e-16 of the
value). The inverses are within 1e-14 · max(1, |ln t|) / min(a, 1) (t the
smaller tail probability): d ln P / d ln x ≈ a for small a, so the rounding of
ln P is divided by a in x. Roots below 1e-300 (subnormal) are left out, as in
tests/analysis/test_special.py, whose grids these are.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import special as ref

from noisecal import _native
from noisecal.analysis import special

from ..analysis.test_special import _rel
from . import requires_native

pytestmark = requires_native

TOL = 1e-14
SHAPES = np.geomspace(1e-3, 1e5, 33)
PROBS = np.concatenate([[1e-300, 1e-200, 1e-100], np.geomspace(1e-50, 0.5, 30),
                        1.0 - np.geomspace(1e-15, 0.5, 15)])
BETA_X = np.concatenate([np.geomspace(1e-12, 0.5, 40), 1 - np.geomspace(1e-12, 0.5, 40),
                         np.linspace(0.01, 0.99, 99)])


def _c():
    from noisecal._native import special_calls

    return special_calls


def _numpy(monkeypatch, name, *args):
    """special.<name> on its numpy path (NOISECAL_NATIVE=0)."""
    monkeypatch.setenv("NOISECAL_NATIVE", "0")
    try:
        assert not _native.enabled()
        return getattr(special, name)(*args)
    finally:
        monkeypatch.setenv("NOISECAL_NATIVE", "1")


def _log_scale(v):
    with np.errstate(divide="ignore"):
        return np.maximum(1.0, np.abs(np.log(np.asarray(v, float))))


def test_normal_identical_to_numpy(monkeypatch):
    """Φ on ±40 with infinities, NaN and signed zeros, Φ⁻¹ on (0, 1) down to 1e-300
    and outside [0, 1]: the same doubles as the numpy code (erf/erfc and AS 241's
    rational functions evaluated in the same order)."""
    x = np.concatenate([np.linspace(-40, 40, 4001), [-np.inf, np.inf, np.nan, 0.0, -0.0]])
    np.testing.assert_array_equal(_c().ndtr(x), _numpy(monkeypatch, "ndtr", x))
    p = np.concatenate([np.geomspace(1e-300, 0.5, 400), 1 - np.geomspace(1.1e-16, 0.5, 200),
                        np.linspace(0, 1, 201), [-0.1, 1.1, np.nan]])
    np.testing.assert_array_equal(_c().ndtri(p), _numpy(monkeypatch, "ndtri", p))


def _gamma_points(a):
    x = np.concatenate([ref.gammaincinv(a, PROBS[PROBS < 1]), ref.gammainccinv(a, PROBS),
                        np.geomspace(1e-10, 1e8, 60), [a, a * (1 + 1e-9)]])
    return x[np.isfinite(x) & (x > 0)]


@pytest.mark.parametrize("name", ["gammainc", "gammaincc"])
def test_incomplete_gamma_equals_numpy(monkeypatch, name):
    """P and Q on tests/analysis/test_special.py's grid (a from 1e-3 to 1e5, x across
    both tails and 1e-10 to 1e8) and at a = 1e6, 1e7: within 1e-14 · max(1, |ln v|)
    of the numpy code, both series, the continued fraction and Temme's expansion."""
    for a in np.concatenate([SHAPES, [1e6, 1e7]]):
        x = _gamma_points(a) if a <= 1e5 else a * np.linspace(0.9, 1.1, 41)
        want = _numpy(monkeypatch, name, a, x)
        got = getattr(_c(), name)(a, x)
        assert (np.isnan(got) == np.isnan(want)).all()
        assert (_rel(got, want) / _log_scale(want)).max() <= TOL, a


@pytest.mark.parametrize("name", ["gammaincinv", "gammainccinv"])
def test_gamma_inverses_equal_numpy(monkeypatch, name):
    """The inverses on test_special.py's grid (a from 1e-3 to 1e5, p from 1e-300 to
    1 − 1e-15) and at 5e5-1e7: within 1e-14 · max(1, |ln t|) / min(a, 1) of the
    numpy code (the same start and the same Halley/Newton steps and stopping rule)."""
    t = np.minimum(PROBS, 1.0 - PROBS)
    for a in np.concatenate([SHAPES, [5e5, 2e6, 1e7]]):
        want = _numpy(monkeypatch, name, a, PROBS)
        got = getattr(_c(), name)(a, PROBS)
        assert (np.isnan(got) == np.isnan(want)).all()
        keep = want > 1e-300
        err = _rel(got, want)[keep] * min(a, 1.0) / _log_scale(t[keep])
        assert err.max() <= TOL, a


def test_betainc_equals_numpy(monkeypatch):
    """I_x(a, b) on test_special.py's grid (a, b from 1 to 1e4, x over (0, 1) to
    1e-12 from either end) and the Harrell–Davis weights (shapes p(n+1), (1−p)(n+1)):
    within 1e-14 · max(1, |ln v|) of the numpy code. (With a shape below 1, where
    the value is 1 − part with part near 1, the difference grows by part / (1 −
    part); no such shapes reach the Harrell–Davis weights.)"""
    grid = np.geomspace(1.0, 1e4, 13)
    a, b, x = np.meshgrid(grid, grid, BETA_X, indexing="ij")
    want = _numpy(monkeypatch, "betainc", a, b, x)
    got = _c().betainc(a, b, x)
    assert got.shape == want.shape == a.shape
    assert (_rel(got, want) / _log_scale(want)).max() <= TOL
    for n in (200, 600):
        edges = np.arange(n + 1) / n
        for p in (0.025, 0.5, 0.975):
            args = (p * (n + 1), (1 - p) * (n + 1), edges)
            want = _numpy(monkeypatch, "betainc", *args)
            assert (_rel(_c().betainc(*args), want) / _log_scale(want)).max() <= TOL


def test_edges_and_shapes_as_numpy_and_scipy(monkeypatch):
    """NaN, infinities, zeros, out-of-domain arguments, scalars and broadcasting:
    the same values and shapes as the numpy code and as scipy.special (its
    documented conventions), and a numpy scalar for scalar arguments."""
    a = np.array([0.0, 0.5, 1.0, 2.0, np.inf, np.nan, -1.0])[:, None]
    x = np.array([0.0, 0.5, 3.0, np.inf, np.nan, -1.0])[None, :]
    for name in ("gammainc", "gammaincc"):
        got = getattr(_c(), name)(a, x)
        assert got.shape == (7, 6)
        np.testing.assert_allclose(got, _numpy(monkeypatch, name, a, x), rtol=TOL,
                                   atol=0.0, equal_nan=True)
        np.testing.assert_allclose(got, getattr(ref, name)(a, x), rtol=1e-12, atol=0.0,
                                   equal_nan=True)
    p = np.array([0.0, 1.0, -0.5, 1.5, np.nan, 0.3])[None, :]
    for name in ("gammaincinv", "gammainccinv"):
        got = getattr(_c(), name)(a, p)
        assert got.shape == (7, 6)
        np.testing.assert_allclose(got, _numpy(monkeypatch, name, a, p), rtol=TOL,
                                   atol=0.0, equal_nan=True)
        np.testing.assert_array_equal(got[3, :5], getattr(ref, name)(2.0, p[0, :5]))
    bx = np.array([0.0, 0.3, 1.0, -0.1, 1.1, np.nan])
    for ab in ((0.0, 2.0), (2.0, 0.0), (2.0, 3.0), (np.inf, 2.0), (2.0, np.inf), (0.0, 0.0),
               (np.inf, np.inf), (np.nan, 1.0), (-1.0, 2.0)):
        got = _c().betainc(*ab, bx)
        np.testing.assert_allclose(got, _numpy(monkeypatch, "betainc", *ab, bx), rtol=TOL,
                                   equal_nan=True)
        np.testing.assert_allclose(got, ref.betainc(*ab, bx), rtol=1e-14, equal_nan=True)
    for name, args in (("ndtr", (0.3,)), ("ndtri", (0.3,)), ("gammainc", (2.0, 1.0)),
                       ("gammaincc", (2.0, 1.0)), ("gammaincinv", (2.0, 0.3)),
                       ("gammainccinv", (2.0, 0.3)), ("betainc", (2.0, 3.0, 0.3))):
        got = getattr(_c(), name)(*args)
        assert isinstance(got, np.float64) and np.ndim(got) == 0
        assert abs(got / getattr(ref, name)(*args) - 1) <= 1e-12
    assert _c().gammaincinv(np.array([[1.0], [10.0]]), np.array([0.1, 0.5, 0.9])).shape \
        == (2, 3)
    assert _c().ndtr(np.zeros((0, 3))).shape == (0, 3)


def test_against_scipy():
    """The C functions alone against scipy.special on test_special.py's grids, 1e-12
    relative (where the value is above 1e-30 for P and Q, 1e-100 for I_x, and
    roots above 1e-300, as there)."""
    x = np.linspace(-37.5, 37.5, 2001)
    assert _rel(_c().ndtr(x), ref.ndtr(x)).max() <= 1e-12
    p = np.geomspace(1e-300, 1 - 1e-16, 500)
    assert _rel(_c().ndtri(p), ref.ndtri(p)).max() <= 1e-12
    for a in SHAPES[::4]:
        xs = _gamma_points(a)
        for name in ("gammainc", "gammaincc"):
            want = getattr(ref, name)(a, xs)
            keep = want > 1e-30
            assert _rel(getattr(_c(), name)(a, xs)[keep], want[keep]).max() <= 1e-12
        for name in ("gammaincinv", "gammainccinv"):
            want = getattr(ref, name)(a, PROBS)
            keep = want > 1e-300
            assert _rel(getattr(_c(), name)(a, PROBS)[keep], want[keep]).max() <= 1e-12
    for a in np.geomspace(1.0, 1e4, 5):
        for b in np.geomspace(1.0, 1e4, 5):
            want = ref.betainc(a, b, BETA_X)
            keep = want > 1e-100
            assert _rel(_c().betainc(a, b, BETA_X)[keep], want[keep]).max() <= 1e-12


def test_call_sites_dispatch_to_c(monkeypatch):
    """special.py's public functions run the C code when it is loaded (the same
    doubles as special_calls) and the numpy code under NOISECAL_NATIVE=0."""
    a, p = np.geomspace(0.5, 5e3, 7), np.linspace(0.01, 0.99, 7)
    np.testing.assert_array_equal(special.gammaincinv(a, p), _c().gammaincinv(a, p))
    np.testing.assert_array_equal(special.betainc(a, a[::-1], p), _c().betainc(a, a[::-1], p))
    monkeypatch.setenv("NOISECAL_NATIVE", "0")
    called = []
    monkeypatch.setattr(special, "special_calls", None)  # any C call would raise
    called.append(special.gammaincinv(a, p))
    assert np.isfinite(called[0]).all()

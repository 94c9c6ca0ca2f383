"""noisecal.analysis.special against scipy.special and, where scipy.special itself
loses digits (huge shape parameters, far tails), against mpmath at 30 digits."""

from __future__ import annotations

import mpmath as mp
import numpy as np
import pytest
from scipy import ndimage
from scipy import special as ref

from noisecal.analysis import special
from noisecal.analysis.psd import _smooth

TOL = 1e-12


def _rel(got, want):
    got, want = np.broadcast_arrays(np.asarray(got, float), np.asarray(want, float))
    same = (got == want) | (np.isnan(got) & np.isnan(want))
    with np.errstate(divide="ignore", invalid="ignore"):
        err = np.abs(got - want) / np.abs(want)
    return np.where(same, 0.0, err)


def _mp_p(a, x):
    """P(a, x) = x^a e^-x / Γ(a+1) · 1F1(1; a+1; x) (DLMF 8.5.1, 13.6.5) in mpmath."""
    a, x = mp.mpf(a), mp.mpf(x)
    return mp.exp(a * mp.log(x) - x - mp.loggamma(a + 1)) * mp.hyp1f1(1, a + 1, x,
                                                                      maxterms=10 ** 6)


def _mp_q(a, x):
    return mp.gammainc(mp.mpf(a), mp.mpf(x), mp.inf, regularized=True)


SHAPES = np.geomspace(1e-3, 1e5, 33)
PROBS = np.concatenate([[1e-300, 1e-200, 1e-100], np.geomspace(1e-50, 0.5, 30),
                        1.0 - np.geomspace(1e-15, 0.5, 15)])


def test_ndtr_matches_scipy():
    """Φ(x) on ±37.5 (tails to 5e-308) against scipy.special.ndtr, 1e-12 relative.
    Further out scipy returns 0 where ours returns the subnormal value."""
    x = np.concatenate([np.linspace(-37.5, 37.5, 2001), [-np.inf, np.inf, np.nan, 0.0, -0.0]])
    assert _rel(special.ndtr(x), ref.ndtr(x)).max() <= TOL
    assert 0.0 <= special.ndtr(-38.5) < 2.3e-308


def test_ndtri_matches_scipy():
    """Φ⁻¹(p) for p from 1e-300 to 1 − 1e-16 and outside [0, 1] against
    scipy.special.ndtri, 1e-12 relative (AS 241's coefficients as published by
    Wichura, Applied Statistics 37(3), 1988)."""
    p = np.concatenate([np.geomspace(1e-300, 0.5, 400), 1 - np.geomspace(1.1e-16, 0.5, 200),
                        np.linspace(0, 1, 201), [-0.1, 1.1, np.nan]])
    assert _rel(special.ndtri(p), ref.ndtri(p)).max() <= TOL
    # Φ(Φ⁻¹(p)) = p: the pair is consistent (DLMF 7.17).
    mid = np.linspace(0.001, 0.999, 99)
    assert np.abs(special.ndtr(special.ndtri(mid)) - mid).max() < 1e-15


@pytest.mark.parametrize("a", SHAPES)
def test_gammainc_and_complement_match_scipy(a):
    """P(a, x) and Q(a, x) against scipy.special.gammainc/gammaincc at x spanning
    both tails down to 1e-300 and x from 1e-10 to 1e8: 1e-12 relative wherever
    the value is above 1e-30. Below (far tails, a > 500) scipy.special's own
    error grows to a few 1e-12 (test_far_tails_and_huge_shapes_against_mpmath
    checks ours there); such probabilities never reach an interval."""
    x = np.concatenate([ref.gammaincinv(a, PROBS[PROBS < 1]), ref.gammainccinv(a, PROBS),
                        np.geomspace(1e-10, 1e8, 60), [a, a * (1 + 1e-9)]])
    x = x[np.isfinite(x) & (x > 0)]
    for ours, theirs in ((special.gammainc, ref.gammainc), (special.gammaincc, ref.gammaincc)):
        want = theirs(a, x)
        keep = want > 1e-30
        assert _rel(ours(a, x)[keep], want[keep]).max() <= TOL


@pytest.mark.parametrize("a", SHAPES)
def test_gamma_inverses_match_scipy(a):
    """gammaincinv(a, p) and gammainccinv(a, q) for p, q from 1e-300 to 1 − 1e-15
    against scipy.special, 1e-12 relative (both stay within a few 1e-13 of each
    other even at a = 1e-3, where x is as small as 1e-300)."""
    for ours, theirs in ((special.gammaincinv, ref.gammaincinv),
                         (special.gammainccinv, ref.gammainccinv)):
        want = theirs(a, PROBS)
        keep = want > 1e-300  # scipy's subnormal roots carry few digits
        assert _rel(ours(a, PROBS)[keep], want[keep]).max() <= TOL


@pytest.mark.parametrize("a, x", [
    (1e3, 562.9675830749806),       # P ≈ 5.5e-62: scipy.special is 1.2e-12 off here
    (3e5, 297519.9298936307),       # P ≈ 2.8e-6: scipy.special is 4.5e-11 off
    (3162.2776601683795, 1757.5419274630929),   # P ≈ 4e-199
    (1e6, 993491.6684107973),       # P ≈ 3.5e-11: scipy.special is 2e-7 off
    (1e7, 9982293.35254023),        # P ≈ 1.1e-8: scipy.special is 2 % off
    (1e7, 1e7 - 100.0), (1e7, 1e7 + 3e4), (5e6, 5e6 - 3e4),
])
def test_far_tails_and_huge_shapes_against_mpmath(a, x):
    """Where scipy.special loses digits (a above ~2e5 in the lower tail, far
    tails of a > 500), P and Q against mpmath (30 digits; P from the Kummer
    series, DLMF 8.5.1): 1e-12 relative. Chi-square tests with 1e7 degrees of
    freedom do occur (short taus of long records)."""
    mp.mp.dps = 30
    p, q = _mp_p(a, x), _mp_q(a, x)
    for ours, want in ((special.gammainc(a, x), p), (special.gammaincc(a, x), q)):
        if want > 1e-300:
            assert abs(mp.mpf(float(ours)) / want - 1) <= TOL


@pytest.mark.parametrize("a", [5e5, 2e6, 1e7])
@pytest.mark.parametrize("p", [1e-300, 2.3e-11, 0.025, 0.5, 0.975])
def test_inverse_for_huge_shapes_against_mpmath(a, p):
    """gammaincinv and gammainccinv at 1e6-2e7 degrees of freedom: P (or Q)
    computed by mpmath at the returned x equals p to the precision x itself
    carries (a relative error of 4e-16 in x moves P by 4e-16·x·P')."""
    mp.mp.dps = 30
    x = float(special.gammaincinv(a, p))
    lo = _mp_p(a, x) if p <= 0.5 else 1 - _mp_q(a, x)
    density = mp.exp((a - 1) * mp.log(x) - x - mp.loggamma(a))
    slack = 4e-16 * x * density / p + 1e-14
    assert abs(lo / p - 1) <= slack
    xc = float(special.gammainccinv(a, p))
    up = _mp_q(a, xc) if p <= 0.5 else 1 - _mp_p(a, xc)
    density = mp.exp((a - 1) * mp.log(xc) - xc - mp.loggamma(a))
    assert abs(up / p - 1) <= 4e-16 * xc * density / p + 1e-14


def test_edges_scalars_and_broadcasting_as_scipy():
    """NaN, infinities, zeros, out-of-domain arguments, scalar and broadcast shapes
    give what scipy.special gives (its documented conventions)."""
    a = np.array([0.0, 0.5, 1.0, 2.0, np.inf, np.nan, -1.0])[:, None]
    x = np.array([0.0, 0.5, 3.0, np.inf, np.nan, -1.0])[None, :]
    for name in ("gammainc", "gammaincc"):
        got, want = getattr(special, name)(a, x), getattr(ref, name)(a, x)
        assert got.shape == want.shape == (7, 6)
        np.testing.assert_allclose(got, want, rtol=TOL, atol=0.0, equal_nan=True)
    p = np.array([0.0, 1.0, -0.5, 1.5, np.nan])
    for name in ("gammaincinv", "gammainccinv"):
        np.testing.assert_array_equal(getattr(special, name)(2.0, p),
                                      getattr(ref, name)(2.0, p))
    bx = np.array([0.0, 0.3, 1.0, -0.1, 1.1, np.nan])
    for ab in ((0.0, 2.0), (2.0, 0.0), (2.0, 3.0), (np.inf, 2.0), (2.0, np.inf), (0.0, 0.0)):
        np.testing.assert_allclose(special.betainc(*ab, bx), ref.betainc(*ab, bx),
                                   rtol=1e-14, equal_nan=True)
    for name, args in (("ndtr", (0.3,)), ("ndtri", (0.3,)), ("gammainc", (2.0, 1.0)),
                       ("gammaincinv", (2.0, 0.3)), ("betainc", (2.0, 3.0, 0.3))):
        got = getattr(special, name)(*args)
        assert np.ndim(got) == 0 and abs(got / getattr(ref, name)(*args) - 1) <= TOL
    shape = special.gammaincinv(np.array([[1.0], [10.0]]), np.array([0.1, 0.5, 0.9]))
    assert shape.shape == (2, 3)


@pytest.mark.parametrize("a", np.geomspace(1.0, 1e4, 13))
def test_betainc_matches_scipy(a):
    """I_x(a, b) for a, b from 1 to 1e4 and x over (0, 1), both ends to 1e-12,
    against scipy.special.betainc: 1e-12 relative where the value is above 1e-100.
    (Shapes below 1 with x within 1e-6 of 1 differ by up to 4e-11, where mpmath
    sides with ours at (½, ½, 1 − 1e-12); far
    tails below 1e-100 differ from scipy's by up to 1e-6 where mpmath sides with
    ours: neither occurs in Harrell–Davis weights, whose shapes are p(n+1),
    (1−p)(n+1).)"""
    x = np.concatenate([np.geomspace(1e-12, 0.5, 40), 1 - np.geomspace(1e-12, 0.5, 40),
                        np.linspace(0.01, 0.99, 99)])
    for b in np.geomspace(1.0, 1e4, 13):
        want = ref.betainc(a, b, x)
        keep = want > 1e-100
        assert _rel(special.betainc(a, b, x)[keep], want[keep]).max() <= TOL


def test_harrell_davis_weights_match_scipy():
    """The Beta CDF on the grid k/n that Harrell–Davis quantiles use (n = 200 and
    600 replicates, p = 2.5 %, 50 %, 97.5 %): the same as scipy.special.betainc
    to 5e-14 absolute (Harrell & Davis, Biometrika 69(3), 1982). Next to the
    switch x = (a+1)/(a+b+2) the continued fraction takes ~100 steps and gathers
    ~3e-14 of rounding (mpmath sides with scipy there), far below what moves a
    quantile of 200 replicates."""
    for n in (200, 600):
        edges = np.arange(n + 1) / n
        for p in (0.025, 0.5, 0.975):
            got = special.betainc(p * (n + 1), (1 - p) * (n + 1), edges)
            want = ref.betainc(p * (n + 1), (1 - p) * (n + 1), edges)
            assert np.abs(got - want).max() <= 5e-14


@pytest.mark.parametrize("n", [1, 7, 16, 17, 100, 2049])
@pytest.mark.parametrize("half", [8, 16])
def test_running_median_equals_scipy_ndimage(n, half):
    """The PSD smoother (median over ±half bins, edge bins repeated) equals
    scipy.ndimage.median_filter(size=2·half+1, mode="nearest") exactly."""
    psd = np.random.default_rng(n + half).lognormal(size=n)
    np.testing.assert_array_equal(_smooth(psd, half),
                                  ndimage.median_filter(psd, size=2 * half + 1, mode="nearest"))

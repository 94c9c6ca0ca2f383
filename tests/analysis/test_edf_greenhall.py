"""Greenhall–Riley equivalent degrees of freedom (noisecal/analysis/greenhall.py).

Sources: C. A. Greenhall, W. J. Riley, "Uncertainty of stability variances based on
finite differences", Proc. 35th PTTI Meeting (2003) — its Eqs. (7)–(10) and Tables 1–3,
here as transcribed in the allantools 2024.6 source (``allantools.ci``), since the paper
itself was not at hand; allantools 2024.6 ``edf_greenhall`` as the independent reference
implementation; NIST SP 1065 (Riley 2008) Table 5 for the older closed-form EDFs of the
overlapping Allan variance (formulas from memory).
"""

from __future__ import annotations

import math
from decimal import Decimal, getcontext

import allantools
import allantools.ci as atci
import numpy as np
import pytest
from scipy.integrate import quad

from noisecal.analysis import greenhall
from noisecal.analysis.greenhall import edf_greenhall

RUN_LENGTHS = (16, 40, 100, 1000, 10_000, 100_000, 1_000_000, 10_000_000)


def _cases():
    """(alpha, d, m, N, overlapping, modified): m on a log grid from 1 to N/3 for each
    N, and the runs where M/S = d + 1 exactly (the boundary between a coefficient
    table and the m' sum)."""
    for n in RUN_LENGTHS:
        for m in np.unique(np.round(np.geomspace(1, n // 3, 14)).astype(int)):
            for d in (1, 2, 3):
                for a in range(2, -5, -1):
                    if a + 2 * d > 1:
                        for ov in (False, True):
                            for mod in (False, True):
                                yield a, d, int(m), n, ov, mod
    for m in (34, 50, 200, 1000):
        for d in (1, 2, 3):
            for a in range(2, -5, -1):
                if a + 2 * d > 1:
                    yield a, d, m, (2 * d + 1) * m, True, False
                    yield a, d, m, 2 * (d + 1) * m - 1, True, True


def test_equals_allantools_over_the_grid():
    """Reference library: allantools 2024.6 edf_greenhall over alpha 2 … −4, d = 1, 2,
    3, every estimator form, m from 1 to N/3, N from 16 to 1e7: relative difference
    ≤ 1e-10. Exceptions, each tested below: flicker PM unmodified, where allantools'
    own rounding error grows as ~1e-16·m² (tolerance 1e-10 + 1e-15·m²); white PM with
    fewer than d + 1 term lags and random-run FM from its Table 2, which allantools
    does not compute. Where allantools divides by zero or returns a negative EDF (a
    run shorter than one term) ours refuses with ValueError."""
    bad, compared, refused = [], 0, 0
    for a, d, m, n, ov, mod in _cases():
        try:
            with np.errstate(divide="ignore"):
                ref = float(allantools.edf_greenhall(alpha=a, d=d, m=m, N=n,
                                                     overlapping=ov, modified=mod))
        except NotImplementedError:
            assert a == 2 and not mod, (a, d, m, n, ov, mod)
            continue
        except AssertionError:
            assert a == -4 and not mod, (a, d, m, n, ov, mod)
            continue
        except ZeroDivisionError:
            ref = -1.0
        if not ref > 0:
            with pytest.raises(ValueError):
                edf_greenhall(a, d, m, n, ov, mod)
            refused += 1
            continue
        ours = edf_greenhall(a, d, m, n, ov, mod)
        tol = 1e-10 + (1e-15 * m * m if a == 1 and not mod else 0.0)
        compared += 1
        if not abs(ours - ref) <= tol * ref:
            bad.append((a, d, m, n, ov, mod, ours, ref))
    assert not bad, bad[:5]
    assert compared > 5000 and refused > 50


getcontext().prec = 60


def _w_flicker_pm(t: Decimal) -> Decimal:
    t = abs(t)
    return Decimal(0) if t == 0 else t * t * t.ln()


def _sz_flicker_pm(t: Decimal, f: Decimal, d: int) -> Decimal:
    h = 1 / f

    def sx(u):
        return f * f * (2 * _w_flicker_pm(u) - _w_flicker_pm(u - h) - _w_flicker_pm(u + h))

    return sum((-1) ** abs(k) * math.comb(2 * d, d + k) * sx(t + k) for k in range(-d, d + 1))


def _basic_sum_decimal(j_count, m_terms, s, f, d):
    z2 = [_sz_flicker_pm(Decimal(j) / s, f, d) ** 2 for j in range(j_count + 1)]
    return (z2[0] + (1 - Decimal(j_count) / m_terms) * z2[j_count]
            + sum(2 * (1 - Decimal(j) / m_terms) * z2[j] for j in range(1, j_count))), z2[0]


@pytest.mark.parametrize("d", [1, 2, 3])
def test_flicker_pm_at_large_factors_against_sixty_digit_arithmetic(d):
    """Flicker PM, unmodified: Eqs. (7)–(10) of Greenhall & Riley (2003) evaluated in
    60-digit decimal arithmetic, as written: ours agree to 1e-13 up to m = 3.3e6 (the
    direct double-precision form loses ~log10(m²) digits; allantools 2024.6 is off by
    3e-4 at m = 3.3e6). Cases 3a (non-overlapping; overlapping with at most 100 terms)
    and 3c (the m' sum)."""
    for m in (10, 1000, 100_000, 3_333_333):
        n = 3 * m * (d + 1) + 7            # non-overlapping, J = d + 1 ≤ 100
        m_terms = 1 + (n - 1 - m * d) // m
        total, z0 = _basic_sum_decimal(min(m_terms, d + 1), m_terms, 1, Decimal(m), d)
        exact = float(m_terms * z0 / total)
        assert edf_greenhall(1, d, m, n, False, False) == pytest.approx(exact, rel=1e-13)
    m = 100_000
    n = 1 + m * d + 39                     # overlapping, M = 40 terms
    total, z0 = _basic_sum_decimal(40, 40, m, Decimal(m), d)
    assert edf_greenhall(1, d, m, n, True, False) == pytest.approx(
        float(40 * z0 / total), rel=1e-13)
    n = 1 + m * d + 149                    # overlapping, M = 150 > 100, r < d + 1
    r = Decimal(150) / m
    mp = 100 / r
    total, _ = _basic_sum_decimal(100, 100, mp, mp, d)
    b0, b1 = atci.greenhall_table3(1, d)
    norm = (Decimal(str(b0)) + Decimal(str(b1)) * Decimal(m).ln()) ** 2
    assert edf_greenhall(1, d, m, n, True, False) == pytest.approx(
        float(100 * norm / total), rel=1e-13)


def _exact_edf(a_rows: np.ndarray, cov_root: np.ndarray) -> float:
    """(tr C)²/tr(C²) for z = A·L·e, e white: the EDF of Σz² for Gaussian terms
    (E = tr C, Var = 2 tr C²; Satterthwaite's matching of two moments)."""
    b = a_rows @ cov_root
    c = b @ b.T
    return float(np.trace(c) ** 2 / np.sum(c * c))


def _term_matrix(d: int, m: int, n: int, overlapping: bool, modified: bool) -> np.ndarray:
    """Rows: the filter of each term on the n phase points (d-th difference at lag m,
    of the phase averaged over m samples when modified; stride 1 or m)."""
    diff = np.array([(-1) ** (d - k) * math.comb(d, k) for k in range(d + 1)], float)
    width = m if modified else 1
    kernel = np.zeros(m * d + width)
    for k, c in enumerate(diff):
        kernel[k * m:k * m + width] += c / width
    stride = 1 if overlapping else m
    starts = range(0, n - kernel.size + 1, stride)
    rows = np.zeros((len(starts), n))
    for i, s in enumerate(starts):
        rows[i, s:s + kernel.size] = kernel
    return rows


@pytest.mark.parametrize("d", [1, 2, 3])
def test_white_noise_edfs_equal_the_exact_quadratic_form(d):
    """Where the paper's generalised autocovariance is the discrete covariance itself —
    white PM (tau0-averaged white phase, every form) and white FM with F = ∞ (point
    samples of a random walk; unmodified, m(d + 1) > 100) — and the sum of Eq. (10)
    runs over every lag (J ≤ 100), the algorithm is exact: equal to (tr C)²/tr(C²) of
    the terms' covariance built sample by sample (common practice, no source). Includes
    white PM with fewer than d + 1 term lags (case 4, K ≤ d), which allantools 2024.6
    does not compute."""
    checked = 0
    for m, n in ((1, 20), (3, 40), (7, 60), (12, 12 * d + 13), (20, 20 * d + 45),
                 (25, 25 * (d + 1) + 24), (40, 40 * (d + 2) + 1)):
        for ov in (False, True):
            for mod in (False, True):
                if n < m * (d + 1 if mod else d) + 1:
                    continue
                if mod and ov and (d + 1) * m > greenhall.J_MAX and n - m * (d + 1) >= 100:
                    continue  # beyond J_MAX: the table, an approximation
                exact = _exact_edf(_term_matrix(d, m, n, ov, mod), np.eye(n))
                assert edf_greenhall(2, d, m, n, ov, mod) == pytest.approx(exact, rel=1e-9)
                checked += 1
    for m in (110, 250):
        for ov, n in ((False, m * (d + 3) + 5), (True, m * d + 60)):
            walk = np.tril(np.ones((n, n)))
            exact = _exact_edf(_term_matrix(d, m, n, ov, False), walk)
            assert edf_greenhall(0, d, m, n, ov, False) == pytest.approx(exact, rel=1e-9)
            checked += 1
    assert checked >= 25


def _table_integrals(alpha: int, d: int, f: float) -> tuple[float, float]:
    """∫ρ² and ∫|t|ρ² over |t| ≤ d + 1 of the normalised Eq. (9) (F = 1: modified;
    F = ∞: unmodified limit), by quadrature between the integers. Flicker PM with
    F = ∞ is not normalised (Table 3 does that): there sx = −2 ln|t| − 3."""
    p = 3 - alpha

    def sw(t, power, log):
        t = abs(t)
        if log:
            return 0.0 if t == 0 else t ** power * math.log(t)
        return t ** power

    def sx(t):
        if math.isinf(f):
            return sw(t, p - 2, alpha % 2 == 1)
        return 2 * sw(t, p, alpha % 2 == 1) - sw(t - 1, p, alpha % 2 == 1) - sw(
            t + 1, p, alpha % 2 == 1)

    def sz(t):
        return sum((-1) ** abs(k) * math.comb(2 * d, d + k) * sx(t + k)
                   for k in range(-d, d + 1))

    z0 = 0.5 if (alpha == 1 and math.isinf(f)) else sz(0.0)
    i0 = i1 = 0.0
    for lo in range(d + 1):
        i0 += quad(lambda t: (sz(t) / z0) ** 2, lo, lo + 1, limit=200)[0]
        i1 += quad(lambda t: t * (sz(t) / z0) ** 2, lo, lo + 1, limit=200)[0]
    return 2 * i0, 2 * i1


def _half_unit(x: float) -> float:
    """Half a unit in the last of three significant digits (the tables' precision)."""
    return 0.5 * 10 ** (math.floor(math.log10(abs(x))) - 2)


def test_coefficient_tables():
    """Tables 1 and 2 of Greenhall & Riley (2003): equal to allantools 2024.6's
    transcription (greenhall_table1/2), and each (a0, a1) is ∫ρ², ∫|t|ρ² of the
    normalised autocovariance of Eq. (9) over |t| ≤ d + 1 to the table's three
    significant digits (derivation, no published value) — including the alpha = −4
    row of Table 2 that allantools holds but refuses to use. Table 2's white PM row is
    the closed form of case 4 (tested exactly above)."""
    for alpha in range(2, -5, -1):
        for d in (1, 2, 3):
            for table, getter, f in ((greenhall._TABLE1, atci.greenhall_table1, 1.0),
                                     (greenhall._TABLE2, atci.greenhall_table2, math.inf)):
                ours = table[alpha][d - 1]
                if alpha + 2 * d <= 1:
                    assert ours is None
                    continue
                if not (f == math.inf and alpha == -4):
                    assert ours == pytest.approx(getter(alpha, d), rel=1e-12)
                if f == math.inf and alpha == 2:
                    continue
                for coef, value in zip(ours, _table_integrals(alpha, d, f)):
                    assert abs(coef - value) <= _half_unit(coef) * 1.01, (alpha, d, f)
    for d in (1, 2, 3):
        assert greenhall._TABLE3[d - 1] == atci.greenhall_table3(1, d)


def test_table3_is_the_growth_of_sz0():
    """Table 3 of Greenhall & Riley (2003): for flicker PM, unmodified, sz(0, m) =
    b0 + b1·ln m for large m (derivation: Eq. 8 at t = 0 is 2 ln m, at t = k ≠ 0
    −2 ln|k| − 3 + O(m⁻²)); b0 to the table's digits, b1 exact."""
    for d in (1, 2, 3):
        b0, b1 = greenhall._TABLE3[d - 1]
        for m in (1e4, 1e6):
            z0 = float(greenhall._sz(np.array([0.0]), m, 1, d)[0])
            assert abs(z0 - (b0 + b1 * math.log(m))) <= _half_unit(b0) * 1.01
        slope = (float(greenhall._sz(np.array([0.0]), 1e6, 1, d)[0])
                 - float(greenhall._sz(np.array([0.0]), 1e4, 1, d)[0])) / math.log(100)
        assert slope == pytest.approx(b1, rel=1e-8)


@pytest.mark.parametrize("n", [1025, 10_001])
def test_near_the_simple_approximations_of_sp1065(n):
    """NIST SP 1065 (2008) Table 5, closed-form EDFs of the overlapping Allan variance
    for N phase points (formulas from memory): white PM, white FM, flicker FM and
    random-walk FM. They are approximations; the Greenhall–Riley EDF stays within 15 %
    of them for 2 ≤ m ≤ N/16 (and m = 1 for white PM and flicker FM)."""
    simple = {
        2: lambda m: (n + 1) * (n - 2 * m) / (2 * (n - m)),
        0: lambda m: (3 * (n - 1) / (2 * m) - 2 * (n - 2) / n) * 4 * m * m / (4 * m * m + 5),
        -1: lambda m: (2 * (n - 2) ** 2 / (2.3 * n - 4.9) if m == 1
                       else 5 * n * n / (4 * m * (n + 3 * m))),
        -2: lambda m: (n - 2) / m * ((n - 1) ** 2 - 3 * m * (n - 1) + 4 * m * m) / (n - 3) ** 2,
    }
    for alpha, formula in simple.items():
        first = 1 if alpha in (2, -1) else 2
        for m in 2 ** np.arange(0, int(math.log2(n // 16)) + 1):
            if m < first:
                continue
            ratio = edf_greenhall(alpha, 2, int(m), n, True, False) / formula(int(m))
            assert 0.85 <= ratio <= 1.15, (alpha, m, ratio)


def test_refuses_what_the_algorithm_does_not_cover():
    """alpha + 2d ≤ 1 (the variance diverges), d outside 1 … 3, m < 1, and a run
    shorter than one term: ValueError (common practice, no source)."""
    for args in ((-2, 1, 4, 100), (-3, 2, 4, 100), (3, 2, 4, 100), (0, 4, 4, 100),
                 (0, 2, 0, 100), (0, 2, 10, 20), (0, 2, 10, 29)):
        with pytest.raises(ValueError):
            edf_greenhall(*args, overlapping=True, modified=args[3] == 29)
    assert edf_greenhall(0, 2, 10, 21, True, False) == pytest.approx(1.0)

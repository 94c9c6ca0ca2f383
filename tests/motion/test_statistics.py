"""Residual statistics against reference libraries and handbook formulas."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from noisecal.analysis.align import wrap
from noisecal.analysis.residuals import (MAD_TO_SIGMA, acf, effective_size, ljung_box,
                                         min_cov_det, truncation_factor)
from noisecal.fit.measurement import clopper_pearson, variance_interval


def test_mad_constant():
    """MAD → σ for Gaussian data is 1/Φ⁻¹(3/4) = 1.4826 (Rousseeuw & Croux, JASA 88, 1993)."""
    assert MAD_TO_SIGMA == pytest.approx(1 / stats.norm.ppf(0.75), rel=1e-12)
    assert MAD_TO_SIGMA == pytest.approx(1.4826, abs=1e-4)


def test_variance_interval_is_the_chi_square_formula():
    """(n−1)s²/χ²(n−1, 1−α/2) … (n−1)s²/χ²(n−1, α/2) (any statistics handbook;
    quantiles from scipy.stats.chi2)."""
    lo, hi = variance_interval(2.5, 29)
    assert lo == pytest.approx(29 * 2.5 / stats.chi2.ppf(0.975, 29), rel=1e-12)
    assert hi == pytest.approx(29 * 2.5 / stats.chi2.ppf(0.025, 29), rel=1e-12)


def test_acf_and_ljung_box_match_statsmodels():
    """Reference library: statsmodels' acf and acorr_ljungbox on an AR(1) series."""
    from statsmodels.stats.diagnostic import acorr_ljungbox
    from statsmodels.tsa.stattools import acf as sm_acf

    rng = np.random.default_rng(4)
    x = np.zeros(3000)
    for i in range(1, x.size):
        x[i] = 0.3 * x[i - 1] + rng.standard_normal()
    np.testing.assert_allclose(acf(x, 25), sm_acf(x, nlags=25, fft=True), rtol=1e-10,
                               atol=1e-12)
    q, p = ljung_box(x, 12)
    ref = acorr_ljungbox(x, lags=[12])
    assert q == pytest.approx(float(ref["lb_stat"].iloc[0]), rel=1e-9)
    assert p == pytest.approx(float(ref["lb_pvalue"].iloc[0]), rel=1e-6, abs=1e-300)


def test_effective_size_of_ar1():
    """For AR(1) with coefficient φ, n_eff = n(1 − φ)/(1 + φ) (common practice, no source)."""
    rng = np.random.default_rng(5)
    phi, n = 0.6, 200_000
    x = np.zeros(n)
    w = rng.standard_normal(n)
    for i in range(1, n):
        x[i] = phi * x[i - 1] + w[i]
    assert effective_size(x) == pytest.approx(n * (1 - phi) / (1 + phi), rel=0.05)


def test_min_cov_det_matches_scikit_learn():
    """Reference library: scikit-learn's MinCovDet on Gaussian data with 10 % gross
    outliers. Its reweighted covariance is not corrected for the 97.5 % cut; ours
    is, so the comparison applies that factor (chi-square truncation)."""
    from sklearn.covariance import MinCovDet

    rng = np.random.default_rng(6)
    C = np.array([[1.0, 0.5, 0.1], [0.5, 2.0, -0.3], [0.1, -0.3, 0.5]])
    x = rng.multivariate_normal([1.0, -2.0, 0.5], C, 4000)
    bad = rng.random(4000) < 0.1
    x[bad] += rng.normal(0, 10, (bad.sum(), 3))
    ours = min_cov_det(x, seed=1)
    ref = MinCovDet(random_state=0).fit(x)
    np.testing.assert_allclose(ours.location, ref.location_, atol=0.03)
    np.testing.assert_allclose(ours.scatter * truncation_factor(0.975, 3), ref.covariance_,
                               rtol=0.06, atol=0.03)
    np.testing.assert_allclose(ours.scatter, C, rtol=0.1, atol=0.05)


def test_clopper_pearson_matches_statsmodels():
    """Reference library: statsmodels' proportion_confint(method='beta')."""
    from statsmodels.stats.proportion import proportion_confint

    for k, n in ((0, 50), (7, 300), (300, 300)):
        lo, hi = proportion_confint(k, n, alpha=0.05, method="beta")
        assert clopper_pearson(k, n) == pytest.approx((lo, hi), abs=1e-12)


def test_angle_wrap_across_half_turn():
    """Angles 179° and −179° differ by 2°, not 358° (common practice, no source)."""
    d = wrap(np.radians(-179.0) - np.radians(179.0))
    assert np.degrees(d) == pytest.approx(2.0)
    assert np.degrees(wrap(np.radians([180.0, -180.0, 540.0]))) == pytest.approx([-180] * 3)

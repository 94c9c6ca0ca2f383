"""The compiled selection (noisecal.fit.select_kernel) equals the Python path.

NNLS is held to scipy.optimize.nnls (Lawson–Hanson); the replicate selection to
``select_structure`` applied to each replicate, on curves of every shape the
selection meets.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import optimize

import noisecal.fit.ieee952 as F
from noisecal.analysis.allan import allan_curve
from noisecal.fit.select_kernel import nnls
from noisecal.fit.simulate import RateModel, simulate_rate


def nnls_problems(count: int = 300, seed: int = 3):
    """Seeded (M, b) least-squares problems, 6-24 rows, 1-6 columns, every seventh
    with a zero first column."""
    rng = np.random.default_rng(seed)
    for k in range(count):
        rows, cols = rng.integers(6, 25), rng.integers(1, 7)
        M = rng.normal(size=(rows, cols))
        if k % 7 == 0:
            M[:, 0] = 0.0
        yield M, rng.normal(size=rows)


def test_nnls_equals_scipy():
    """Random problems with active constraints and a zero column: the same solution as
    scipy.optimize.nnls to 1e-9."""
    for M, b in nnls_problems():
        cols = M.shape[1]
        x = np.zeros(cols)
        nnls(M, b, x)
        ref, _ = optimize.nnls(M, b)
        np.testing.assert_allclose(x, ref, atol=1e-9 * max(1.0, np.abs(ref).max()))


@pytest.mark.parametrize("c2, low_pass", [
    ([0, 1e-6, 0, 4e-8, 0], 0.0), ([1e-9, 1e-6, 1e-8, 4e-8, 0], 0.0),
    ([0, 1e-6, 1e-7, 0, 0], 0.0), ([0, 1e-6, 0, 4e-8, 1e-10], 0.0),
    ([0, 1e-6, 0, 4e-8, 0], 0.4)])
def test_replicate_selection_equals_select_structure(c2, low_pass):
    """Every replicate chooses the same structure with the same coefficients (1e-9)
    and deviance as select_structure among the chosen structure's neighbours."""
    n, period = 2 ** 15, 0.1
    y = RateModel(np.array(c2), low_pass=low_pass)(period, n, np.random.default_rng(5))
    curve = allan_curve(y, period, "rad/s", "oadev", "octave")
    fit = F.fit_terms(curve, period, [(0, n)], reps=100, seed=2)
    A = F.basis6(curve.taus)[fit.used]
    nu = F.mixture_edf(curve, [(0, n)], fit.selection.c6)[fit.used]
    sims = fit.replicate_avar[:, fit.used]
    near = F.neighbours(fit.selection.cols)
    got, dev = F.select_replicates(A, sims, nu, near)
    for s, c, d in zip(sims, got, dev):
        ref = F.select_structure(A, s, nu, candidates=near).c6
        np.testing.assert_allclose(c, ref, rtol=1e-9, atol=0.0)
        assert d == pytest.approx(F.misfit(A, s, nu, ref), rel=1e-9, abs=1e-9)


def test_weighted_nnls_equals_the_scipy_path():
    """The compiled weighted NNLS against its scipy reference on simulated curves."""
    rng = np.random.default_rng(9)
    taus = 0.1 * 2.0 ** np.arange(14)
    A = F.basis6(taus)[:, :5]
    for _ in range(50):
        avar = A @ np.array([1e-9, 1e-6, 1e-8, 4e-8, 1e-11]) * rng.chisquare(20, 14) / 20
        nu = rng.uniform(3, 1000, 14)
        np.testing.assert_allclose(F.weighted_nnls(A, avar, nu),
                                   F.weighted_nnls_reference(A, avar, nu), rtol=1e-9,
                                   atol=1e-30)

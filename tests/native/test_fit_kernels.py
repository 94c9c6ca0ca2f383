"""The C fit kernels (noisecal/_native/fit.c) against the numba kernels they stand in
for, and against scipy.optimize.nnls (Lawson–Hanson NNLS). The covariance's agreement
with Greenhall's EDF (allantools) is tests/fit/test_avar_cov.py's, which runs on the C
kernels wherever they are built."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import optimize

import noisecal.fit.avar_cov as AC
import noisecal.fit.gauss_markov as GM
import noisecal.fit.ieee952 as F
from noisecal import _native
from noisecal.fit import select_kernel as SK

from ..fit.test_select_kernel import nnls_problems
from . import requires_native

pytestmark = requires_native

PERIOD = 0.01


def _calls():
    from noisecal._native import fit_calls

    return fit_calls


def _sums_args(model: AC.NoiseModel, m, period, lengths):
    """The arguments ``avar_covariance`` gives the pair-sum kernel."""
    m = np.asarray(m, dtype=np.int64)
    runs, mult = AC.run_groups(lengths)
    ramp = np.sqrt(max(model.r2, 0.0)) * (m * period) ** 2
    parts = np.array(model.exponential_parts(period), dtype=np.float64).reshape(-1, 3)
    white = 0.5 * model.n2 if model.n2 > 0 and model.low_pass <= 0 else 0.0
    return (m.astype(np.float64), runs.astype(np.float64), mult.astype(np.float64),
            float(period), white, float(model.k2), float(model.b2), float(model.q2), ramp,
            parts, AC._GL[0], AC._GL[1], float(AC.SHORT), float(AC.FLICKER_EXACT),
            float(AC.FLICKER_REACH), float(AC.OU_REACH))


MODELS = {
    "white": AC.NoiseModel(n2=1e-6),
    "flicker": AC.NoiseModel(b2=1e-7),
    "random walk": AC.NoiseModel(k2=1e-6),
    "quantization": AC.NoiseModel(q2=1e-8),
    "ramp": AC.NoiseModel(n2=1e-6, r2=1e-8),
    "low-pass": AC.NoiseModel(n2=1e-6, low_pass=0.05),
    "gauss-markov": AC.NoiseModel(n2=1e-6, gm=(1e-3, 0.3)),
    "all": AC.NoiseModel(q2=1e-9, n2=1e-6, b2=1e-8, k2=4e-8, r2=1e-10, low_pass=0.03,
                         gm=(5e-4, 2.0)),
}
RUNS = {"short": [300], "long": [2 ** 18], "several": [2 ** 12, 5000, 777, 2 ** 12, 40]}


@pytest.mark.parametrize("runs", list(RUNS))
@pytest.mark.parametrize("name", list(MODELS))
def test_pair_sums_equal_numba(name, runs):
    """Every term alone and all together, one short run, one long, several of different
    lengths: the C pair sums equal the numba kernel's to 1e-13 relative (the same
    pieces and order of operations)."""
    m = 2 ** np.arange(14)
    m = m[2 * m < max(RUNS[runs])]
    args = _sums_args(MODELS[name], m, PERIOD, RUNS[runs])
    got = _calls().sums_kernel(*args, np.zeros((m.shape[0], m.shape[0])))
    ref = AC._sums_kernel(*args, np.zeros((m.shape[0], m.shape[0])))
    assert np.any(ref != 0)
    np.testing.assert_allclose(got, ref, rtol=1e-13, atol=1e-13 * np.abs(ref).max())


def test_avar_covariance_is_the_same_with_the_c_kernels_off(monkeypatch):
    """The call site: NOISECAL_NATIVE=0 switches to the numba kernel, same result."""
    model, m = MODELS["all"], 2 ** np.arange(10)
    got = AC.avar_covariance(model, m, PERIOD, RUNS["several"])
    monkeypatch.setenv("NOISECAL_NATIVE", "0")
    assert not _native.enabled()
    ref = AC.avar_covariance(model, m, PERIOD, RUNS["several"])
    for g, r in zip(got, ref):
        np.testing.assert_allclose(g, r, rtol=1e-12)


def test_nnls_equals_scipy_and_numba():
    """Random problems, some with a zero column: scipy.optimize.nnls (Lawson–Hanson) to
    1e-9, the numba kernel to 1e-13."""
    for M, b in nnls_problems():
        cols = M.shape[1]
        got = _calls().nnls(M, b, np.zeros(cols))
        ref, _ = optimize.nnls(M, b)
        np.testing.assert_allclose(got, ref, atol=1e-9 * max(1.0, np.abs(ref).max()))
        np.testing.assert_allclose(got, SK.nnls(M, b, np.zeros(cols)), rtol=1e-13,
                                   atol=1e-15)


def test_weighted_nnls_equals_scipy_and_numba():
    """Simulated curves of the five terms, or of white noise and the others with the
    band-limit column in place of quantization (the selection never fits the two
    together: both fall as 1/τ²): the weighted NNLS with scipy.optimize.nnls inside
    (``weighted_nnls_reference``) to 1e-9, the numba kernel to 1e-12; the same columns
    left at zero."""
    rng = np.random.default_rng(9)
    taus = 0.1 * 2.0 ** np.arange(14)
    A6 = F.basis6(taus)
    for trial in range(100):
        A = np.ascontiguousarray(A6[:, :5] if trial % 2 else A6[:, 1:])
        c2 = np.array([1e-9, 1e-6, 1e-8, 4e-8, 1e-11] if trial % 2
                      else [1e-6, 1e-8, 4e-8, 1e-11, 1e-8])
        c2 *= rng.uniform(0, 2, c2.shape[0]) * (rng.uniform(size=c2.shape[0]) > 0.3)
        avar = np.abs(A @ c2) * rng.chisquare(20, 14) / 20 + 1e-12
        nu = rng.uniform(3, 1000, 14)
        got = _calls().weighted_nnls(A, avar, nu, 3, np.zeros(A.shape[1]))
        numba = SK.weighted_nnls(A, avar, nu, 3, np.zeros(A.shape[1]))
        ref = F.weighted_nnls_reference(A, avar, nu)
        np.testing.assert_allclose(got, ref, rtol=1e-9, atol=1e-30)
        np.testing.assert_allclose(got, numba, rtol=1e-12, atol=0)
        np.testing.assert_array_equal(got == 0, numba == 0)


def _replicates(c2, low_pass, seed, reps):
    """A fitted curve's basis, EDF and candidate structures, and ``reps`` replicate
    curves drawn from the exact covariance of the fitted model."""
    from noisecal.analysis.allan import allan_curve
    from noisecal.fit.simulate import RateModel

    n, period = 2 ** 15, 0.1
    y = RateModel(np.array(c2), low_pass=low_pass)(period, n, np.random.default_rng(seed))
    curve = allan_curve(y, period, "rad/s", "oadev", "octave")
    sel = F.select_structure(F.basis6(curve.taus), curve.dev ** 2, curve.edf)
    A = F.basis6(curve.taus)
    nu = F.mixture_edf(curve, [(0, n)], sel.c6)
    truth = np.maximum(F.signed(sel.c6), 0.0)
    lag = 2.0 * sel.c6[5] / sel.c6[1] if sel.c6[5] > 0 else 0.0
    model = AC.NoiseModel.from_terms(truth, lag)
    mean, cov = AC.avar_covariance(model, curve.m, period, [n])
    sims = AC.correlated_chi2(mean, cov, reps, np.random.default_rng(seed + 1))
    return A, sims, nu, sel


@pytest.mark.parametrize("c2, low_pass, candidates", [
    ([1e-9, 1e-6, 1e-8, 4e-8, 0], 0.0, "neighbours"),
    ([0, 1e-6, 0, 4e-8, 1e-10], 0.0, "neighbours"),
    ([0, 1e-6, 0, 4e-8, 0], 0.4, "neighbours"),
    ([1e-9, 1e-6, 1e-7, 0, 0], 0.0, "all")])
def test_replicate_selection_equals_numba(c2, low_pass, candidates):
    """2000 replicate curves each: the C selection picks the numba kernel's structure
    on every replicate (the same columns non-zero), with coefficients and deviance to
    1e-10; the ones it picks fit by scipy.optimize.nnls's weighted NNLS to 1e-8."""
    A, sims, nu, sel = _replicates(c2, low_pass, 5, 2000)
    cands = F.structures() if candidates == "all" else F.neighbours(sel.cols)
    flags = np.zeros((len(cands), 6), dtype=bool)
    for i, cols in enumerate(cands):
        flags[i, list(cols)] = True
    index = {tuple(c): i for i, c in enumerate(cands)}
    walk_of = np.array([index.get(F._walk_for_instability(tuple(c)) or (), -1)
                        for c in cands], dtype=np.int64)
    consts = (F.PENALTY, F.BAND_LIMIT_PENALTY, F.NEAR_TIE, F.RANDOM_WALK_BAND,
              F.REWEIGHT_PASSES)
    got, dev = np.empty((sims.shape[0], 6)), np.empty(sims.shape[0])
    _calls().select_many(A, sims, nu, flags, walk_of, *consts, got, dev)
    ref, dev_ref = np.empty_like(got), np.empty_like(dev)
    SK.select_many(A, sims, nu, flags, walk_of, *consts, ref, dev_ref)
    np.testing.assert_array_equal(got != 0, ref != 0)
    np.testing.assert_allclose(got, ref, rtol=1e-10, atol=0)
    np.testing.assert_allclose(dev, dev_ref, rtol=1e-10, atol=1e-12)
    assert len({tuple(np.flatnonzero(r)) for r in got}) > 1  # more than one choice met
    for r in range(0, sims.shape[0], 97):
        cols = np.flatnonzero(got[r])
        if cols.shape[0] and not np.all(got[r, cols] > 0):
            continue  # the fallback (no valid structure): a median, not a fit
        chosen = flags[[i for i, c in enumerate(cands) if set(c) == set(cols)][0]]
        A_sub = A[:, chosen]
        ref_fit = F.weighted_nnls_reference(A_sub, sims[r], nu)
        np.testing.assert_allclose(got[r, chosen], ref_fit, rtol=1e-8)


def test_select_replicates_is_the_same_with_the_c_kernels_off(monkeypatch):
    """The call site in ieee952: NOISECAL_NATIVE=0 gives the same selections."""
    A, sims, nu, sel = _replicates([0, 1e-6, 0, 4e-8, 0], 0.0, 7, 300)
    near = F.neighbours(sel.cols)
    got = F.select_replicates(A, sims, nu, near)
    monkeypatch.setenv("NOISECAL_NATIVE", "0")
    ref = F.select_replicates(A, sims, nu, near)
    for g, r in zip(got, ref):
        np.testing.assert_allclose(g, r, rtol=1e-10, atol=0)


def test_gauss_markov_replicate_fits_equal_numba_and_scipy():
    """Replicates of white + quantization + Gauss–Markov curves: the C kernel chooses
    the numba kernel's correlation time on every replicate, sigma to 1e-10; on a
    sample of them, the grid search with scipy.optimize.nnls's weighted NNLS
    (``weighted_nnls_reference``) gives the same choice."""
    from noisecal.fit.simulate import basis, gm_avar

    period, n = 0.01, 2 ** 16
    m = 2 ** np.arange(13)
    taus = m * period
    model = AC.NoiseModel(q2=1e-9, n2=1e-6, gm=(2e-3, 1.5))
    mean, cov = AC.avar_covariance(model, m, period, [n])
    sims = AC.correlated_chi2(mean, cov, 500, np.random.default_rng(4))
    nu = 2 * mean ** 2 / np.diag(cov)
    grid = np.logspace(np.log10(taus[0]), np.log10(taus[-1] * 10.0), GM.GRID_POINTS)
    gm_cols = np.array([np.concatenate([[T], gm_avar(taus, 1.0, T)]) for T in grid])
    base = np.ascontiguousarray(basis(taus)[:, :2])
    got = _calls().gm_fit_many(base, gm_cols, sims, nu, np.empty((sims.shape[0], 2)))
    ref = GM._fit_many_kernel(base, gm_cols, sims, nu, np.empty((sims.shape[0], 2)))
    np.testing.assert_array_equal(got[:, 1], ref[:, 1])
    np.testing.assert_allclose(got[:, 0], ref[:, 0], rtol=1e-10, atol=0)
    assert len(set(got[:, 1])) > 3
    w0 = np.sqrt(nu / 2.0)
    for r in range(0, sims.shape[0], 50):
        costs, sigmas = [], []
        for T in grid:
            A = np.column_stack([basis(taus)[:, :2], gm_avar(taus, 1.0, T)])
            c = F.weighted_nnls_reference(A, sims[r], nu, passes=1)
            mdl = A @ c
            rr = np.where(mdl > 0, mdl, sims[r])
            costs.append(float(np.sum((w0 * (sims[r] - mdl) / rr) ** 2)))
            sigmas.append(np.sqrt(c[2]))
        best = int(np.argmin(costs))
        assert got[r, 1] == grid[best]
        assert got[r, 0] == pytest.approx(sigmas[best], rel=1e-7, abs=1e-12)


def test_a_wrong_shaped_output_is_refused():
    """ctypes passes bare addresses: an output of the wrong shape or kind would be
    overrun or misread, so the face refuses it (common practice, no source)."""
    A = F.basis6(0.1 * 2.0 ** np.arange(8))
    with pytest.raises(ValueError):
        _calls().weighted_nnls(A, np.ones(8), np.ones(8), 3, np.zeros(5))
    with pytest.raises(TypeError):
        _calls().weighted_nnls(A, np.ones(8), np.ones(8), 3, np.zeros(6, dtype=np.float32))


def test_static_job_gives_the_same_terms_with_the_c_kernels_off(monkeypatch):
    """End to end: the static job on a simulated two-channel recording (white noise,
    flicker, random walk, quantization; one channel with a Gauss–Markov bias) gives the
    same parameters, values and intervals to 1e-9, with the C kernels and with
    NOISECAL_NATIVE=0 (numba's)."""
    import noisecal
    from noisecal.fit.simulate import RateModel

    rng = np.random.default_rng(12)
    n = 2 ** 15
    cols = {"gx": RateModel(np.array([1e-9, 1e-6, 1e-8, 4e-9, 0]))(PERIOD, n, rng),
            "gy": RateModel(np.array([0, 1e-6, 0, 0, 0]), gm=(3e-3, 2.0))(PERIOD, n, rng)}
    rec = noisecal.read(cols, period=PERIOD, units={c: "rad/s" for c in cols})
    got = noisecal.static(rec, reps=60, seed=3).parameters()
    monkeypatch.setenv("NOISECAL_NATIVE", "0")
    ref = noisecal.static(rec, reps=60, seed=3).parameters()
    assert [(p.channel, p.name) for p in got] == [(p.channel, p.name) for p in ref]
    assert len(got) >= 6
    for g, r in zip(got, ref):
        for field in ("value", "lower", "upper"):
            a, b = getattr(g.estimate, field), getattr(r.estimate, field)
            assert (a is None) == (b is None)
            if a is not None:
                assert a == pytest.approx(b, rel=1e-9, abs=0), (g.channel, g.name, field)

"""Python faces of the C fit kernels (``fit.c``): the same arguments and results as
the numba kernels of :mod:`noisecal.fit.avar_cov`, :mod:`noisecal.fit.select_kernel`
and :mod:`noisecal.fit.gauss_markov` they stand in for.

Inputs are made C-contiguous float64 (int64, uint8 for flags) here; outputs must
already be C-contiguous float64 arrays, which the kernels fill in place.
"""

from __future__ import annotations

import numpy as np

from . import F64, I64, P, function, ptr


def _f(a) -> np.ndarray:
    return np.ascontiguousarray(a, dtype=np.float64)


def _check(status: int, name: str) -> None:
    if status != 0:
        raise MemoryError(f"{name}: the C kernel could not allocate its scratch arrays")


def sums_kernel(m, runs, mult, period, white, k2, b2, q2, ramp, parts, gl_x, gl_w, short,
                far_factor, flicker_reach, ou_reach, sums: np.ndarray) -> np.ndarray:
    """Pair sums of the Allan-point covariance added into ``sums`` (shape (k, k), upper
    triangle): see ``avar_cov._sums_kernel``. ``parts`` has shape (e, 3)."""
    m, runs, mult, ramp = _f(m), _f(runs), _f(mult), _f(ramp)
    parts, gl_x, gl_w = _f(parts).reshape(-1, 3), _f(gl_x), _f(gl_w)
    k = m.shape[0]
    if sums.shape != (k, k) or runs.shape != mult.shape or ramp.shape != (k,) \
            or gl_x.shape != gl_w.shape:
        raise ValueError("sums_kernel: inconsistent shapes")
    function("nc_avar_sums", [P, I64, P, P, I64, F64, F64, F64, F64, F64, P, P, I64, P, P,
                              I64, F64, F64, F64, F64, P])(
        ptr(m), k, ptr(runs), ptr(mult), runs.shape[0], float(period), float(white),
        float(k2), float(b2), float(q2), ptr(ramp), ptr(parts), parts.shape[0], ptr(gl_x),
        ptr(gl_w), gl_x.shape[0], float(short), float(far_factor), float(flicker_reach),
        float(ou_reach), ptr(sums))
    return sums


def nnls(M, b, x: np.ndarray) -> np.ndarray:
    """Lawson–Hanson NNLS of ``M @ x ≈ b`` (M shape (k, p)) into ``x`` (shape (p,)):
    see ``select_kernel.nnls``."""
    M, b = _f(M), _f(b)
    k, p = M.shape
    if b.shape != (k,) or x.shape != (p,):
        raise ValueError("nnls: inconsistent shapes")
    _check(function("nc_nnls", [P, I64, I64, P, P], I64)(ptr(M), k, p, ptr(b), ptr(x)),
           "nnls")
    return x


def weighted_nnls(A, avar, nu, passes: int, c: np.ndarray) -> np.ndarray:
    """Weighted NNLS with reweighting passes on every column of ``A`` (shape (k, p))
    into ``c`` (shape (p,)): see ``select_kernel.weighted_nnls``."""
    A, avar, nu = _f(A), _f(avar), _f(nu)
    k, p = A.shape
    if avar.shape != (k,) or nu.shape != (k,) or c.shape != (p,):
        raise ValueError("weighted_nnls: inconsistent shapes")
    _check(function("nc_weighted_nnls", [P, I64, I64, P, P, I64, P], I64)(
        ptr(A), k, p, ptr(avar), ptr(nu), int(passes), ptr(c)), "weighted_nnls")
    return c


def select_many(A, sims, nu, cands, walk_of, penalty, band_penalty, near_tie, walk_band,
                passes, out: np.ndarray, deviance: np.ndarray) -> np.ndarray:
    """Selection and fit of every replicate among the candidate structures, into
    ``out`` (shape (reps, 6)) and ``deviance`` (shape (reps,)): see
    ``select_kernel.select_many``."""
    A, sims, nu = _f(A), _f(sims), _f(nu)
    flags = np.ascontiguousarray(cands, dtype=np.uint8)
    walk_of = np.ascontiguousarray(walk_of, dtype=np.int64)
    k = A.shape[0]
    reps = sims.shape[0]
    n_cands = flags.shape[0]
    if (A.shape != (k, 6) or sims.shape[1:] != (k,) or nu.shape != (k,)
            or flags.shape != (n_cands, 6) or walk_of.shape != (n_cands,)
            or out.shape != (reps, 6) or deviance.shape != (reps,)):
        raise ValueError("select_many: inconsistent shapes")
    _check(function("nc_select_many", [P, I64, P, I64, P, P, I64, P, F64, F64, F64, F64,
                                       I64, P, P], I64)(
        ptr(A), k, ptr(sims), reps, ptr(nu), ptr(flags, np.uint8), n_cands,
        ptr(walk_of, np.int64), float(penalty), float(band_penalty), float(near_tie),
        float(walk_band), int(passes), ptr(out), ptr(deviance)), "select_many")
    return out


def gm_fit_many(base, gm_cols, sims, nu, out: np.ndarray) -> np.ndarray:
    """Gauss–Markov sigma and correlation time of every replicate into ``out`` (shape
    (reps, 2)): see ``gauss_markov._fit_many_kernel``."""
    base, gm_cols, sims, nu = _f(base), _f(gm_cols), _f(sims), _f(nu)
    k = base.shape[0]
    reps = sims.shape[0]
    if (base.shape != (k, 2) or gm_cols.shape[1:] != (k + 1,) or gm_cols.shape[0] < 1
            or sims.shape[1:] != (k,) or nu.shape != (k,) or out.shape != (reps, 2)):
        raise ValueError("gm_fit_many: inconsistent shapes")
    _check(function("nc_gm_fit_many", [P, I64, P, I64, P, I64, P, P], I64)(
        ptr(base), k, ptr(gm_cols), gm_cols.shape[0], ptr(sims), reps, ptr(nu), ptr(out)),
        "gm_fit_many")
    return out

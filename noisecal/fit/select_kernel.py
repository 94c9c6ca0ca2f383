"""Compiled term selection over many replicate curves (the bootstrap's inner loop).

:func:`select_many` does for every row of a replicate matrix what
:func:`noisecal.fit.ieee952.select_structure` does for one curve among a short
list of candidate structures — the same weighted NNLS with reweighting passes
(Lawson–Hanson active sets, least squares by modified Gram–Schmidt), the same
deviance, penalties, tie rule and random-walk swap — without the GIL, so the
channels' threads run it side by side. tests/fit/test_select_kernel.py holds it
to the Python path.

References
----------
C. L. Lawson, R. J. Hanson, *Solving Least Squares Problems* (1974), ch. 23 (NNLS).
"""

from __future__ import annotations

import numpy as np
from .._jit import njit


@njit(cache=True, nogil=True)
def _workspace(k):
    """Scratch arrays for :func:`_nnls` and :func:`_weighted` on k rows, ≤ 6 columns."""
    return (np.empty((k, 6)), np.empty((6, 6)), np.empty(6, np.int64), np.empty(6),
            np.empty(6), np.empty(6, np.bool_), np.empty(6, np.bool_), np.empty(6),
            np.empty(k), np.empty(6), np.empty((k, 6)), np.empty(6), np.empty(k),
            np.empty((k, 6)), np.empty(k), np.empty(6), np.empty(6))


@njit(cache=True, nogil=True)
def _ls(M, b, passive, out, ws):
    """Least squares of M[:, passive] x = b (modified Gram–Schmidt), zeros elsewhere."""
    Q, R, idx, rhs, zq = ws[0], ws[1], ws[2], ws[3], ws[4]
    k, p = M.shape
    q = 0
    for j in range(p):
        if passive[j]:
            idx[q] = j
            q += 1
    for a in range(q):
        for i in range(k):
            Q[i, a] = M[i, idx[a]]
    for a in range(q):
        for c in range(a):
            d = 0.0
            for i in range(k):
                d += Q[i, c] * Q[i, a]
            R[c, a] = d
            for i in range(k):
                Q[i, a] -= d * Q[i, c]
        nrm = 0.0
        for i in range(k):
            nrm += Q[i, a] * Q[i, a]
        nrm = np.sqrt(nrm)
        R[a, a] = nrm
        if nrm > 0.0:
            for i in range(k):
                Q[i, a] /= nrm
    for a in range(q):
        d = 0.0
        for i in range(k):
            d += Q[i, a] * b[i]
        rhs[a] = d
    for a in range(q - 1, -1, -1):
        s = rhs[a]
        for c in range(a + 1, q):
            s -= R[a, c] * zq[c]
        zq[a] = s / R[a, a] if R[a, a] > 0.0 else 0.0
    for j in range(p):
        out[j] = 0.0
    for a in range(q):
        out[idx[a]] = zq[a]


@njit(cache=True, nogil=True)
def _nnls(M, b, x, ws):
    """:func:`nnls` on caller-owned scratch arrays (``_workspace``)."""
    passive, skip, z, r, w = ws[5], ws[6], ws[7], ws[8], ws[9]
    k, p = M.shape
    for j in range(p):
        x[j] = 0.0
        passive[j] = False
        skip[j] = False
    for i in range(k):
        r[i] = b[i]
    for _outer in range(3 * p + 3):
        for j in range(p):
            s = 0.0
            for i in range(k):
                s += M[i, j] * r[i]
            w[j] = s
        j_best, w_best = -1, 0.0
        for j in range(p):
            if not passive[j] and not skip[j] and w[j] > w_best:
                j_best, w_best = j, w[j]
        if j_best < 0:
            break
        passive[j_best] = True
        _ls(M, b, passive, z, ws)
        if z[j_best] <= 0.0:
            passive[j_best] = False
            skip[j_best] = True
            continue
        for j in range(p):
            skip[j] = False
        for _inner in range(3 * p + 3):
            ok = True
            for j in range(p):
                if passive[j] and z[j] <= 0.0:
                    ok = False
            if ok:
                for j in range(p):
                    x[j] = z[j]
                break
            alpha = np.inf
            for j in range(p):
                if passive[j] and z[j] <= 0.0:
                    step = x[j] / (x[j] - z[j])
                    if step < alpha:
                        alpha = step
            for j in range(p):
                x[j] += alpha * (z[j] - x[j])
                if passive[j] and x[j] <= 0.0:
                    passive[j] = False
                    x[j] = 0.0
            _ls(M, b, passive, z, ws)
        for i in range(k):
            s = b[i]
            for j in range(p):
                s -= M[i, j] * x[j]
            r[i] = s
    return x


@njit(cache=True, nogil=True)
def nnls(M, b, x):
    """Lawson–Hanson NNLS of a small dense problem (at most 6 columns); the solution
    is written to ``x``.

    As the classical algorithm: a column enters when its dual is positive and its
    least-squares coefficient with the passive set is positive (otherwise it is
    passed over until the next step), and the passive solution is moved back to
    feasibility by interpolation.
    """
    return _nnls(M, b, x, _workspace(M.shape[0]))


@njit(cache=True, nogil=True)
def _weighted(A, avar, nu, cols, passes, c, ws):
    """:func:`noisecal.fit.ieee952.weighted_nnls` on the columns flagged in ``cols``."""
    sub_full, col_full, ref, M_full, rhs, x_full, cc_full = (ws[10], ws[11], ws[12], ws[13],
                                                             ws[14], ws[15], ws[16])
    k = A.shape[0]
    q = 0
    for j in range(A.shape[1]):
        if cols[j]:
            for i in range(k):
                sub_full[i, q] = A[i, j]
            q += 1
    sub = sub_full[:, :q]
    M = M_full[:, :q]
    col = col_full[:q]
    x = x_full[:q]
    cc = cc_full[:q]
    for a in range(q):
        mx = 0.0
        for i in range(k):
            mx = max(mx, abs(sub[i, a]))
        col[a] = mx if mx != 0.0 else 1.0
    for i in range(k):
        ref[i] = avar[i]
    for _ in range(passes + 1):
        for i in range(k):
            w = np.sqrt(nu[i] / 2.0) / ref[i]
            rhs[i] = avar[i] * w
            for a in range(q):
                M[i, a] = sub[i, a] * w / col[a]
        _nnls(M, rhs, x, ws)
        for a in range(q):
            cc[a] = x[a] / col[a]
        for i in range(k):
            mdl = 0.0
            for a in range(q):
                mdl += sub[i, a] * cc[a]
            ref[i] = mdl if mdl > 0.0 else avar[i]
    q = 0
    for j in range(A.shape[1]):
        c[j] = 0.0
        if cols[j]:
            c[j] = cc[q]
            q += 1


@njit(cache=True, nogil=True)
def weighted_nnls(A, avar, nu, passes, c):
    """:func:`noisecal.fit.ieee952.weighted_nnls` on every column of ``A``; written to ``c``."""
    cols = np.ones(A.shape[1], np.bool_)
    _weighted(A, avar, nu, cols, passes, c, _workspace(A.shape[0]))
    return c


@njit(cache=True, nogil=True)
def _misfit(A, avar, nu, c):
    d = 0.0
    for i in range(A.shape[0]):
        mdl = 0.0
        for j in range(A.shape[1]):
            mdl += A[i, j] * c[j]
        mdl = max(mdl, 1e-300)
        ratio = avar[i] / mdl
        d += nu[i] * (ratio - 1.0 - np.log(ratio))
    return d


@njit(cache=True, nogil=True)
def select_many(A, sims, nu, cands, walk_of, penalty, band_penalty, near_tie, walk_band,
                passes, out, deviance):
    """Select and fit every replicate among the candidate structures.

    Parameters
    ----------
    A : ndarray, shape (k, 6)
        :func:`noisecal.fit.ieee952.basis6` at the fitted taus.
    sims : ndarray, shape (reps, k)
        Replicate Allan variances at those taus.
    nu : ndarray, shape (k,)
    cands : ndarray of bool, shape (C, 6)
        Candidate structures (columns flagged).
    walk_of : ndarray of int, shape (C,)
        Index of the candidate with bias random walk in place of bias instability,
        −1 where there is none among the candidates.
    penalty, band_penalty, near_tie, walk_band : float
        As in :func:`noisecal.fit.ieee952.select_structure`.
    passes : int
        Reweighting passes of the weighted NNLS.
    out : ndarray, shape (reps, 6)
        Coefficients of each replicate's chosen structure (written).
    deviance : ndarray, shape (reps,)
        Deviance of that fit (written).
    """
    C = cands.shape[0]
    ws = _workspace(A.shape[0])
    fits = np.zeros((C, 6))
    crit = np.empty(C)
    valid = np.zeros(C, np.bool_)
    size = np.zeros(C, np.int64)
    ramp = np.zeros(C, np.bool_)
    for c in range(C):
        for j in range(6):
            if cands[c, j] and j != 5:
                size[c] += 1
        ramp[c] = cands[c, 4]
    for r in range(sims.shape[0]):
        avar = sims[r]
        best_crit = np.inf
        for c in range(C):
            _weighted(A, avar, nu, cands[c], passes, fits[c], ws)
            valid[c] = True
            n_cols = 0
            for j in range(6):
                if cands[c, j]:
                    n_cols += 1
                    if fits[c, j] <= 0.0:
                        valid[c] = False
            if valid[c]:
                cost = penalty * n_cols + ((band_penalty - penalty) if cands[c, 5] else 0.0)
                crit[c] = _misfit(A, avar, nu, fits[c]) + cost
                best_crit = min(best_crit, crit[c])
        chosen = -1
        for c in range(C):
            if not valid[c] or crit[c] >= best_crit + near_tie:
                continue
            if chosen < 0:
                chosen = c
                continue
            # Fewest terms, then no ramp, then the lower criterion.
            if (size[c] < size[chosen] or (size[c] == size[chosen] and (
                    (not ramp[c] and ramp[chosen]) or (ramp[c] == ramp[chosen]
                                                        and crit[c] < crit[chosen])))):
                chosen = c
        if chosen < 0:
            out[r, :] = 0.0
            vals = np.empty(A.shape[0])
            for i in range(A.shape[0]):
                vals[i] = avar[i] / A[i, 1]
            out[r, 1] = np.median(vals)
        else:
            wk = walk_of[chosen]
            if wk >= 0 and valid[wk] and crit[wk] < crit[chosen] + walk_band:
                chosen = wk
            out[r, :] = fits[chosen]
        deviance[r] = _misfit(A, avar, nu, out[r])
    return out

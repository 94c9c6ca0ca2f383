"""Allan-family deviations of rate data, gap-aware.

Rate samples ``y`` (one channel, SI) are integrated to phase ``x`` (y·s)
segment by segment; a difference term is formed only from phase points of one
contiguous segment, so averaging clusters that straddle a gap are left out,
and every point records how many terms it used. On a recording without gaps
the results equal the textbook estimators (and allantools) exactly.

References
----------
W. J. Riley, *Handbook of Frequency Stability Analysis*, NIST SP 1065 (2008),
sections 5.2 (Allan, overlapping, modified, Hadamard, total variances).
IEEE Std 952-1997, Annex C (Allan variance of inertial sensor data).
"""

from __future__ import annotations

import numpy as np

from ..errors import AnalysisError

KINDS = ("adev", "oadev", "mdev", "hdev", "ohdev", "totdev")
_DIFF_ORDER = {"adev": 2, "oadev": 2, "mdev": 2, "hdev": 3, "ohdev": 3, "totdev": 2}


def diff_order(kind: str) -> int:
    """Order of the phase difference: 2 for Allan forms, 3 for Hadamard."""
    return _DIFF_ORDER[kind]


def phase(y: np.ndarray, period: float) -> np.ndarray:
    """Integrate rate samples to phase, mean removed first.

    Parameters
    ----------
    y : ndarray, shape (n,)
        Rate samples, unit u.
    period : float
        Sample period, s.

    Returns
    -------
    x : ndarray, shape (n + 1,)
        Phase, u·s, starting at 0. Removing the mean changes no deviation
        (a constant rate is a linear phase) and keeps the cumulative sum precise.
    """
    from .engine import integrate

    return integrate(y, period)


def max_factor(n_longest: int, kind: str) -> int:
    """Largest averaging factor that leaves at least one full term.

    Parameters
    ----------
    n_longest : int
        Samples in the longest segment.
    kind : str
        Deviation kind.
    """
    d = diff_order(kind)
    if kind == "mdev":
        return max(1, n_longest // 3)
    if kind == "totdev":
        return max(1, (n_longest - 1) // 2)
    return max(1, n_longest // d)


def factor_grid(n_longest: int, kind: str, grid: str = "octave", per_decade: int = 10,
                fraction: float = 0.25) -> np.ndarray:
    """Averaging factors m for a tau grid.

    Parameters
    ----------
    n_longest : int
        Samples in the longest segment.
    kind : str
        Deviation kind (sets the largest usable m).
    grid : {"octave", "dense"}
        Powers of two, or ``per_decade`` log-spaced factors per decade.
    per_decade : int
        Density of the dense grid.
    fraction : float
        Largest m as a fraction of ``n_longest`` (longer taus have one or two
        terms and say little).

    Returns
    -------
    m : ndarray of int, shape (k,)
    """
    top = max(1, min(max_factor(n_longest, kind), int(fraction * n_longest)))
    if grid == "octave":
        return 2 ** np.arange(int(np.floor(np.log2(top))) + 1)
    if grid == "dense":
        count = int(np.ceil(np.log10(max(top, 1)) * per_decade)) + 1
        return np.unique(np.round(np.logspace(0, np.log10(top), count)).astype(np.int64))
    raise ValueError(f"unknown grid {grid!r}")


def term_count(nx: int, m: int, kind: str) -> int:
    """Difference terms a contiguous run of ``nx`` phase points gives at factor m."""
    if kind == "mdev":
        return max(0, nx - 3 * m + 1)
    if kind in ("hdev", "ohdev"):
        full = nx - 3 * m
    else:
        full = nx - 2 * m
    if full < 1:
        return 0
    return -(-full // m) if kind in ("adev", "hdev") else full


def _sum_squares(x: np.ndarray, m: int, kind: str,
                 work: np.ndarray | None = None) -> tuple[float, int]:
    """Sum of squared difference terms of one contiguous phase run, and their count.

    ``work`` (at least ``x.size`` floats) is reused for the terms: fresh large
    temporaries cost a page fault per 4 KiB, which dominated the run time.
    """
    nx = x.shape[0]
    if term_count(nx, m, kind) == 0:
        return 0.0, 0
    if work is None:
        work = np.empty(nx)
    span = (3 if kind in ("hdev", "ohdev") else 2) * m
    w = work[:nx - span]
    if kind in ("hdev", "ohdev"):
        np.subtract(x[2 * m:nx - m], x[m:nx - 2 * m], out=w)
        w *= -3.0
        w += x[3 * m:]
        w -= x[:nx - 3 * m]
    else:
        np.subtract(x[2 * m:], x[m:nx - m], out=w)
        w -= x[m:nx - m]
        w += x[:nx - 2 * m]
    if kind in ("adev", "hdev"):
        terms = w[::m]
    elif kind == "mdev":
        np.cumsum(w, out=w)
        head = w[m - 1:]
        terms = np.concatenate([head[:1], head[1:] - w[:-m]]) / m
    else:
        terms = w
    # einsum, not dot: BLAS threads stall when two processes share the cores.
    return float(np.einsum("i,i->", terms, terms)), int(terms.shape[0])


def _totvar(x: np.ndarray, m: int, tau: float) -> tuple[float, int]:
    nx = x.shape[0]
    left = 2.0 * x[0] - x[1:nx - 1][::-1]
    right = 2.0 * x[-1] - x[nx - 2:0:-1]
    ext = np.concatenate([left, x, right])
    off = nx - 2
    i = np.arange(1, nx - 1) + off
    terms = ext[i - m] - 2.0 * ext[i] + ext[i + m]
    return float(np.dot(terms, terms)) / (2.0 * tau ** 2 * (nx - 2)), nx - 2


def deviation(y: np.ndarray, period: float, m: np.ndarray, kind: str = "oadev",
              segments: list[tuple[int, int]] | None = None,
              engine: str = "compiled") -> tuple[np.ndarray, np.ndarray]:
    """Allan-family deviation of rate data at averaging factors ``m``.

    Parameters
    ----------
    y : ndarray, shape (n,)
        Rate samples, unit u.
    period : float
        Sample period tau0, s.
    m : ndarray of int, shape (k,)
        Averaging factors; tau = m * period.
    kind : {"adev", "oadev", "mdev", "hdev", "ohdev", "totdev"}
        Allan (non-overlapping, overlapping), modified Allan, Hadamard
        (non-overlapping, overlapping) or total deviation.
    segments : list of (start, stop), optional
        Contiguous index ranges; terms never span two segments. Default: one.
    engine : {"compiled", "reference"}
        The compiled one-pass kernels (:mod:`noisecal.analysis.engine`, taus in
        parallel) or the numpy reference path; both give the same numbers.

    Returns
    -------
    dev : ndarray, shape (k,)
        Deviation, unit u; NaN where no term fits.
    n_terms : ndarray of int, shape (k,)
        Difference terms used at each m.

    Notes
    -----
    With phase x and tau = m·tau0 (NIST SP 1065, eqs. 6, 7, 10, 14, 25):
    AVAR = Σ(x[i+2m] − 2x[i+m] + x[i])² / (2τ²·count);
    MVAR averages m consecutive second differences before squaring;
    HVAR = Σ(x[i+3m] − 3x[i+2m] + 3x[i+m] − x[i])² / (6τ²·count);
    TOTVAR extends the phase by reflection at both ends (one segment only).
    """
    if kind not in KINDS:
        raise ValueError(f"unknown deviation kind {kind!r}")
    y = np.asarray(y, dtype=np.float64)
    m = np.asarray(m, dtype=np.int64)
    segments = segments or [(0, y.shape[0])]
    if kind == "totdev" and len(segments) > 1:
        raise AnalysisError("the total deviation needs a recording without gaps; "
                            "use the overlapping Allan deviation instead")
    dev = np.full(m.shape[0], np.nan)
    count = np.zeros(m.shape[0], dtype=np.int64)
    taus = m.astype(np.float64) * period
    if kind == "totdev":
        x = phase(y, period)
        for j, mj in enumerate(m):
            if x.shape[0] - 1 >= 2 * mj:
                var, count[j] = _totvar(x, int(mj), float(taus[j]))
                dev[j] = np.sqrt(var)
        return dev, count
    total = np.zeros(m.shape[0])
    for a, b in segments:
        # One segment's phase at a time keeps memory at one extra array.
        x = phase(y[a:b], period)
        if engine == "compiled":
            from .engine import sum_squares

            s, c = sum_squares(x, m, kind)
        else:
            work = np.empty(x.shape[0])
            pairs = [_sum_squares(x, int(mj), kind, work) for mj in m]
            s = np.array([p[0] for p in pairs])
            c = np.array([p[1] for p in pairs], dtype=np.int64)
        total += s
        count += c
    scale = 6.0 if diff_order(kind) == 3 else 2.0
    ok = count > 0
    dev[ok] = np.sqrt(total[ok] / (scale * taus[ok] ** 2 * count[ok]))
    return dev, count


def deviations(y: np.ndarray, period: float, requests: list[tuple[str, np.ndarray]],
               segments: list[tuple[int, int]] | None = None) -> list[tuple[np.ndarray, np.ndarray]]:
    """Several deviations of one channel from one phase per segment.

    The same numbers as :func:`deviation` called once per request (compiled
    engine), but each segment is integrated once, and the overlapping Allan and
    Hadamard factors of all requests are summed in one pass over the phase
    (:func:`noisecal.analysis.engine.overlapping_sums`).

    Parameters
    ----------
    y : ndarray, shape (n,)
        Rate samples, unit u.
    period : float
        Sample period, s.
    requests : list of (str, ndarray of int)
        (kind, averaging factors) pairs; kinds as in :func:`deviation`.
    segments : list of (start, stop), optional
        Contiguous index ranges; terms never span two segments.

    Returns
    -------
    list of (dev, n_terms)
        Per request, as :func:`deviation` returns them.
    """
    from .engine import overlapping_sums, sum_squares

    y = np.asarray(y, dtype=np.float64)
    segments = segments or [(0, y.shape[0])]
    requests = [(kind, np.asarray(m, dtype=np.int64)) for kind, m in requests]
    for kind, _ in requests:
        if kind not in KINDS:
            raise ValueError(f"unknown deviation kind {kind!r}")
    if any(kind == "totdev" for kind, _ in requests):
        # Reflected phase, one segment: no sharing to gain.
        return [deviation(y, period, m, kind, segments) for kind, m in requests]
    totals = [np.zeros(m.shape[0]) for _, m in requests]
    counts = [np.zeros(m.shape[0], dtype=np.int64) for _, m in requests]
    allan = [j for j, (kind, _) in enumerate(requests) if kind == "oadev"]
    hadamard = [j for j, (kind, _) in enumerate(requests) if kind == "ohdev"]
    empty = np.empty(0, dtype=np.int64)

    def joined(idx):
        return np.concatenate([requests[j][1] for j in idx]) if idx else empty

    for a, b in segments:
        x = phase(y[a:b], period)
        sa, ca, sh, ch = overlapping_sums(x, joined(allan), joined(hadamard))
        for idx, s, c in ((allan, sa, ca), (hadamard, sh, ch)):
            at = 0
            for j in idx:
                k = requests[j][1].shape[0]
                totals[j] += s[at:at + k]
                counts[j] += c[at:at + k]
                at += k
        for j, (kind, m) in enumerate(requests):
            if kind not in ("oadev", "ohdev"):
                s, c = sum_squares(x, m, kind)
                totals[j] += s
                counts[j] += c
    out = []
    for (kind, m), total, count in zip(requests, totals, counts):
        dev = np.full(m.shape[0], np.nan)
        taus = m.astype(np.float64) * period
        scale = 6.0 if diff_order(kind) == 3 else 2.0
        ok = count > 0
        dev[ok] = np.sqrt(total[ok] / (scale * taus[ok] ** 2 * count[ok]))
        out.append((dev, count))
    return out


def allan_curve(y: np.ndarray, period: float, unit: str, kind: str = "oadev",
                grid: str | np.ndarray = "octave",
                segments: list[tuple[int, int]] | None = None,
                level: float = 0.95, per_decade: int = 10, noise_from=None):
    """A deviation curve with noise type, EDF and interval at every tau.

    Parameters
    ----------
    y : ndarray, shape (n,)
        Rate samples of one channel, unit ``unit``.
    period : float
        Sample period, s.
    unit : str
        Channel unit (SI).
    kind : str
        Deviation kind, see :func:`deviation`.
    grid : {"octave", "dense"} or ndarray of int
        Tau grid, or explicit averaging factors.
    segments : list of (start, stop), optional
        Contiguous runs between gaps.
    level : float
        Confidence level of the per-point interval.
    per_decade : int
        Density of the dense grid.
    noise_from : AllanCurve, optional
        Take each tau's noise type from the nearest tau (log scale) of this
        curve instead of identifying it again: the type belongs to the data,
        not to the estimator, and identification is a full pass per tau. Only
        where that point was identified and this tau itself has enough cluster
        averages for identification (identified here if the source has no type
        there); elsewhere the conservative EDF is used.

    Returns
    -------
    AllanCurve
        Points with no term are dropped. ``identified`` says where the lag-1
        method named the noise type; elsewhere (fewer than ``MIN_BLOCKS``
        averages) ``edf`` is the smallest EDF over the noise types the estimator
        admits and ``alpha`` the type that gives it.
    """
    segments = segments or [(0, y.shape[0])]
    m = _factors(segments, kind, grid, per_decade)
    dev, n_terms = deviation(y, period, m, kind, segments)
    return _curve(y, period, unit, kind, m, dev, n_terms, segments, level, noise_from)


def allan_curves(y: np.ndarray, period: float, unit: str, specs: list[tuple],
                 segments: list[tuple[int, int]] | None = None, level: float = 0.95,
                 per_decade: int = 10) -> list:
    """Several curves of one channel: :func:`allan_curve` for each, sharing the work.

    One phase per segment and one pass over it for all the overlapping Allan and
    Hadamard factors (:func:`deviations`); a curve may take its noise types
    from an earlier one. The curves are those :func:`allan_curve` gives.

    Parameters
    ----------
    y : ndarray, shape (n,)
        Rate samples of one channel, unit ``unit``.
    period : float
        Sample period, s.
    unit : str
        Channel unit (SI).
    specs : list of (kind, grid, noise_from)
        Per curve: deviation kind, tau grid (as in :func:`allan_curve`) and the
        index of an earlier curve in ``specs`` to take noise types from, or None.
    segments : list of (start, stop), optional
        Contiguous runs between gaps.
    level : float
        Confidence level of the per-point intervals.
    per_decade : int
        Density of the dense grids.

    Returns
    -------
    list of AllanCurve
        In the order of ``specs``.
    """
    for j, (_, _, source) in enumerate(specs):
        if source is not None and not 0 <= source < j:
            raise ValueError(f"noise_from index {source} names no earlier curve")
    segments = segments or [(0, y.shape[0])]
    factors = [_factors(segments, kind, grid, per_decade) for kind, grid, _ in specs]
    devs = deviations(y, period, [(kind, m) for (kind, _, _), m in zip(specs, factors)],
                      segments)
    curves = []
    for (kind, _, source), m, (dev, n_terms) in zip(specs, factors, devs):
        curves.append(_curve(y, period, unit, kind, m, dev, n_terms, segments, level,
                             None if source is None else curves[source]))
    return curves


def _factors(segments: list[tuple[int, int]], kind: str, grid, per_decade: int) -> np.ndarray:
    """Averaging factors of a named grid over the longest segment, or those given."""
    if isinstance(grid, str):
        longest = max(b - a for a, b in segments)
        return factor_grid(int(longest), kind, grid, per_decade)
    return np.asarray(grid, dtype=np.int64)


def _curve(y, period, unit, kind, m, dev, n_terms, segments, level, noise_from):
    """Noise types, EDFs and intervals of computed deviations: an AllanCurve."""
    from ..types import AllanCurve
    from .edf import (MIN_BLOCKS, chi2_interval, clamp_alpha, conservative_edf,
                      noise_id_lag1, noise_ids_lag1, pooled_edf)

    lengths = np.array([b - a for a, b in segments])
    longest = segments[int(np.argmax(lengths))]
    keep = n_terms > 0
    m, dev, n_terms = m[keep], dev[keep], n_terms[keep]
    taus = m * period
    d = diff_order(kind)
    y_long = y[longest[0]:longest[1]]
    if noise_from is not None:
        near = np.abs(np.log(taus)[:, None] - np.log(noise_from.taus)[None, :]).argmin(axis=1)
        src_ok = (np.ones(noise_from.taus.shape[0], dtype=bool)
                  if noise_from.identified is None else np.asarray(noise_from.identified))
        # Borrow only an identified type, and only where this tau could have been
        # identified itself: never carry a type across to a few-cluster tau. Where the
        # source has none but this tau has enough averages, identify it here.
        enough = y_long.shape[0] // m >= MIN_BLOCKS
        ident = [(int(noise_from.alpha[k]) if src_ok[k] else noise_id_lag1(y_long, int(mj), dmax=d))
                 if ok else None for k, mj, ok in zip(near, m, enough)]
    else:
        ident = noise_ids_lag1(y_long, m, dmax=d)
    identified = np.array([a is not None for a in ident], dtype=bool)
    alphas = np.empty(m.shape[0], dtype=np.int64)
    nu = np.empty(m.shape[0])
    term_kind = "oadev" if kind == "totdev" else kind
    for j, mj in enumerate(m):
        counts = np.array([term_count(int(n) + 1, int(mj), term_kind) for n in lengths])
        used = counts > 0
        runs, weights = lengths[used] + 1, counts[used].astype(np.float64)
        # Pooled segments: EDF of a count-weighted mean of independent estimates.
        if identified[j]:
            alphas[j] = clamp_alpha(int(ident[j]), d)
            nu[j] = pooled_edf(int(alphas[j]), kind, int(mj), runs, weights)
        else:
            alphas[j], nu[j] = conservative_edf(kind, int(mj), runs, weights)
    lower, upper = chi2_interval(dev, nu, level)
    return AllanCurve(kind=kind, taus=taus, m=m, dev=dev, lower=lower, upper=upper,
                      edf=nu, alpha=alphas, n_terms=n_terms, unit=unit, level=level,
                      identified=identified)

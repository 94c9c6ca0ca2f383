"""Discrete-time Q and R for a filter time step, from fitted noise terms.

For a channel with white-noise coefficient N (u/√Hz) and bias random walk K
(u·√Hz), at filter step dt:

- measurement (the channel is an observation, one sample an average over
  dt): per-sample variance ``R = N²/dt``;
- prediction input (the channel is integrated over dt, e.g. a gyro to an
  angle increment): ``Q_input = N²·dt``;
- bias random-walk state: ``Q_bias = K²·dt`` (the upper bound of K where K
  is not resolved, flagged);
- first-order Gauss–Markov bias state: ``phi = exp(−dt/T)``,
  ``q = sigma²(1 − exp(−2dt/T))``.

References
----------
Common practice, no source (white-noise discretisation). R. G. Brown,
P. Y. C. Hwang, *Introduction to Random Signals and Applied Kalman
Filtering* (Gauss–Markov discretisation).
"""

from __future__ import annotations

import numpy as np

from ..errors import AnalysisError
from ..types import ChannelModel, FilterBlock


def _ends(est):
    """(value, low, high, is_bound) of an Estimate; a bound spans [0, bound]."""
    if est.resolved:
        return est.value, est.lower, est.upper, False
    return est.upper, 0.0, est.upper, True


def filter_block(models: list[ChannelModel], dt: float) -> FilterBlock:
    """Diagonal discrete-time matrices over the channels in ``models`` order.

    Parameters
    ----------
    models : list of ChannelModel
        One per channel, in the state/measurement order wanted.
    dt : float
        Filter time step, s.

    Returns
    -------
    FilterBlock
    """
    if not dt > 0 or not np.isfinite(dt):
        raise AnalysisError(f"--dt {dt} is not a positive time step; give seconds, e.g. --dt 0.01")
    c = len(models)
    n = np.array([_ends(m.terms["white_noise"])[:3] for m in models])
    k_ends = [_ends(m.terms["bias_random_walk"]) for m in models]
    k = np.array([e[:3] for e in k_ends])
    notes = []
    for m, e in zip(models, k_ends):
        if e[3]:
            notes.append(f"{m.channel}: bias random walk not resolved; Q_bias uses its "
                         "upper bound (a conservative, larger Q)")
    for m in models:
        if not m.terms["white_noise"].resolved:
            notes.append(f"{m.channel}: white noise not resolved; R and Q_input use its bound")
    gm_phi = np.full(c, np.nan)
    gm_q = np.full((3, c), np.nan)
    for i, m in enumerate(models):
        gm = m.gauss_markov
        if not gm:
            notes.append(f"{m.channel}: no Gauss–Markov bias resolved; its entries are null")
            continue
        s, T = gm["sigma"], gm["correlation_time"]
        gm_phi[i] = np.exp(-dt / T.value)
        # q grows with sigma and falls with T: interval corners give a conservative range.
        gm_q[0, i] = s.value ** 2 * -np.expm1(-2 * dt / T.value)
        gm_q[1, i] = s.lower ** 2 * -np.expm1(-2 * dt / T.upper)
        gm_q[2, i] = s.upper ** 2 * -np.expm1(-2 * dt / T.lower)
    diag = np.diag
    return FilterBlock(
        dt=float(dt), order=tuple(m.channel for m in models),
        units=tuple(m.unit for m in models),
        R=diag(n[:, 0] ** 2 / dt), R_low=diag(n[:, 1] ** 2 / dt), R_high=diag(n[:, 2] ** 2 / dt),
        Q_input=diag(n[:, 0] ** 2 * dt), Q_input_low=diag(n[:, 1] ** 2 * dt),
        Q_input_high=diag(n[:, 2] ** 2 * dt),
        Q_bias=diag(k[:, 0] ** 2 * dt), Q_bias_low=diag(k[:, 1] ** 2 * dt),
        Q_bias_high=diag(k[:, 2] ** 2 * dt),
        Q_bias_is_bound=tuple(e[3] for e in k_ends),
        gm_phi=gm_phi, gm_q=gm_q[0], gm_q_low=gm_q[1], gm_q_high=gm_q[2],
        white_psd=n[:, 0] ** 2, bias_rw_psd=k[:, 0] ** 2, notes=tuple(notes))

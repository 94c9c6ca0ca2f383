"""A constant-velocity target tracked by filterpy's KalmanFilter, with known truth.

filterpy is the independent implementation here: the filter that produces the
innovations is filterpy's, the system is simulated in plain numpy.
"""

from __future__ import annotations

import numpy as np

DT = 0.1
PHI = np.array([[1.0, DT], [0.0, 1.0]])
H = np.array([[1.0, 0.0]])
Q_UNIT = np.array([[DT ** 3 / 3, DT ** 2 / 2], [DT ** 2 / 2, DT]])
"""Q per unit density of white acceleration (continuous white-noise acceleration)."""

MODEL = f"""\
states: [p, v]
dt: {DT}
F: [[0, 1], [0, 0]]
noise:
  - {{name: accel, G: [0, 1], density: 1.0}}
measurements:
  - {{name: p, H: [1, 0], variance: 1.0}}
filter_used: {{Q: {{Q}}, R: {{R}}}}
"""


def model_text(q_used: float, r_used: float) -> str:
    """A model file for the constant-velocity filter that used q_used, r_used."""
    Q = (q_used * Q_UNIT).tolist()
    return MODEL.replace("{Q}", str(Q)).replace("{R}", str([[r_used]]))


def truth(q: float, r: float, steps: int, rng) -> tuple:
    """States (steps, 2) and measurements (steps,) under density q, variance r."""
    sq = np.linalg.cholesky(q * Q_UNIT)
    x = np.zeros((steps, 2))
    state = np.array([0.0, 1.0])
    for k in range(steps):
        x[k] = state
        state = PHI @ state + sq @ rng.standard_normal(2)
    z = x[:, 0] + np.sqrt(r) * rng.standard_normal(steps)
    return x, z


def run_filterpy(z: np.ndarray, q_used: float, r_used: float, steady_gain=None):
    """filterpy's KalmanFilter over z; innovations, S, posterior x and P per step.

    With ``steady_gain`` the filter runs that fixed gain (predict_steadystate /
    update_steadystate) and S is the steady state's.
    """
    from filterpy.kalman import KalmanFilter

    kf = KalmanFilter(dim_x=2, dim_z=1)
    kf.F, kf.H = PHI.copy(), H.copy()
    kf.Q, kf.R = q_used * Q_UNIT, np.array([[r_used]])
    kf.x = np.array([z[0], 1.0])
    kf.P = np.diag([r_used, 1.0])
    K = z.shape[0]
    nu, S, xs, Ps = np.empty(K), np.empty(K), np.empty((K, 2)), np.empty((K, 2, 2))
    for k in range(K):
        if k:
            kf.predict_steadystate() if steady_gain is not None else kf.predict()
        if steady_gain is not None:
            kf.K = steady_gain[0]
            kf.update_steadystate(z[k])
            S[k] = steady_gain[1]
        else:
            kf.update(z[k])
            S[k] = kf.S[0, 0]
        nu[k] = kf.y[0]
        xs[k], Ps[k] = kf.x, kf.P
    return nu, S, xs, Ps

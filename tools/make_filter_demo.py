"""Make the filter demo: a model file and three filter logs in recordings/ (invented, fixed seed).

Scenario (invented): the "Marten-3" orchard rover keeps itself on the painted
guide line of the fictional "Kestrel Yard" with a small Kalman filter on its
motor controller, stepping at 30 Hz (dt = 1/30 s). Its states are the lateral
offset from the line (m), the lateral velocity (m/s) and the bias of the NC-40
IMU's lateral accelerometer accel_y (m/s²). The accelerometer drives the
prediction; the LG-7 line sensor's lateral offset is the measurement. The model
file ``recordings/filter_model.yaml`` takes the accelerometer's white noise and
bias random walk from the static block ``reports/demo/static.yaml`` and the
line sensor's σ from the motion block ``reports/demo/motion.yaml``, and adds the
rover's steering wobble, a white lateral acceleration the bench cannot see, as
a density the team guessed (0.02 m/s²/√Hz).

The rover's filter runs a fixed, steady-state gain computed from the diagonal
Q the team first took from the bench block alone (no wobble) and R = (12.9 mm)²:
that is ``filter_used`` in the model file. The three logs (one per 150 s pass
down the lane) hold the filter's innovations and S, its estimates and P, and the
simulated truth, so NIS, NEES and ALS can be checked against known values.

True values (the logs are simulated from exactly these; SI):

=============================  =====================================================
accel_y white noise N          5.0e-4 m/s²/√Hz (q = 2.5e-7 m²/s³), as the bench's truth
accel_y bias random walk K     9.2e-6 m/s²·√Hz (q = 8.464e-11 m²/s⁵)
steering wobble                0.08 m/s²/√Hz (q = 6.4e-3 m²/s³), four times the guess
line sensor σ                  12.0 mm (R = 1.44e-4 m²), white
initial state                  offset 0, velocity 0, bias 3.0e-3 m/s² (the filter
                               starts from its steady-state P and a zero bias)
=============================  =====================================================

The velocity state's noise is therefore q_v = N² + wobble² = 6.40025e-3 m²/s³; the
filter used 2.5e-7 m²/s³ · dt on the velocity diagonal. Expected outcome: NIS well
above its band, positively correlated innovations (Q too small), and an ALS
estimate of the velocity density near 6.4e-3 m²/s³ and of R near 1.44e-4 m²
(the split between the accelerometer's white noise and the wobble is not
identifiable: they enter Q alike).

Run: ``python tools/make_filter_demo.py`` (writes recordings/filter_model.yaml and
recordings/filter_log_run{1,2,3}.csv).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from scipy.linalg import expm, solve_discrete_are

SEED = 20261214
DT = 1.0 / 30.0
STEPS = 4500  # 150 s a pass
RUNS = 3
N_ACC, K_ACC, WOBBLE, SIGMA_Z = 5.0e-4, 9.2e-6, 0.08, 0.012
BIAS0 = 3.0e-3
# What the rover's filter used: the bench block's diagonal (N^2 dt, K^2 dt) and the
# motion block's sigma, rounded as the team wrote them.
USED_Q = np.diag([0.0, (5.0e-4) ** 2 * DT, (1.0e-5) ** 2 * DT])
USED_R = np.array([[0.0129 ** 2]])

ROOT = Path(__file__).resolve().parent.parent
OUT = ROOT / "recordings"

MODEL = f"""\
# Filter model of the Marten-3 rover's lateral filter (invented demo; see
# tools/make_filter_demo.py). States: offset from the guide line, lateral
# velocity, accel_y bias. dx/dt = F x + G w; the accelerometer reading is the
# input (not a state), so its white noise enters the velocity.
states:
  - {{name: lateral_offset, unit: m}}
  - {{name: lateral_velocity, unit: m/s}}
  - {{name: accel_bias, unit: m/s**2}}
dt: {DT!r}                 # s (30 Hz)
F: [[0, 1, 0], [0, 0, -1], [0, 0, 0]]
noise:
  - G: [0, 1, 0]
    from: {{file: ../reports/demo/static.yaml, channel: accel_y, term: white_noise}}
  - G: [0, 0, 1]
    from: {{file: ../reports/demo/static.yaml, channel: accel_y, term: bias_random_walk}}
  - name: steering_wobble
    G: [0, 1, 0]
    density: 0.02                        # m/s^2/sqrt(Hz): a guess, no bench can see it
measurements:
  - name: lateral_offset
    H: [1, 0, 0]
    unit: m
    from: {{file: ../reports/demo/motion.yaml, channel: lateral_offset}}
filter_used:                             # what the rover's filter ran with
  Q: [[0, 0, 0], [0, {float(USED_Q[1, 1])!r}, 0], [0, 0, {float(USED_Q[2, 2])!r}]]
  R: [[{float(USED_R[0, 0])!r}]]
"""


def truth_matrices():
    """Phi and the true discrete Q (Van Loan, written out here on its own)."""
    F = np.array([[0, 1, 0], [0, 0, -1], [0, 0, 0]], float)
    Qc = np.diag([0.0, N_ACC ** 2 + WOBBLE ** 2, K_ACC ** 2])
    n = 3
    M = np.zeros((2 * n, 2 * n))
    M[:n, :n], M[:n, n:], M[n:, n:] = -F, Qc, F.T
    E = expm(M * DT)
    Phi = E[n:, n:].T
    Q = Phi @ E[:n, n:]
    return Phi, 0.5 * (Q + Q.T)


def simulate(rng, Phi, Q, L, P_prior, S):
    H = np.array([[1.0, 0.0, 0.0]])
    x = np.array([0.0, 0.0, BIAS0])
    xh = np.zeros(3)  # prior estimate
    P_post = (np.eye(3) - L @ H) @ P_prior
    sq = np.linalg.cholesky(Q + 1e-30 * np.eye(3))
    rows = []
    for k in range(STEPS):
        z = x[0] + SIGMA_Z * rng.standard_normal()
        nu = z - xh[0]
        xpost = xh + L[:, 0] * nu
        rows.append([k * DT, nu, S[0, 0], *xpost, *x,
                     *(P_post[i, j] for i in range(3) for j in range(i, 3))])
        # The input (measured acceleration) cancels between truth and filter: only
        # the noise matters for the errors, so both propagate without it.
        xh = Phi @ xpost
        x = Phi @ x + sq @ rng.standard_normal(3)
    return np.array(rows)


def main() -> None:
    rng = np.random.default_rng(SEED)
    Phi, Q = truth_matrices()
    H = np.array([[1.0, 0.0, 0.0]])
    P = solve_discrete_are(Phi.T, H.T, USED_Q, USED_R)
    S = H @ P @ H.T + USED_R
    L = P @ H.T / S[0, 0]
    names = ["lateral_offset", "lateral_velocity", "accel_bias"]
    units = ["m", "m/s", "m/s**2"]
    header = (["time [s]", "nu_lateral_offset [m]", "S_lateral_offset_lateral_offset [m**2]"]
              + [f"x_{n} [{u}]" for n, u in zip(names, units)]
              + [f"truth_{n} [{u}]" for n, u in zip(names, units)]
              + [f"P_{names[i]}_{names[j]} [{units[i]}*{units[j]}]"
                 for i in range(3) for j in range(i, 3)])
    OUT.mkdir(exist_ok=True)
    (OUT / "filter_model.yaml").write_text(MODEL, encoding="utf-8")
    for r in range(RUNS):
        data = simulate(rng, Phi, Q, L, P, S)
        path = OUT / f"filter_log_run{r + 1}.csv"
        with open(path, "w", encoding="utf-8") as fh:
            fh.write(",".join(header) + "\n")
            np.savetxt(fh, data, delimiter=",", fmt="%.10g")
        print(f"wrote {path.relative_to(ROOT)}")
    print(f"wrote {(OUT / 'filter_model.yaml').relative_to(ROOT)}")


if __name__ == "__main__":
    main()

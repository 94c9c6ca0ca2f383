"""Jacobians of a nonlinear (Python) model: complex step against finite differences."""

from __future__ import annotations

import numpy as np
import pytest
import yaml

from noisecal.errors import InputError
from noisecal.model.jacobian import central_difference, checked, complex_step

UNICYCLE = '''\
import numpy as np

BEACON = np.array([12.0, -3.0])


def f(x, u, w, dt):
    v, om = u[0] + w[0], u[1] + w[1]
    return np.array([x[0] + v * np.cos(x[2]) * dt, x[1] + v * np.sin(x[2]) * dt,
                     x[2] + om * dt])


def h(x, v):
    dx, dy = BEACON[0] - x[0], BEACON[1] - x[1]
    return np.array([np.sqrt(dx * dx + dy * dy) + v[0], np.arctan2(dy, dx) - x[2] + v[1]])
'''


def _analytic(x, u, dt, beacon=(12.0, -3.0)):
    """Jacobians of the unicycle and range-bearing model, by hand (calculus)."""
    px, py, th = x
    v = u[0]
    F = np.array([[1, 0, -v * np.sin(th) * dt], [0, 1, v * np.cos(th) * dt], [0, 0, 1]])
    L = np.array([[np.cos(th) * dt, 0], [np.sin(th) * dt, 0], [0, dt]])
    dx, dy = beacon[0] - px, beacon[1] - py
    r2 = dx * dx + dy * dy
    r = np.sqrt(r2)
    H = np.array([[-dx / r, -dy / r, 0], [dy / r2, -dx / r2, -1]])
    return F, L, H, np.eye(2)


def test_complex_step_against_analytic_and_scipy():
    """Complex step equals the hand-derived Jacobian to rounding (Squire & Trapp 1998),
    and scipy.differentiate.jacobian (adaptive finite differences) to 1e-8."""
    x0 = np.array([2.0, 1.0, 0.7])
    # arctan of the ratio (12 - x0 > 0 here): numpy's arctan2 takes no complex numbers.
    fun = (lambda x: np.array([np.sqrt((12 - x[0]) ** 2 + (-3 - x[1]) ** 2),
                               np.arctan((-3 - x[1]) / (12 - x[0])) - x[2]]))
    H = _analytic(x0, [1.5, 0.1], 0.1)[2]
    assert np.allclose(complex_step(fun, x0), H, rtol=1e-13, atol=1e-15)
    assert np.allclose(central_difference(fun, x0), H, rtol=1e-7, atol=1e-9)
    differentiate = pytest.importorskip("scipy.differentiate")
    ref = differentiate.jacobian(lambda X: np.stack(
        [np.sqrt((12 - X[0]) ** 2 + (-3 - X[1]) ** 2),
         np.arctan2(-3 - X[1], 12 - X[0]) - X[2]]), x0).df
    assert np.allclose(complex_step(fun, x0), ref, rtol=1e-8, atol=1e-10)


def test_python_model_end_to_end(tmp_path, run_cli):
    """Q = L diag(q/dt) L^T and R = M diag(sigma^2) M^T at the operating point, with
    the four Jacobians as derived by hand; Q[theta, theta] = q_omega dt (a turn-rate
    noise of density q integrated over dt; common practice, no source)."""
    (tmp_path / "uni.py").write_text(UNICYCLE)
    (tmp_path / "m.yaml").write_text(
        "states: [px, py, theta]\ndt: 0.1\npython: uni.py\n"
        "operating_point: {x: [2.0, 1.0, 0.7], u: [1.5, 0.1]}\n"
        "noise:\n  - {name: speed, density: 0.05}\n  - {name: turn, density: 0.01}\n"
        "measurements:\n  - {name: range, variance: 0.04}\n  - {name: bearing, variance: 1.0e-4}\n")
    status, out, err = run_cli("filter", tmp_path / "m.yaml", "-o", tmp_path / "q.yaml")
    assert status == 0, err
    doc = yaml.safe_load((tmp_path / "q.yaml").read_text())
    F, L, H, M = _analytic([2.0, 1.0, 0.7], [1.5, 0.1], 0.1)
    jac = doc["jacobians"]
    for name, want in (("F", F), ("L", L), ("H", H), ("M", M)):
        assert np.allclose(jac[name]["matrix"], want, rtol=1e-5, atol=1e-9), name
    # h's arctan2 of the state takes no complex step: H falls back to differences.
    assert [jac[k]["method"] for k in "FLM"] == ["complex step"] * 3
    assert jac["H"]["method"].startswith("central differences")
    Q = L @ np.diag([0.05 ** 2, 0.01 ** 2]) @ L.T / 0.1
    assert np.allclose(doc["filter"]["Q"], Q, rtol=1e-5, atol=1e-15)
    assert doc["filter"]["Q"][2][2] == pytest.approx(0.01 ** 2 * 0.1, rel=1e-5)
    assert np.allclose(doc["filter"]["R"], np.diag([0.04, 1e-4]), rtol=1e-6)


def test_function_without_complex_support_falls_back():
    """math.sin refuses complex numbers: central differences are used instead, and
    they match the derivative cos (calculus)."""
    import math

    jac = checked(lambda x: np.array([math.sin(x[0])]), np.array([0.3]), "test")
    assert jac.method.startswith("central differences")
    assert jac.J[0, 0] == pytest.approx(math.cos(0.3), rel=1e-8)


def test_non_smooth_function_is_refused():
    """abs is not analytic: its complex step gives 0 where finite differences give -1,
    and the check refuses the model (the point of checking; Martins et al. 2003)."""
    with pytest.raises(InputError, match="differ"):
        checked(lambda x: np.abs(x), np.array([-2.0]), "test")


def test_wrong_output_size_is_one_line(tmp_path, run_cli):
    """h returning fewer values than the measurements listed: one line, status 2 (project
    rule; common practice, no source)."""
    (tmp_path / "uni.py").write_text(UNICYCLE)
    (tmp_path / "m.yaml").write_text(
        "states: [px, py, theta]\ndt: 0.1\npython: uni.py\n"
        "operating_point: {x: [2.0, 1.0, 0.7], u: [1.5, 0.1]}\n"
        "noise:\n  - {density: 0.05}\n  - {density: 0.01}\n"
        "measurements:\n  - {name: range, variance: 0.04}\n  - {name: b, variance: 1.0}\n"
        "  - {name: c, variance: 1.0}\n")
    status, _, err = run_cli("filter", tmp_path / "m.yaml", "-o", tmp_path / "q.yaml")
    assert status == 2 and "h returns 2 values" in err and err.count("\n") == 1


SLIP = '''\
import numpy as np


def f(x, u, w, dt):
    v = u[0] * (1 + w[0])            # slip: noise in proportion to speed
    return np.array([x[0] + v * np.cos(x[2]) * dt, x[1] + v * np.sin(x[2]) * dt,
                     x[2] + (u[1] + w[1]) * dt])


def h(x, v):
    return np.array([x[0] + v[0], x[1] + v[1]])
'''


def test_trajectory_linearises_every_row(tmp_path, run_cli):
    """Along a recorded trajectory Q_k = L_k Qw L_k^T at every row, with L_k by hand
    (calculus): the filter matrices are taken where trace(Q) peaks (the fastest row,
    slip noise growing with speed), and the range spans the slowest to the fastest row."""
    (tmp_path / "slip.py").write_text(SLIP)
    t = np.arange(200) * 0.1
    theta = 0.3 * t
    speed = 1.0 + 0.5 * np.sin(0.2 * t)
    rows = np.column_stack([t, 0.5 * t, 0.2 * t, theta, speed, np.full(200, 0.3)])
    with open(tmp_path / "traj.csv", "w") as fh:
        fh.write("time [s],px [m],py [m],theta [rad],u_0 [m/s],u_1 [rad/s]\n")
        np.savetxt(fh, rows, delimiter=",", fmt="%.12g")
    (tmp_path / "m.yaml").write_text(
        "states: [px, py, theta]\ndt: 0.1\npython: slip.py\ntrajectory: traj.csv\n"
        "noise:\n  - {name: slip, variance: 0.0004}\n  - {name: turn, density: 0.01}\n"
        "measurements:\n  - {name: x, variance: 0.01}\n  - {name: y, variance: 0.01}\n")
    status, out, err = run_cli("filter", tmp_path / "m.yaml", "-o", tmp_path / "q.yaml")
    assert status == 0, err
    doc = yaml.safe_load((tmp_path / "q.yaml").read_text())
    k = int(np.argmax(speed))
    assert doc["trajectory"]["filter_matrices_at_row"] == k

    def q_at(i):
        L = np.array([[speed[i] * np.cos(theta[i]) * 0.1, 0],
                      [speed[i] * np.sin(theta[i]) * 0.1, 0], [0, 0.1]])
        return L @ np.diag([0.0004, 0.01 ** 2 / 0.1]) @ L.T

    assert np.allclose(doc["filter"]["Q"], q_at(k), rtol=1e-5, atol=1e-15)
    lo = np.min([q_at(i) for i in range(200)], axis=0)
    hi = np.max([q_at(i) for i in range(200)], axis=0)
    assert np.allclose(doc["trajectory"]["Q_range"]["min"], lo, rtol=1e-5, atol=1e-15)
    assert np.allclose(doc["trajectory"]["Q_range"]["max"], hi, rtol=1e-5, atol=1e-15)
    assert doc["filter"]["noise_space"]["Qw"] == [[0.0004, 0.0], [0.0, 0.001]]

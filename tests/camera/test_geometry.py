"""Camera geometry against OpenCV, a hand-made homography and Monte Carlo."""

from __future__ import annotations

import numpy as np
import pytest

from noisecal.analysis import camera_geometry as geo
from noisecal.errors import InputError
from tests.camera.sim import camera

import cv2  # noqa: E402  (opencv-python-headless: a test extra)


def test_projection_matches_opencv():
    """Reference library: OpenCV's cv2.projectPoints with the same intrinsics,
    radial–tangential distortion (k1, k2, p1, p2, k3) and pose (its rvec/tvec are
    camera-from-world, ours world-from-camera)."""
    cam = camera(dist=(-0.21, 0.08, 0.0011, -0.0007, -0.015))
    rng = np.random.default_rng(1)
    pts = np.column_stack([rng.uniform(6, 40, 200), rng.uniform(-15, 15, 200),
                           rng.uniform(0, 2, 200)])
    Rcw = cam.R.T
    rvec, _ = cv2.Rodrigues(Rcw)
    tvec = -Rcw @ cam.t
    ref, _ = cv2.projectPoints(pts, rvec, tvec, cam.K, cam.distortion)
    np.testing.assert_allclose(geo.project(pts, cam), ref[:, 0, :], rtol=0, atol=1e-8)


def test_undistort_matches_opencv():
    """Reference library: cv2.undistortPoints (normalized coordinates) inverts the
    same distortion as ours."""
    cam = camera(dist=(-0.21, 0.08, 0.0011, -0.0007, -0.015))
    rng = np.random.default_rng(2)
    uv = np.column_stack([rng.uniform(50, 1870, 100), rng.uniform(50, 1030, 100)])
    ours = geo.normalized_undistorted(uv, cam)
    ref = cv2.undistortPoints(uv[:, None, :], cam.K, cam.distortion,
                              criteria=(cv2.TERM_CRITERIA_COUNT | cv2.TERM_CRITERIA_EPS, 100,
                                        1e-12))[:, 0, :]
    np.testing.assert_allclose(ours, ref, atol=1e-8)


def test_dlt_recovers_a_homography_made_by_hand():
    """Normalized DLT (Hartley & Zisserman, Alg. 4.2) on points mapped by a
    homography written down by hand recovers it up to scale; OpenCV's
    findHomography (method 0: all points, least squares) agrees."""
    H = np.array([[2.0, 0.3, 100.0], [-0.1, 1.5, 50.0], [0.001, 0.002, 1.0]])
    src = np.array([[0, 0], [10, 0], [10, 8], [0, 8], [5, 3], [2, 7]], dtype=float)
    dst = geo.apply_homography(H, src)
    got = geo.homography_dlt(src, dst)
    np.testing.assert_allclose(got / got[2, 2], H, rtol=1e-9, atol=1e-10)
    ref, _ = cv2.findHomography(src, dst, 0)
    # OpenCV refines in single precision: agreement to 1e-4.
    np.testing.assert_allclose(got, ref / ref[2, 2], rtol=1e-4, atol=1e-7)


def test_dlt_refuses_collinear_points():
    """Points on one line do not fix a homography (Hartley & Zisserman, §4.1)."""
    src = np.array([[0, 0], [1, 1], [2, 2], [3, 3], [4, 4.0]])
    with pytest.raises(InputError, match="do not fix a homography"):
        geo.homography_dlt(src, src * 2 + 1)


def test_ray_on_the_ground_inverts_the_projection():
    """A ground point projected and cast back on the plane comes back (pinhole
    geometry, common practice, no source)."""
    cam = camera()
    pts = np.array([[8.0, 2.0, 0.0], [30.0, -10.0, 0.0], [44.0, 12.0, 0.0]])
    back = geo.ground_point(geo.project(pts, cam), cam, 0.0)
    np.testing.assert_allclose(back, pts[:, :2], atol=1e-9)


def test_first_order_propagation_against_monte_carlo():
    """J Σ Jᵀ (first order, as an EKF propagates) against the Monte Carlo covariance
    of the exact pixel → ground mapping: within 5 % at moderate range. Along the
    line of sight it equals the pinhole's geometry: a point at range r seen from
    height h lies at depression θ = atan(h / r), dr/dθ = (h² + r²)/h, and one
    pixel in v turns the ray by cos²ψ / f, ψ = θ − tilt (pinhole geometry; the
    projection divides by depth, so σ grows about as r² far out; common
    practice, no source)."""
    cam = camera(dist=(0, 0, 0, 0, 0))
    Sigma = np.diag([0.3 ** 2, 0.4 ** 2])
    rng = np.random.default_rng(3)
    h, f, tilt = 7.5, 1450.0, np.radians(28.0)
    for x in (8.0, 16.0, 32.0):
        p = geo.project(np.array([[x, 0.0, 0.0]]), cam)
        J = geo.ground_jacobian(p, cam)[0]
        first = J @ Sigma @ J.T
        mc = geo.ground_point(p + rng.standard_normal((200_000, 2)) @ np.sqrt(Sigma), cam)
        emp = np.cov(mc, rowvar=False)
        np.testing.assert_allclose(np.diag(emp), np.diag(first), rtol=0.05)
        corr = (lambda C: C[0, 1] / np.sqrt(C[0, 0] * C[1, 1]))
        assert corr(emp) == pytest.approx(corr(first), abs=0.02)
        psi = np.arctan2(h, x) - tilt
        expected = (h * h + x * x) / h * np.cos(psi) ** 2 / f * 0.4
        assert np.sqrt(first[0, 0]) == pytest.approx(expected, rel=0.01)

"""Pinhole projection with radial–tangential distortion, its inverse, ground rays, DLT.

Conventions: the pose is world-from-camera (p_world = R p_cam + t); the camera
frame is x right, y down, z forward; pixel (u, v) with u to the right, v down.
A camera's R and t are either one pose, shapes (3, 3) and (3,), or one pose
per row of the points or pixels, shapes (n, 3, 3) and (n, 3) (a moving camera).

References
----------
R. Hartley, A. Zisserman, *Multiple View Geometry in Computer Vision*, 2nd ed.,
2003 (pinhole model; normalized DLT for a homography, Alg. 4.2).
D. C. Brown, "Decentering distortion of lenses", Photogrammetric Engineering 32(3),
1966 (radial–tangential distortion).
"""

from __future__ import annotations

import numpy as np

from ..errors import AnalysisError, InputError


def to_camera(points: np.ndarray, R: np.ndarray, t: np.ndarray) -> np.ndarray:
    """World points (n, 3) → camera frame (n, 3); R, t one pose or one per row."""
    d = np.asarray(points, dtype=float) - t
    return np.einsum("ni,nij->nj", d, R) if R.ndim == 3 else d @ R


def distort(xn: np.ndarray, dist: np.ndarray) -> np.ndarray:
    """Normalized image points (n, 2) → distorted normalized points (n, 2)."""
    k1, k2, p1, p2, k3 = dist
    x, y = xn[:, 0], xn[:, 1]
    r2 = x * x + y * y
    radial = 1 + k1 * r2 + k2 * r2 ** 2 + k3 * r2 ** 3
    xd = x * radial + 2 * p1 * x * y + p2 * (r2 + 2 * x * x)
    yd = y * radial + p1 * (r2 + 2 * y * y) + 2 * p2 * x * y
    return np.column_stack([xd, yd])


def undistort(xd: np.ndarray, dist: np.ndarray, iterations: int = 30) -> np.ndarray:
    """Invert :func:`distort` by Newton iteration (numerical Jacobian), shape (n, 2)."""
    x = xd.copy()
    for _ in range(iterations):
        f = distort(x, dist) - xd
        h = 1e-7
        J = np.empty((x.shape[0], 2, 2))
        for j in range(2):
            e = np.zeros(2)
            e[j] = h
            J[:, :, j] = (distort(x + e, dist) - distort(x - e, dist)) / (2 * h)
        step = np.linalg.solve(J, f[:, :, None])[:, :, 0]
        x = x - step
        if np.abs(step).max() < 1e-14:
            break
    return x


def project(points: np.ndarray, camera, where: str = "") -> np.ndarray:
    """World points (n, 3) → pixels (n, 2), with distortion.

    Raises
    ------
    InputError
        A point at or behind the camera (z ≤ 0 in the camera frame).
    """
    pc = to_camera(points, camera.R, camera.t)
    behind = np.flatnonzero(pc[:, 2] <= 1e-9)
    if behind.size:
        raise InputError(f"{where}point {behind[0]} is behind the camera (depth "
                         f"{pc[behind[0], 2]:.3g} m); check the camera pose (world-from-camera, "
                         "z forward) or the survey")
    xn = pc[:, :2] / pc[:, 2:3]
    xd = distort(xn, camera.distortion)
    K = camera.K
    return np.column_stack([K[0, 0] * xd[:, 0] + K[0, 2], K[1, 1] * xd[:, 1] + K[1, 2]])


def normalized_undistorted(uv: np.ndarray, camera) -> np.ndarray:
    """Pixels (n, 2) → normalized image points with the distortion removed, (n, 2)."""
    K = camera.K
    xd = np.column_stack([(uv[:, 0] - K[0, 2]) / K[0, 0], (uv[:, 1] - K[1, 2]) / K[1, 1]])
    return undistort(xd, camera.distortion)


def undistorted_pixels(uv: np.ndarray, camera) -> np.ndarray:
    """Pixels (n, 2) → where a distortion-free camera would see them, px (n, 2)."""
    K = camera.K
    xn = normalized_undistorted(uv, camera)
    return np.column_stack([xn[:, 0] * K[0, 0] + K[0, 2], xn[:, 1] * K[1, 1] + K[1, 2]])


def pixel_rays(uv: np.ndarray, camera) -> np.ndarray:
    """Pixels (n, 2) → unit ray directions in the world (n, 3), distortion removed."""
    xn = normalized_undistorted(uv, camera)
    v = np.column_stack([xn, np.ones(xn.shape[0])])
    rays = np.einsum("nij,nj->ni", camera.R, v) if camera.R.ndim == 3 else v @ camera.R.T
    return rays / np.linalg.norm(rays, axis=1, keepdims=True)


def ground_point(uv: np.ndarray, camera, height: np.ndarray | float = 0.0) -> np.ndarray:
    """Intersection of each pixel's ray with the horizontal plane z = height, (n, 2).

    Raises
    ------
    AnalysisError
        A ray that does not reach the plane in front of the camera.
    """
    rays = pixel_rays(uv, camera)
    h = np.broadcast_to(np.asarray(height, dtype=float), (uv.shape[0],))
    with np.errstate(divide="ignore", invalid="ignore"):
        s = (h - camera.t[..., 2]) / rays[:, 2]
    bad = np.flatnonzero(~(s > 0))
    if bad.size:
        raise AnalysisError(f"detection {bad[0]}'s ray does not meet the ground plane in front "
                            "of the camera (it points at or above the horizon); check the "
                            "camera pose")
    return camera.t[..., :2] + s[:, None] * rays[:, :2]


def ground_jacobian(uv: np.ndarray, camera, height=0.0, step: float = 0.05) -> np.ndarray:
    """d(ground x, y)/d(u, v) per pixel by central differences, shape (n, 2, 2), m/px."""
    J = np.empty((uv.shape[0], 2, 2))
    for j in range(2):
        e = np.zeros(2)
        e[j] = step
        J[:, :, j] = (ground_point(uv + e, camera, height) -
                      ground_point(uv - e, camera, height)) / (2 * step)
    return J


def projection_jacobian(points: np.ndarray, camera, step: float = 1e-4) -> np.ndarray:
    """d(u, v)/d(world x, y, z) per point, shape (n, 2, 3), px/m."""
    J = np.empty((points.shape[0], 2, 3))
    for j in range(3):
        e = np.zeros(3)
        e[j] = step
        J[:, :, j] = (project(points + e, camera) - project(points - e, camera)) / (2 * step)
    return J


def _normalizer(p: np.ndarray) -> np.ndarray:
    """Similarity that moves points (n, 2) to the origin with mean distance √2 (Hartley)."""
    c = p.mean(axis=0)
    d = np.mean(np.linalg.norm(p - c, axis=1))
    if d == 0:
        raise InputError("the homography points all coincide; survey at least four "
                         "distinct floor points")
    s = np.sqrt(2) / d
    return np.array([[s, 0, -s * c[0]], [0, s, -s * c[1]], [0, 0, 1.0]])


def homography_dlt(src: np.ndarray, dst: np.ndarray) -> np.ndarray:
    """Normalized DLT: H with dst ~ H src, from n ≥ 4 correspondences (n, 2) each.

    Raises
    ------
    InputError
        Fewer than four points, or points that do not fix a homography (three or
        more on one line, giving a singular system).
    """
    src = np.asarray(src, dtype=float)
    dst = np.asarray(dst, dtype=float)
    if src.shape[0] < 4:
        raise InputError(f"a homography needs at least 4 floor points; {src.shape[0]} given")
    Ts, Td = _normalizer(src), _normalizer(dst)
    hs = np.column_stack([src, np.ones(len(src))]) @ Ts.T
    hd = np.column_stack([dst, np.ones(len(dst))]) @ Td.T
    rows = []
    for (x, y, w), (u, v, z) in zip(hs, hd):
        rows.append([0, 0, 0, -z * x, -z * y, -z * w, v * x, v * y, v * w])
        rows.append([z * x, z * y, z * w, 0, 0, 0, -u * x, -u * y, -u * w])
    A = np.array(rows)
    _, s, vt = np.linalg.svd(A)
    if s.shape[0] >= 8 and s[7] <= 1e-10 * s[0]:
        raise InputError("the floor points do not fix a homography (three or more on one "
                         "line); survey points spread over the floor")
    Hn = vt[-1].reshape(3, 3)
    H = np.linalg.inv(Td) @ Hn @ Ts
    return H / H[2, 2]


def apply_homography(H: np.ndarray, p: np.ndarray) -> np.ndarray:
    """Points (n, 2) mapped by H, shape (n, 2)."""
    q = np.column_stack([p, np.ones(len(p))]) @ H.T
    return q[:, :2] / q[:, 2:3]

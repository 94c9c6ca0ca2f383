"""Simulated camera sessions with known pixel noise, outliers and survey error."""

from __future__ import annotations

import numpy as np

from noisecal.analysis.camera_geometry import project
from noisecal.ingest.camera import Camera, Detections, Survey


def camera(dist=(-0.08, 0.012, 0.0004, -0.0003, 0.0), tilt_deg=28.0, height=7.5):
    t = np.radians(tilt_deg)
    forward = np.array([np.cos(t), 0.0, -np.sin(t)])
    right = np.array([0.0, -1.0, 0.0])
    R = np.column_stack([right, np.cross(forward, right), forward])
    K = np.array([[1450.0, 0, 952.5], [0, 1450.0, 544.0], [0, 0, 1]])
    return Camera(1920, 1080, K, np.array(dist), R, np.array([0.0, 0.0, height]), None, "sim")


def session(seed: int, targets: int = 20, frames: int = 80, sigma=(0.3, 0.4),
            outliers: float = 0.05, survey_sigma: float = 0.003, cam=None):
    rng = np.random.default_rng(seed)
    cam = cam or camera()
    xy = []
    while len(xy) < targets:
        p = np.array([[rng.uniform(6, 45), rng.uniform(-20, 20), 0.0]])
        uv = project(p, cam)[0]
        if 60 < uv[0] < cam.width - 60 and 60 < uv[1] < cam.height - 60:
            xy.append(p[0])
    surveyed = np.array(xy)
    true = surveyed + rng.normal(0, survey_sigma, surveyed.shape)
    clean = project(true, cam)
    ids = tuple(f"T{k}" for k in range(targets))
    uv = np.repeat(clean, frames, axis=0) + rng.standard_normal((targets * frames, 2)) * sigma
    bad = rng.random(targets * frames) < outliers
    uv[bad] += rng.choice([-1, 1], (bad.sum(), 2)) * rng.uniform(4, 25, (bad.sum(), 2))
    uv = np.clip(uv, 0, [cam.width, cam.height])
    time = np.tile(np.arange(frames) / 10.0, targets)
    det = Detections(time, tuple(np.repeat(ids, frames)), uv, None, "sim", "")
    survey = Survey(ids, surveyed, np.full(targets, survey_sigma), "sim")
    return cam, survey, det

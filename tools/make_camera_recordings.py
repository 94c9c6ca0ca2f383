"""Make the camera demo recordings in recordings/ (invented data, fixed seed).

Scenario (invented): the fictional "Heron Quay" container yard. A fixed
monitoring camera, the fictional "HQ-cam 2" (1920×1080, fx = fy = 1450 px,
mild barrel distortion), sits on a 7.5 m mast and looks down the yard at 28°
below the horizon. Thirty fiducial targets lie on the ground (z = 0) between 6
and 45 m, surveyed by total station to 3 mm (stated in the survey file). A
detector reports each target at 10 Hz for 60 s, with a score.

True values (the data are simulated from exactly these):

=====================  ======================================================
pixel noise            σ_u = 0.30 px, σ_v = 0.40 px, correlation 0 (white)
outliers               5.0 % of detections: jumps of 4–25 px, scores low
survey error           3 mm per axis, fixed per target (as the file states)
=====================  ======================================================

Ground noise is not simulated: it follows from the pixel noise through the
geometry (σ on the ground grows about as range² along the line of sight).
Run: ``python tools/make_camera_recordings.py``.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from noisecal.analysis.camera_geometry import project
from noisecal.ingest.camera import Camera

SEED = 20261203
WIDTH, HEIGHT, F = 1920, 1080, 1450.0
DIST = np.array([-0.08, 0.012, 0.0004, -0.0003, 0.0])
MAST_M, TILT_DEG = 7.5, 28.0
SIGMA_PX = (0.30, 0.40)
OUTLIERS = 0.05
SURVEY_SIGMA_M = 0.003
RATE_HZ, SECONDS = 10.0, 60.0


def pose():
    """World-from-camera: camera looking along +x, tilted down by TILT_DEG."""
    t = np.radians(TILT_DEG)
    forward = np.array([np.cos(t), 0.0, -np.sin(t)])
    right = np.array([0.0, -1.0, 0.0])
    down = np.cross(forward, right)
    return np.column_stack([right, down, forward]), np.array([0.0, 0.0, MAST_M])


def main() -> None:
    rng = np.random.default_rng(SEED)
    folder = Path(__file__).resolve().parent.parent / "recordings"
    R, t = pose()
    K = np.array([[F, 0, WIDTH / 2 - 7.5], [0, F, HEIGHT / 2 + 4.0], [0, 0, 1.0]])
    cam = Camera(WIDTH, HEIGHT, K, DIST, R, t, None, "")
    targets = []
    while len(targets) < 30:
        x, y = rng.uniform(6, 45), rng.uniform(-20, 20)
        uv = project(np.array([[x, y, 0.0]]), cam)[0]
        if 60 < uv[0] < WIDTH - 60 and 60 < uv[1] < HEIGHT - 60:
            targets.append((x, y))
    xyz = np.column_stack([np.array(targets), np.zeros(len(targets))])
    true_xyz = xyz + rng.normal(0, SURVEY_SIGMA_M, xyz.shape)  # surveyed = true + error
    with open(folder / "yard_survey.csv", "w") as fh:
        fh.write("# Invented demo data (tools/make_camera_recordings.py): Heron Quay targets.\n")
        fh.write("id,x [m],y [m],z [m],sigma [m]\n")
        for k, p in enumerate(xyz):
            fh.write(f"T{k + 1:02d},{p[0]:.4f},{p[1]:.4f},{p[2]:.4f},{SURVEY_SIGMA_M}\n")
    rows = []
    clean = project(true_xyz, cam)
    for frame in range(int(SECONDS * RATE_HZ)):
        time = frame / RATE_HZ
        for k in range(len(targets)):
            uv = clean[k] + rng.normal(0, 1, 2) * SIGMA_PX
            score = rng.uniform(0.7, 1.0)
            if rng.random() < OUTLIERS:
                uv = uv + rng.choice([-1, 1], 2) * rng.uniform(4, 25, 2)
                score = rng.uniform(0.3, 0.8)
            uv = np.clip(uv, 0, [WIDTH, HEIGHT])
            rows.append((time, f"T{k + 1:02d}", uv[0], uv[1], score))
    with open(folder / "yard_detections.csv", "w") as fh:
        fh.write("# Invented demo data (tools/make_camera_recordings.py): HQ-cam 2 detections.\n")
        fh.write("time [s],id,u [px],v [px],score [1]\n")
        for r in rows:
            fh.write(f"{r[0]:.2f},{r[1]},{r[2]:.3f},{r[3]:.3f},{r[4]:.3f}\n")
    rot = "\n".join(f"      - [{', '.join(f'{v:.12f}' for v in row)}]" for row in R)
    (folder / "yard_camera.yaml").write_text(
        "# HQ-cam 2 on its mast (invented demo). Pose: world-from-camera; camera axes\n"
        "# x right, y down, z forward.\n"
        "camera:\n"
        f"  width: {WIDTH}\n  height: {HEIGHT}\n"
        f"  fx: {F}\n  fy: {F}\n  cx: {K[0, 2]}\n  cy: {K[1, 2]}\n"
        f"  distortion: [{', '.join(str(v) for v in DIST)}]\n"
        "  pose:\n"
        f"    position: [{t[0]}, {t[1]}, {t[2]}]\n"
        f"    rotation:\n{rot}\n")
    print(f"camera: {len(rows)} detections of {len(targets)} targets")


if __name__ == "__main__":
    main()

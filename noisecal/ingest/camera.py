"""Camera session inputs: the camera file, the target survey, the detections.

Formats (noisecal's own):

- camera YAML::

      camera:
        width: 1920            # px
        height: 1080
        fx: 1400.0             # px
        fy: 1400.0
        cx: 960.0
        cy: 540.0
        distortion: [k1, k2, p1, p2, k3]      # radial-tangential (Brown-Conrady)
        pose:                                  # world-from-camera
          position: [x, y, z]                  # m
          rotation: [[...], [...], [...]]      # columns: camera x, y, z axes in world
      ground: {homography: [[...], [...], [...]]}   # optional: ground (x, y, 1) -> pixel

  The camera frame is the optical one: x right, y down, z forward.
- survey CSV: ``id,x [m],y [m],z [m]`` and optionally ``sigma [m]`` (per-axis
  standard deviation of the surveyed position).
- detections CSV: ``time [s],id,u [px],v [px]`` and optionally ``score [1]``.

Pixels are counted, not lengths: ``px`` is never converted (a unit library would
read it as a printer's 1/96 inch).
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..errors import InputError
from ..units import split_header, to_si
from .yaml_file import TABLE_CAP, read_side_file, read_yaml

PIXEL_UNITS = ("px", "pixel", "pixels")


@dataclass(frozen=True)
class Camera:
    """A calibrated camera at a surveyed pose.

    Attributes
    ----------
    width, height : int
        Image size, px.
    K : ndarray, shape (3, 3)
        Intrinsic matrix, px.
    distortion : ndarray, shape (5,)
        k1, k2, p1, p2, k3.
    R : ndarray, shape (3, 3)
        World-from-camera rotation.
    t : ndarray, shape (3,)
        Camera position in the world, m.
    homography : ndarray, shape (3, 3) or None
        Ground (x, y, 1) → undistorted pixel (u, v, 1), if given.
    source : str
    """

    width: int
    height: int
    K: np.ndarray
    distortion: np.ndarray
    R: np.ndarray
    t: np.ndarray
    homography: np.ndarray | None
    source: str


def _number(data, key, where, positive=False):
    value = data.get(key) if isinstance(data, dict) else None
    if isinstance(value, int) and not isinstance(value, bool):
        try:
            value = float(value)  # an integer beyond float range overflows here
        except OverflowError:
            value = float("inf")
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not np.isfinite(value):
        raise InputError(f"{where}: '{key}' must be a number")
    if positive and value <= 0:
        raise InputError(f"{where}: '{key}' must be positive")
    return float(value)


def _matrix(value, shape, where, what):
    try:
        arr = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise InputError(f"{where}: {what} must be numbers") from None
    if arr.shape != shape or not np.isfinite(arr).all():
        raise InputError(f"{where}: {what} must be {'×'.join(map(str, shape))} finite numbers")
    return arr


def check_rotation(R: np.ndarray, where: str) -> None:
    """Refuse a matrix that is not a rotation (orthonormal, determinant +1)."""
    with np.errstate(over="ignore", invalid="ignore"):  # huge entries: refused below
        err = float(np.abs(R.T @ R - np.eye(3)).max())
        det = float(np.linalg.det(R))
    if not err <= 1e-6 or not det > 0:
        raise InputError(f"{where}: the rotation is not a rotation (|RᵀR − I| = {err:.2g}, "
                         f"det = {det:.3g}); give an orthonormal matrix with "
                         "determinant +1, columns = camera axes in the world")


def read_camera(path: str | Path) -> Camera:
    """Read and check a camera file."""
    path = Path(path)
    doc = read_yaml(path, "camera file")
    cam = doc.get("camera") if isinstance(doc, dict) else None
    where = f"{path}, camera"
    if not isinstance(cam, dict):
        raise InputError(f"{path}: needs a 'camera:' mapping (width, height, fx, fy, cx, cy, "
                         "distortion, pose)")
    width = _number(cam, "width", where, positive=True)
    height = _number(cam, "height", where, positive=True)
    fx, fy = (_number(cam, k, where, positive=True) for k in ("fx", "fy"))
    cx, cy = (_number(cam, k, where) for k in ("cx", "cy"))
    dist = _matrix(cam.get("distortion", [0, 0, 0, 0, 0]), (5,), where,
                   "distortion [k1, k2, p1, p2, k3]")
    pose = cam.get("pose")
    if not isinstance(pose, dict):
        raise InputError(f"{where}: needs 'pose: {{position: [x, y, z], rotation: 3×3}}' "
                         "(world-from-camera)")
    t = _matrix(pose.get("position"), (3,), f"{where}.pose", "position")
    R = _matrix(pose.get("rotation"), (3, 3), f"{where}.pose", "rotation")
    check_rotation(R, f"{where}.pose")
    H = None
    ground = doc.get("ground")
    if isinstance(ground, dict) and "homography" in ground:
        H = _matrix(ground["homography"], (3, 3), f"{path}, ground", "homography")
        check_homography(H, f"{path}, ground.homography")
    K = np.array([[fx, 0, cx], [0, fy, cy], [0, 0, 1.0]])
    return Camera(int(width), int(height), K, dist, R, t, H, str(path))


def check_homography(H: np.ndarray, where: str) -> None:
    """Refuse a singular (or numerically singular) homography."""
    s = np.linalg.svd(H, compute_uv=False)
    if s[-1] <= 1e-12 * s[0]:
        cond = s[0] / max(s[-1], 1e-300)
        raise InputError(f"{where}: the homography is singular (condition {cond:.3g}); it "
                         "cannot map the image to the ground: estimate it from four or more "
                         "surveyed floor points, no three on one line")


def _data_lines(text: str) -> list:
    """1-based line numbers of the lines pandas reads (header first): not blank, not
    a ``#`` comment line; a quoted field spanning lines is not followed."""
    return [i + 1 for i, line in enumerate(text.splitlines())
            if line.split("#", 1)[0].strip()]


def _line(frame, row: int) -> int:
    """The file's line number of data row ``row`` (0-based) of a side table."""
    lines = frame.attrs.get("lines", [])
    return lines[row + 1] if row + 1 < len(lines) else row + 2


def _read_table(path: Path, what: str):
    import io

    import pandas as pd

    data = read_side_file(path, f"{what} file", TABLE_CAP)
    try:
        text = data.decode("utf-8")
        frame = pd.read_csv(io.StringIO(text), comment="#", dtype=str, skipinitialspace=True)
    except (pd.errors.ParserError, UnicodeDecodeError, pd.errors.EmptyDataError, ValueError):
        raise InputError(f"{path}: cannot read the {what} as CSV; check the delimiter "
                         "(commas), the header and that it is UTF-8 text") from None
    if frame.shape[0] == 0:
        raise InputError(f"{path}: the {what} has a header but no rows")
    # Line numbers in messages count the comment and blank lines pandas skipped.
    frame.attrs["lines"] = _data_lines(text)
    frame.attrs["sha256"] = hashlib.sha256(data).hexdigest()
    return frame


def _columns(frame, path, required, optional=()):
    """Map header cells to (name, unit): 'id' has no unit, the others must."""
    found = {}
    for col in frame.columns:
        text = str(col).strip()
        if text == "id":
            found["id"] = (col, None)
            continue
        name, unit = split_header(text, f"{path}, column {text!r}")
        found[name] = (col, unit)
    missing = [c for c in required if c not in found]
    if missing:
        raise InputError(f"{path}: missing column(s) {', '.join(missing)}; the header must "
                         f"name {', '.join(required)}" +
                         (f" (optional: {', '.join(optional)})" if optional else ""))
    return found


def _numeric(frame, col, path, name):
    import pandas as pd

    values = pd.to_numeric(frame[col], errors="coerce").to_numpy(dtype=float)
    bad = np.flatnonzero(~np.isfinite(values))
    if bad.size:
        raise InputError(f"{path}, line {_line(frame, int(bad[0]))}, column {name!r}: "
                         f"{frame[col].iloc[bad[0]]!r} is not a finite number")
    return values


def _in_si(frame, found, name, path, expect):
    col, unit = found[name]
    values = _numeric(frame, col, path, name)
    if expect == "px":
        if unit not in PIXEL_UNITS:
            raise InputError(f"{path}, column {name!r}: unit [{unit}] is not pixels; "
                             "write [px]")
        return values
    si, si_unit = to_si(values, unit, f"{path}, column {name!r}")
    bad = np.flatnonzero(~np.isfinite(si))
    if bad.size:
        raise InputError(f"{path}, line {_line(frame, int(bad[0]))}, column {name!r}: "
                         f"{values[bad[0]]:.6g} [{unit}] overflows in SI; check the value "
                         "and the unit")
    if si_unit != expect:
        raise InputError(f"{path}, column {name!r}: unit [{unit}] is not a "
                         f"{'length' if expect == 'm' else expect}; use e.g. [{expect}]")
    return si


@dataclass(frozen=True)
class Survey:
    """Surveyed target positions.

    Attributes
    ----------
    ids : tuple of str
    xyz : ndarray, shape (k, 3)
        World positions, m.
    sigma : ndarray, shape (k,)
        Per-axis standard deviation, m (zeros when not given).
    source : str
    """

    ids: tuple
    xyz: np.ndarray
    sigma: np.ndarray
    source: str

    def index(self, ids) -> np.ndarray:
        lookup = {name: i for i, name in enumerate(self.ids)}
        return np.array([lookup[i] for i in ids], dtype=int)


def read_survey(path: str | Path) -> Survey:
    """Read and check a survey CSV."""
    path = Path(path)
    frame = _read_table(path, "survey")
    found = _columns(frame, path, ("id", "x", "y", "z"), ("sigma",))
    ids = [str(v).strip() for v in frame[found["id"][0]]]
    dup = sorted({i for i in ids if ids.count(i) > 1})
    if dup:
        raise InputError(f"{path}: target id(s) {', '.join(dup[:5])} appear more than once")
    xyz = np.column_stack([_in_si(frame, found, k, path, "m") for k in ("x", "y", "z")])
    sigma = (_in_si(frame, found, "sigma", path, "m") if "sigma" in found
             else np.zeros(len(ids)))
    if np.any(sigma < 0):
        raise InputError(f"{path}, column 'sigma': a negative standard deviation")
    return Survey(tuple(ids), xyz, sigma, str(path))


@dataclass(frozen=True)
class Detections:
    """Detections of surveyed targets.

    Attributes
    ----------
    time : ndarray, shape (m,)
        s.
    ids : tuple of str, length m
    uv : ndarray, shape (m, 2)
        Detected pixel, px.
    score : ndarray, shape (m,) or None
    source : str
    sha256 : str
    """

    time: np.ndarray
    ids: tuple
    uv: np.ndarray
    score: np.ndarray | None
    source: str
    sha256: str


def read_detections(path: str | Path, survey: Survey, camera: Camera) -> Detections:
    """Read and check detections against the survey and the image size."""
    path = Path(path)
    frame = _read_table(path, "detections")
    found = _columns(frame, path, ("time", "id", "u", "v"), ("score",))
    time = _in_si(frame, found, "time", path, "s")
    ids = tuple(str(v).strip() for v in frame[found["id"][0]])
    known = set(survey.ids)
    for row, name in enumerate(ids):
        if name not in known:
            raise InputError(f"{path}, line {_line(frame, row)}: target id {name!r} is not in "
                             f"the survey "
                             f"{survey.source}; add it there or remove the detection")
    u = _in_si(frame, found, "u", path, "px")
    v = _in_si(frame, found, "v", path, "px")
    outside = np.flatnonzero((u < 0) | (v < 0) | (u > camera.width) | (v > camera.height))
    if outside.size:
        r = outside[0]
        raise InputError(f"{path}, line {_line(frame, int(r))}: detection ({u[r]:.6g}, {v[r]:.6g}) px is "
                         f"outside the {camera.width}×{camera.height} image; check the "
                         "camera file's size or the detector's pixel convention")
    score = None
    if "score" in found:
        col, unit = found["score"]
        score = _numeric(frame, col, path, "score")
    return Detections(time, ids, np.column_stack([u, v]), score, str(path),
                      frame.attrs["sha256"])

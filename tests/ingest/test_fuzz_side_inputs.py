"""Hypothesis fuzzing of the side inputs (YAML) and of Parquet/npz recordings.

Whatever the content, a reader returns or raises a NoisecalError whose message
is one line: never another exception, never a hang (each read runs on a thread
joined with a time limit; examples are bounded). Common practice, no source.
"""

from __future__ import annotations

import os
import threading
from pathlib import Path

import numpy as np
import pytest
import yaml
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from noisecal.errors import NoisecalError
from noisecal.ingest import read_recording
from noisecal.ingest.camera import read_camera
from noisecal.ingest.mapping import read_map, read_odometry_config
from noisecal.jobs.recheck import load_baseline, read_limits

ROOT = Path(__file__).resolve().parents[2]
LIMIT_S = 20.0
EXAMPLES = int(os.environ.get("NOISECAL_FUZZ_EXAMPLES", "40"))
"""Examples per test; a longer hunt: NOISECAL_FUZZ_EXAMPLES=2000 (then random, not fixed)."""
FUZZ = settings(max_examples=EXAMPLES, deadline=None, derandomize=EXAMPLES <= 40,
                database=None, suppress_health_check=[HealthCheck.function_scoped_fixture,
                                                      HealthCheck.too_slow])


def _outcome(call, *args):
    """Run ``call(*args)`` on a thread; fail on a hang or a non-project exception."""
    box = {}

    def run():
        try:
            call(*args)
            box["ok"] = True
        except NoisecalError as exc:
            box["error"] = exc
        except BaseException as exc:  # noqa: BLE001 -- what the test looks for
            box["other"] = exc

    worker = threading.Thread(target=run, daemon=True)
    worker.start()
    worker.join(LIMIT_S)
    assert not worker.is_alive(), f"{call.__name__} did not return within {LIMIT_S} s"
    if "other" in box:
        raise box["other"]
    if "error" in box:
        text = str(box["error"])
        assert text and "\n" not in text and "Traceback" not in text, text
    return box


# --- YAML side files ---------------------------------------------------------------------

SCALARS = st.one_of(
    st.none(), st.booleans(), st.integers(), st.integers(min_value=10 ** 30, max_value=10 ** 60),
    st.floats(allow_nan=True, allow_infinity=True), st.text(max_size=12),
    st.sampled_from(["1e3", ".5", "+2", "-inf", ".nan", "0x1F", "010", "on", "path.offset",
                     "beacon.B1.range", "x", "yaw", "2024-13-45"]),
)
KEYS = st.sampled_from(["measures", "pose", "path", "beacons", "covariate", "encoders",
                        "increments", "window_s", "left", "right", "ticks_per_rev",
                        "wheel_radius_m", "track_width_m", "dx", "dy", "dyaw", "camera",
                        "width", "height", "fx", "fy", "cx", "cy", "distortion", "position",
                        "rotation", "ground", "homography", "limits", "max", "min", "x", "y",
                        "layout", "checksum"])
VALUES = st.recursive(SCALARS, lambda kids: st.one_of(
    st.lists(kids, max_size=5), st.dictionaries(st.one_of(KEYS, st.integers()), kids,
                                                max_size=5)), max_leaves=25)
DOCS = st.one_of(
    VALUES.map(lambda v: yaml.safe_dump(v, default_flow_style=None)),
    st.text(alphabet=st.sampled_from(list("[]{}:,-&*!|>'\"#\n ab01e.+")), max_size=200),
    st.binary(max_size=100),
)

SAMPLES = {
    "map": (ROOT / "recordings" / "drive_map.yaml", read_map),
    "odometry": (ROOT / "recordings" / "encoder_config.yaml", read_odometry_config),
    "camera": (ROOT / "recordings" / "yard_camera.yaml", read_camera),
    "limits": (None, read_limits),
    "baseline": (ROOT / "reports" / "demo" / "static.yaml",
                 lambda p: load_baseline(p, accept_edited=True)),
}


def _write(path: Path, doc) -> None:
    if isinstance(doc, bytes):
        path.write_bytes(doc)
    else:
        path.write_text(doc, encoding="utf-8")


@pytest.mark.parametrize("kind", sorted(SAMPLES))
@FUZZ
@given(doc=DOCS)
def test_fuzzed_yaml_side_files(tmp_path, kind, doc):
    path = tmp_path / f"{kind}.yaml"
    _write(path, doc)
    _outcome(SAMPLES[kind][1], path)


def _paths(node, prefix=()):
    """Every (path of keys/indices) into a parsed document."""
    yield prefix
    if isinstance(node, dict):
        for k, v in node.items():
            yield from _paths(v, prefix + (k,))
    elif isinstance(node, list):
        for i, v in enumerate(node):
            yield from _paths(v, prefix + (i,))


def _replace(doc, where, value):
    if not where:
        return value
    node = doc
    for key in where[:-1]:
        node = node[key]
    node[where[-1]] = value
    return doc


@pytest.mark.parametrize("kind", ["map", "odometry", "camera", "baseline"])
@FUZZ
@given(data=st.data())
def test_mutated_real_side_files(tmp_path, kind, data):
    """One value of a real file (the demo's) replaced by a random one."""
    sample, reader = SAMPLES[kind]
    doc = yaml.safe_load(sample.read_text(encoding="utf-8"))
    where = data.draw(st.sampled_from(list(_paths(doc))))
    doc = _replace(doc, where, data.draw(VALUES))
    path = tmp_path / f"{kind}.yaml"
    path.write_text(yaml.safe_dump(doc), encoding="utf-8")
    _outcome(reader, path)


# --- Parquet and npz recordings ---------------------------------------------------------

DTYPES = [np.int8, np.int16, np.int32, np.int64, np.uint8, np.uint16, np.uint32, np.uint64,
          np.float16, np.float32, np.float64, np.bool_]
UNITS = st.sampled_from(["s", "ms", "ns", "deg/s", "g", "m/s^2", "1", "degC", "kg", "V",
                         "km", "G", "dB", "px", "furlong", "", "uT"])


@st.composite
def _column(draw, n, dtype=None):
    dtype = np.dtype(dtype or draw(st.sampled_from(DTYPES)))
    if dtype.kind == "b":
        values = draw(st.lists(st.booleans(), min_size=n, max_size=n))
    elif dtype.kind in "iu":
        info = np.iinfo(dtype)
        values = draw(st.one_of(
            st.lists(st.integers(int(info.min), int(info.max)), min_size=n, max_size=n),
            st.integers(int(info.min), int(info.max)).map(
                lambda a: [min(int(info.max), a + 7 * i) for i in range(n)])))
    else:
        width = 16 if dtype == np.float16 else 32 if dtype == np.float32 else 64
        values = draw(st.one_of(
            st.lists(st.floats(width=width, allow_nan=True, allow_infinity=True),
                     min_size=n, max_size=n),
            st.floats(-1e3, 1e3, width=width).map(lambda a: [a + 0.25 * i for i in range(n)])))
    return np.array(values, dtype=dtype)


@st.composite
def _recording(draw):
    """Half plausible (a time ramp, units the jobs read, equal lengths), half hostile."""
    n = draw(st.integers(0, 40))
    plausible = draw(st.booleans())
    if plausible:
        names = ["time [" + draw(st.sampled_from(["s", "ms", "ns"])) + "]"] + [
            f"c{i} [" + draw(st.sampled_from(["deg/s", "g", "1", "degC", "uT"])) + "]"
            for i in range(draw(st.integers(1, 3)))]
        dtype = draw(st.sampled_from(DTYPES[:-1]))
        info = np.iinfo(dtype) if np.dtype(dtype).kind in "iu" else None
        start = draw(st.integers(int(info.min), int(info.max) - 3 * n) if info is not None
                     else st.floats(-1e3, 1e3))
        step = draw(st.integers(1, 3) if info is not None else st.sampled_from([0.25, 1.0]))
        cols = {names[0]: np.array([start + step * i for i in range(n)]).astype(dtype)}
        for name in names[1:]:
            cols[name] = draw(_column(n))
        return cols
    names = ["time [" + draw(UNITS) + "]"] + [
        f"c{i} [" + draw(UNITS) + "]" for i in range(draw(st.integers(0, 3)))]
    if draw(st.booleans()):
        names[draw(st.integers(0, len(names) - 1))] = draw(st.text(max_size=10))
    cols = {}
    for name in names:
        m = n if draw(st.integers(0, 9)) else draw(st.integers(0, 5))
        cols[name] = draw(_column(m))
    return cols


@FUZZ
@given(cols=_recording(), parquet=st.booleans())
def test_fuzzed_columnar_recordings(tmp_path, cols, parquet):
    if parquet:
        import pyarrow as pa
        import pyarrow.parquet as pq

        path = tmp_path / "fuzz.parquet"
        try:
            table = pa.table({k: pa.array(v) for k, v in cols.items()})
        except (pa.ArrowInvalid, ValueError):
            return  # unequal lengths or repeated names: not a Parquet file pyarrow makes
        pq.write_table(table, path)
    else:
        path = tmp_path / "fuzz.npz"
        try:
            np.savez(path, **cols)
        except (ValueError, TypeError):
            return
    _outcome(read_recording, path, None, False)

"""CSV files exported from a ROS topic, read as recordings.

Two header styles are recognised:

* field paths with the stamp split in two, as ROS 2 exports write them:
  ``header.stamp.sec,header.stamp.nanosec,header.frame_id,angular_velocity.x,…``
  (``secs``/``nsecs`` too);
* ``rostopic echo -p`` (ROS 1): ``%time,field.header.seq,field.header.stamp,…``,
  with ``%time`` (the record time) and ``field.header.stamp`` in integer
  nanoseconds.

The time is ``header.stamp`` in exact integer nanoseconds (seconds and
nanoseconds merged as integers, never through a float). Units come from the
message type given (``--type``) through :mod:`noisecal.ingest.ros_messages`;
without one, columns that are all fields of ``sensor_msgs/Imu`` take that
message's units, and the recording's notes say so. Anything else is refused
with the header to write instead. Text columns (``frame_id``) and the
sequence number are left out; covariance columns are read for the notes
("not provided" conventions as in a bag), not as channels.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np

from ..errors import InputError
from .ros_messages import LAYOUTS, RPY, covariance_matrix, normal_type, quaternion_to_rpy

_SNIFF = 1 << 16
_COV = re.compile(r"^(?P<name>.*covariance)(?:[._]?|\[)(?P<i>\d+)\]?$")
_SKIP = {"header.seq", "header.frame_id", "child_frame_id", "header.stamp.sec",
         "header.stamp.nanosec", "header.stamp.secs", "header.stamp.nsecs", "header.stamp",
         "position_covariance_type", "radiation_type", "status.status", "status.service"}


def _first_line(path: Path) -> str | None:
    try:
        with open(path, "rb") as fh:
            head = fh.read(_SNIFF)
    except OSError:
        return None
    text = head.decode("utf-8", "replace").lstrip("\ufeff")
    for line in text.splitlines():
        if line.strip() and not line.lstrip().startswith("#"):
            return line
    return None


def _cells(line: str) -> list:
    return [c.strip() for c in line.split(",")]


def _style(cells: list) -> str | None:
    if cells and cells[0] == "%time":
        return "rostopic"
    names = set(cells)
    if {"header.stamp.sec", "header.stamp.nanosec"} <= names or \
            {"header.stamp.secs", "header.stamp.nsecs"} <= names:
        return "fields"
    return None


def is_ros_export(path: Path) -> bool:
    """Whether a CSV's header is one of the two ROS export styles."""
    line = _first_line(path)
    return line is not None and "[" not in line and _style(_cells(line)) is not None


def _guess_type(fields: list) -> str | None:
    """``sensor_msgs/msg/Imu`` when every data column is one of its fields."""
    imu = LAYOUTS["sensor_msgs/msg/Imu"]
    known = {f for f, _ in imu.fields} | {f"orientation.{a}" for a in "xyzw"}
    if fields and set(fields) <= known and any(f.startswith(("angular_velocity.",
                                                             "linear_acceleration."))
                                               for f in fields):
        return "sensor_msgs/msg/Imu"
    return None


def _rewrite(path: Path, fields: list) -> str:
    cells = ",".join(f"{f} [UNIT]" for f in fields[:4]) + (",…" if len(fields) > 4 else "")
    return (f"{path}: a ROS CSV export whose units noisecal cannot tell; give the message "
            f"type with --type (one of {', '.join(sorted(LAYOUTS))}), or rewrite the header "
            f"as 'time [ns],{cells}' with time = header.stamp.sec * 1000000000 + "
            "header.stamp.nanosec")


class RosCsvSource:
    """A ROS CSV export, read whole and handed out as one block (``headers``, ``blocks``).

    Attributes
    ----------
    headers : list of str
        ``time [ns]`` then ``field.path [unit]`` cells.
    notes : tuple of str
        The export style, where the units came from, the stamp and delay facts,
        the covariance columns' state.
    """

    format = "ros-csv"
    locate = staticmethod(lambda row: f"data row {row + 1} in stamp order")

    def __init__(self, path: Path, msgtype: str | None = None):
        import pyarrow as pa
        import pyarrow.csv as pcsv

        self.path = path
        line = _first_line(path)
        cells = _cells(line)
        style = _style(cells)
        prefix = "field." if style == "rostopic" else ""
        strip = [c[len(prefix):] if c.startswith(prefix) else c for c in cells]
        ints = {c: pa.int64() for c, s in zip(cells, strip)
                if s in ("header.stamp.sec", "header.stamp.nanosec", "header.stamp.secs",
                         "header.stamp.nsecs", "header.stamp") or c == "%time"}
        texts = {c: pa.string() for c, s in zip(cells, strip)
                 if s.endswith("frame_id")}
        try:
            table = pcsv.read_csv(path, read_options=pcsv.ReadOptions(skip_rows=0),
                                  parse_options=pcsv.ParseOptions(),
                                  convert_options=pcsv.ConvertOptions(
                                      column_types={**ints, **texts}))
        except Exception as exc:  # ArrowInvalid: a cell that is not a number, ragged rows
            first = str(exc).splitlines()[0][:160]
            raise InputError(f"{path}: the ROS CSV export cannot be read ({first}); check "
                             "that every row is complete") from None
        if table.num_rows == 0:
            raise InputError(f"{path}: no data rows; record some data")
        columns = {}
        for cell, name in zip(table.column_names, strip):
            col = table.column(cell)
            if col.null_count:
                bad = int(np.flatnonzero(col.is_null().to_numpy(zero_copy_only=False))[0])
                raise InputError(f"{path}, data row {bad + 1}, column {cell!r}: missing "
                                 "value; fill it or remove the row")
            columns[name] = col
        self._read(path, style, columns, msgtype, cells)

    def _read(self, path, style, columns, msgtype, cells) -> None:
        import pyarrow.types as pt

        notes = ["ROS 2 field-path export" if style == "fields" else
                 "rostopic echo -p export (ROS 1)"]
        if style == "fields":
            sec = "header.stamp.sec" if "header.stamp.sec" in columns else "header.stamp.secs"
            nsec = "header.stamp.nanosec" if sec.endswith(".sec") else "header.stamp.nsecs"
            s = columns[sec].to_numpy().astype(np.int64)
            ns = columns[nsec].to_numpy().astype(np.int64)
            if np.any((ns < 0) | (ns >= 1_000_000_000)):
                row = int(np.flatnonzero((ns < 0) | (ns >= 1_000_000_000))[0])
                raise InputError(f"{path}, data row {row + 1}, column {nsec!r}: "
                                 f"{ns[row]} is not within 0 … 999999999 ns; check the export")
            stamps = s * 1_000_000_000 + ns
            recorded = None
        else:
            if "header.stamp" not in columns:
                raise InputError(f"{path}: a rostopic export without field.header.stamp; "
                                 "export a stamped message type, or rewrite the header as "
                                 "'time [ns],…' from %time")
            stamps = columns["header.stamp"].to_numpy().astype(np.int64)
            recorded = columns["%time"].to_numpy().astype(np.int64)
        covs = {}
        data = []
        for name, col in columns.items():
            m = _COV.match(name)
            if m:
                covs.setdefault(m.group("name"), {})[int(m.group("i"))] = col
            elif name in _SKIP or name == "%time" or not (pt.is_integer(col.type)
                                                           or pt.is_floating(col.type)):
                continue
            else:
                data.append(name)
        if msgtype is None:
            guessed = _guess_type(data)
            if guessed is None:
                raise InputError(_rewrite(path, data))
            kind = guessed
            notes.append("units from the sensor_msgs/Imu field names (rad/s, m/s^2; no "
                         "--type given)")
        else:
            kind = normal_type(msgtype)
            if kind not in LAYOUTS:
                raise InputError(f"{path}: --type {msgtype}: not a message type noisecal "
                                 f"reads; give one of {', '.join(sorted(LAYOUTS))}")
            notes.append(f"units from {kind} (--type)")
        layout = LAYOUTS[kind]
        units = dict(layout.fields)
        quat = [q for q in layout.quaternions if all(f"{q}.{a}" in columns for a in "xyzw")]
        quat_fields = {f"{q}.{a}" for q in layout.quaternions for a in "xyzw"}
        unknown = [d for d in data if d not in units and d not in quat_fields]
        if unknown:
            raise InputError(f"{path}: column {unknown[0]!r} is not a numeric field of {kind}; "
                             "check --type, or remove the column")
        order = np.argsort(stamps, kind="stable")
        names = [d for d in data if d in units]
        cols = [columns[d].to_numpy().astype(np.float64)[order] for d in names]
        cov_state = {}
        for spec in layout.covariances:
            parts = covs.get(spec.field)
            if parts and len(parts) == spec.size ** 2:
                arr = np.column_stack([parts[i].to_numpy().astype(float)
                                       for i in range(spec.size ** 2)])
                same = bool((arr == arr[0]).all() or np.isnan(arr).all())
                matrix, state = covariance_matrix(arr[0], spec.size)
                state = state if same else "varies between rows"
                cov_state[spec.field] = state
                notes.append(f"the driver's {spec.field}: " + (
                    "diagonal " + ", ".join(f"{v:.4g}" for v in np.diag(matrix))
                    if state == "provided" else state))
        for q in quat:
            x, y, z, w = (columns[f"{q}.{a}"].to_numpy().astype(float)[order] for a in "xyzw")
            norm = np.sqrt(x * x + y * y + z * z + w * w)
            if (layout.provided and cov_state.get(layout.provided) == "not provided") or \
                    not np.all(norm > 0):
                notes.append(f"{q} not provided (covariance element 0 is -1, or a zero "
                             "quaternion): no roll, pitch, yaw channels")
                continue
            cols.extend(quaternion_to_rpy(x, y, z, w))
            names.extend(f"{q}.{a}" for a in RPY)
            units.update({f"{q}.{a}": "rad" for a in RPY})
        if not names:
            raise InputError(f"{path}: no numeric field of {kind} in the export; check --type")
        notes.append("time is header.stamp (the measurement instant), not the record time")
        if recorded is not None:
            d = (recorded - stamps)[order] / 1e9
            notes.append(f"record time minus header.stamp (transport latency): median "
                         f"{np.median(d):.6g} s, 95th percentile {np.percentile(d, 95):.6g} s, "
                         f"range {d.min():.6g} … {d.max():.6g} s")
        self.notes = tuple(notes)
        self._time = stamps[order]
        self._columns = cols
        self.headers = ["time [ns]"] + [f"{n} [{units[n]}]" for n in names]

    def blocks(self, time_integer: bool, progress=None):
        if progress:
            progress(self._time.shape[0])
        yield self._time, self._columns

"""ROS bags as recordings: ROS 1 ``.bag``, ROS 2 bag folders (sqlite3 or MCAP), bare ``.mcap``.

One topic of a bag is one recording. Its channels are the message's numeric
fields under their field paths (:mod:`noisecal.ingest.ros_messages`), its
time is ``header.stamp`` (the measurement instant, REP 145) in exact integer
nanoseconds, not the time the bag recorded the message. The record-minus-stamp
delay (transport latency) is reported in the recording's notes; a message
without a header falls back to the record time, and the notes say so.

Bags are read by rosbags (pure Python; no ROS install), in memory: the
messages of one topic are decoded into columns, sorted by stamp, and go
through the same checks as a file's (:func:`noisecal.ingest.validate.stream`).
"""

from __future__ import annotations

import hashlib
import os
from dataclasses import dataclass
from operator import attrgetter
from pathlib import Path

import numpy as np

from ..errors import InputError
from .ros_messages import LAYOUTS, RPY, covariance_matrix, normal_type, quaternion_to_rpy

BAG_SUFFIXES = (".bag", ".mcap", ".db3")


@dataclass(frozen=True)
class RosInput(os.PathLike):
    """A recording path with the ROS selections that go with it.

    Passed wherever a recording path goes (it is path-like), so every job
    reads a bag topic, or a CSV export of a given message type, unchanged.

    Attributes
    ----------
    path : str
        Bag (ROS 1 file, ROS 2 folder, ``.mcap``/``.db3`` file) or CSV export.
    topic : str or None
        Topic to read from a bag.
    msgtype : str or None
        Expected message type (``sensor_msgs/msg/Imu`` or ``sensor_msgs/Imu``): a
        bag topic of another type is refused; a CSV export takes its units from it.
    """

    path: str
    topic: str | None = None
    msgtype: str | None = None

    def __fspath__(self) -> str:
        return str(self.path)

    def __str__(self) -> str:
        return str(self.path)


def is_bag(path: Path) -> bool:
    """Whether ``path`` is a bag: a ``.bag``/``.mcap``/``.db3`` file or a ROS 2 bag folder."""
    if path.is_dir():
        return (path / "metadata.yaml").is_file()
    return path.suffix.lower() in BAG_SUFFIXES


def bag_files(path: Path) -> list:
    """The files whose bytes make the bag (a folder: every file in it, sorted)."""
    if path.is_dir():
        return sorted(p for p in path.iterdir() if p.is_file())
    return [path]


def bag_digest(path: Path) -> tuple[str, int]:
    """SHA-256 over the bag's files (name and bytes, in name order) and their total size."""
    h = hashlib.sha256()
    size = 0
    for f in bag_files(path):
        if path.is_dir():
            h.update(f.name.encode("utf-8") + b"\0")
        with open(f, "rb") as fh:
            for chunk in iter(lambda: fh.read(1 << 20), b""):
                h.update(chunk)
                size += len(chunk)
    return h.hexdigest(), size


def _format(path: Path) -> str:
    if path.is_dir():
        if any(p.suffix == ".mcap" for p in path.iterdir()):
            return "ros2-mcap"
        return "ros2-sqlite3"
    return {".bag": "ros1-bag", ".mcap": "ros2-mcap", ".db3": "ros2-sqlite3"}[path.suffix.lower()]


def _bad_bag(path: Path, exc: BaseException | None = None) -> InputError:
    why = f" ({str(exc).splitlines()[0][:120]})" if exc is not None and str(exc) else ""
    return InputError(f"{path}: the bag cannot be read{why}; it may be truncated or still "
                      "being written: copy it again, or for a ROS 1 bag run 'rosbag reindex'")


def _listing(topics: dict) -> str:
    return "; ".join(f"{name} ({info})" for name, info in sorted(topics.items())) or "none"


def _open_reader(path: Path):
    from rosbags.highlevel import AnyReader
    from rosbags.typesys import Stores, get_typestore

    try:
        # rosbag2 stored no message definitions before Iron (a Humble sqlite3 bag has
        # none): the standard ones serve, used only where the bag brings none.
        reader = AnyReader([path], default_typestore=get_typestore(Stores.ROS2_HUMBLE))
        reader.open()
    except Exception as exc:  # rosbags raises its own errors, sqlite3, struct, OSError, …
        raise _bad_bag(path, exc) from None
    return reader


def _without_definitions(reader) -> bool:
    """Whether the bag brought no message definitions of its own."""
    from rosbags.interfaces import MessageDefinitionFormat

    return all(c.msgdef.format == MessageDefinitionFormat.NONE for c in reader.connections)


def topics(path: str | Path) -> dict:
    """Topic name → message type of a bag."""
    path = Path(path)
    reader = _open_reader(path)
    try:
        return {name: info.msgtype for name, info in reader.topics.items()}
    finally:
        reader.close()


def _choose(path: Path, have: dict, topic: str | None, msgtype: str | None) -> str:
    """The topic to read, refused in one line (with the list) when missing or ambiguous."""
    if topic is None:
        if len(have) != 1:
            what = "no topics" if not have else "several topics"
            raise InputError(f"{path}: the bag holds {what}; choose one with --topic "
                             f"(topics: {_listing(have)})")
        topic = next(iter(have))
    if topic not in have:
        raise InputError(f"{path}: no topic {topic!r} in the bag; choose one with --topic "
                         f"(topics: {_listing(have)})")
    got = have[topic]
    if msgtype is not None and normal_type(msgtype) != got:
        raise InputError(f"{path}, topic {topic}: messages of type {got}, not "
                         f"{normal_type(msgtype)}; check --type and --topic")
    if got not in LAYOUTS:
        raise InputError(f"{path}, topic {topic}: message type {got} is not one noisecal "
                         f"reads; choose a topic of type {', '.join(sorted(LAYOUTS))}")
    return topic


def _stamp_ns(stamp) -> int:
    return int(stamp.sec) * 1_000_000_000 + int(stamp.nanosec)


class BagSource:
    """One topic of a bag, decoded into columns (``headers``, ``blocks`` like a file source).

    Attributes
    ----------
    headers : list of str
        ``time [ns]`` then ``field.path [unit]`` cells.
    notes : tuple of str
        What the reader found: stamps or record time, the record-minus-stamp
        delay, the driver's covariance arrays.
    delay_ns : ndarray, shape (n,)
        Record time minus ``header.stamp`` of each message, ns, in stamp order.
    covariances : dict of str to (ndarray or None, str)
        The driver's covariance arrays as matrices (:func:`covariance_matrix`),
        from the first message, for arrays the same in every message.
    """

    locate = staticmethod(lambda row: f"message {row + 1} in stamp order")

    def __init__(self, path: Path, topic: str | None = None, msgtype: str | None = None):
        self.path = path
        self.format = _format(path)
        reader = _open_reader(path)
        try:
            have = {name: info.msgtype for name, info in reader.topics.items()}
            self.topic = _choose(path, have, topic, msgtype)
            self.msgtype = have[self.topic]
            self._decode(reader)
            if _without_definitions(reader):
                self.notes += ("the bag stores no message definitions (rosbag2 before Iron): "
                               "the standard ROS 2 Humble definitions were used",)
        except InputError:
            raise
        except Exception as exc:  # decoding a damaged or cut-off bag
            raise _bad_bag(path, exc) from None
        finally:
            try:
                reader.close()
            except Exception:
                pass

    def _decode(self, reader) -> None:
        layout = LAYOUTS[self.msgtype]
        conns = [c for c in reader.connections if c.topic == self.topic]
        getters = [attrgetter(f) for f, _ in layout.fields]
        quats = [attrgetter(q) for q in layout.quaternions]
        covs = [attrgetter(c.field) for c in layout.covariances]
        rows, quat_rows, recorded, stamps, cov_first, cov_same = [], [], [], [], None, None
        for conn, timestamp, raw in reader.messages(connections=conns):
            msg = reader.deserialize(raw, conn.msgtype)
            rows.append([float(g(msg)) for g in getters])
            if quats:
                quat_rows.append([(o.x, o.y, o.z, o.w) for o in (q(msg) for q in quats)])
            recorded.append(int(timestamp))
            stamps.append(_stamp_ns(msg.header.stamp) if layout.header else int(timestamp))
            arrays = [np.asarray(c(msg), dtype=float) for c in covs]
            if cov_first is None:
                cov_first, cov_same = arrays, [True] * len(arrays)
            else:
                cov_same = [s and np.array_equal(a, b, equal_nan=True)
                            for s, a, b in zip(cov_same, arrays, cov_first)]
        if not rows:
            raise InputError(f"{self.path}, topic {self.topic}: no messages; record some data "
                             "or choose another topic")
        recorded = np.array(recorded, dtype=np.int64)
        stamps = np.array(stamps, dtype=np.int64)
        notes = []
        if layout.header and not stamps.any():
            stamps = recorded.copy()
            notes.append("every header.stamp is zero: the bag's record time is used as the "
                         "sample time (it includes transport latency)")
        elif not layout.header:
            notes.append(f"{self.msgtype} has no header: the bag's record time is used as "
                         "the sample time (it includes transport latency)")
        else:
            notes.append("time is header.stamp (the measurement instant), not the record time")
        order = np.argsort(stamps, kind="stable")
        self._time = stamps[order]
        self.delay_ns = (recorded - stamps)[order]
        values = np.array(rows, dtype=np.float64)[order]
        columns = [values[:, i] for i in range(values.shape[1])]
        names = [f for f, _ in layout.fields]
        units = [u for _, u in layout.fields]
        self.covariances = {}
        for spec, first, same in zip(layout.covariances, cov_first, cov_same):
            matrix, state = covariance_matrix(first, spec.size)
            if not same:
                state = "varies between messages"
                matrix = None
            self.covariances[spec.field] = (matrix, state)
            if state == "provided":
                notes.append(f"the driver's {spec.field}: diagonal "
                             + ", ".join(f"{v:.4g}" for v in np.diag(matrix)))
            else:
                notes.append(f"the driver's {spec.field}: {state}")
        if quats:
            q = np.array(quat_rows, dtype=np.float64)[order]
            if layout.provided and self.covariances[layout.provided][1] == "not provided":
                notes.append("orientation not provided by the driver (covariance element 0 "
                             "is -1): no roll, pitch, yaw channels")
            else:
                for k, field in enumerate(layout.quaternions):
                    columns.extend(quaternion_to_rpy(*q[:, k, :].T))
                    names.extend(f"{field}.{a}" for a in RPY)
                    units.extend("rad" for _ in RPY)
        if layout.header and stamps.any():
            d = self.delay_ns / 1e9
            notes.append(f"record time minus header.stamp (transport latency): median "
                         f"{np.median(d):.6g} s, 95th percentile {np.percentile(d, 95):.6g} s, "
                         f"range {d.min():.6g} … {d.max():.6g} s")
        self.notes = (f"topic {self.topic} ({self.msgtype})",) + tuple(notes)
        self.headers = ["time [ns]"] + [f"{n} [{u}]" for n, u in zip(names, units)]
        self._columns = columns

    def blocks(self, time_integer: bool, progress=None):
        if progress:
            progress(self._time.shape[0])
        yield self._time, self._columns

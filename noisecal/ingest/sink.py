"""Where ingested columns go: memory, or ``.npy`` files written as they stream in."""

from __future__ import annotations

import ctypes
import io
from pathlib import Path

import numpy as np

NPY_HEADER = 128
"""Bytes reserved for an ``.npy`` header; a 1-D float64 header always fits."""


def npy_header(n: int) -> bytes:
    """The ``.npy`` (version 1.0) header of a 1-D float64 array of length n."""
    buf = io.BytesIO()
    np.lib.format.write_array_header_1_0(
        buf, {"descr": "<f8", "fortran_order": False, "shape": (int(n),)})
    head = buf.getvalue()
    if len(head) > NPY_HEADER:
        raise RuntimeError("npy header longer than reserved")
    # Pad with spaces before the final newline, as numpy itself does.
    return head[:-1] + b" " * (NPY_HEADER - len(head)) + b"\n"


class MemorySink:
    """Collect blocks in memory; ``finish`` concatenates them."""

    def __init__(self, channels: int):
        self._time: list = []
        self._cols: list = [[] for _ in range(channels)]

    def append(self, time: np.ndarray, cols: list) -> None:
        self._time.append(np.asarray(time, dtype=np.float64))
        for store, block in zip(self._cols, cols):
            store.append(np.asarray(block, dtype=np.float64))

    def finish(self) -> tuple[np.ndarray, list]:
        time = np.concatenate(self._time) if self._time else np.empty(0)
        cols = [np.concatenate(c) if c else np.empty(0) for c in self._cols]
        self._time, self._cols = [], []
        return time, cols


class NpySink:
    """Stream blocks into one ``.npy`` file per column; ``finish`` memory-maps them.

    Parameters
    ----------
    folder : Path
        Folder for ``time.npy`` and ``c<i>.npy`` (created by the caller).
    channels : int
        Number of channel columns.
    """

    def __init__(self, folder: Path, channels: int):
        self.paths = [folder / "time.npy"] + [folder / f"c{i}.npy" for i in range(channels)]
        self._files = [open(p, "wb") for p in self.paths]
        for fh in self._files:
            fh.write(b"\0" * NPY_HEADER)
        self.n = 0

    def append(self, time: np.ndarray, cols: list) -> None:
        for fh, block in zip(self._files, [time] + list(cols)):
            np.ascontiguousarray(block, dtype="<f8").tofile(fh)
        self.n += int(np.shape(time)[0])

    def close(self) -> None:
        for fh in self._files:
            if not fh.closed:
                fh.close()

    def finish(self, in_memory: bool = False) -> tuple[np.ndarray, list]:
        """Complete the files; return memory maps, or arrays read into memory.

        Reading back with ``fromfile`` costs one copy in memory; the file's
        pages stay in the page cache, outside the process.
        """
        head = npy_header(self.n)
        for fh in self._files:
            fh.flush()
            fh.seek(0)
            fh.write(head)
            fh.close()
        if in_memory:
            arrays = [np.fromfile(p, dtype="<f8", offset=NPY_HEADER) for p in self.paths]
        else:
            arrays = [np.load(p, mmap_mode="r") for p in self.paths]
        return arrays[0], arrays[1:]


def release_free_memory() -> None:
    """Hand the parser threads' freed buffers back to the system (glibc only).

    glibc keeps each thread's freed blocks for reuse; during and after a threaded
    parse that grows by tens of MB (blocks made on one thread are freed on
    another), all counted in the run's peak memory. Costs a few ms.
    """
    try:
        ctypes.CDLL("libc.so.6").malloc_trim(0)
    except (OSError, AttributeError):  # not glibc: nothing to do
        pass

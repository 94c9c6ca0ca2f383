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
        self.extremes: list = []  # filled by validate.stream

    def append(self, time: np.ndarray, cols: list) -> None:
        self._time.append(np.asarray(time, dtype=np.float64))
        for store, block in zip(self._cols, cols):
            store.append(np.asarray(block, dtype=np.float64))

    def finish(self) -> tuple[np.ndarray, list]:
        time = np.concatenate(self._time) if self._time else np.empty(0)
        cols = [np.concatenate(c) if c else np.empty(0) for c in self._cols]
        self._time, self._cols = [], []
        return time, cols


MAX_OPEN_FILES = 64
"""Columns up to which each ``.npy`` file stays open while blocks stream in. Wider
files (thousands of columns) buffer blocks and open each file only to append,
so the run never holds one descriptor per column (the usual limit is 1024)."""
FLUSH_BYTES = 1 << 22
"""Buffered bytes at which a wide sink appends its blocks to the files."""


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
        self._wide = len(self.paths) > MAX_OPEN_FILES
        self._files: list = []
        self._pending: list = [[] for _ in self.paths] if self._wide else []
        self._pending_bytes = 0
        if self._wide:
            for p in self.paths:
                with open(p, "wb") as fh:
                    fh.write(b"\0" * NPY_HEADER)
        else:
            for p in self.paths:
                self._files.append(open(p, "wb"))
                self._files[-1].write(b"\0" * NPY_HEADER)
        self.n = 0
        self.extremes: list = []  # filled by validate.stream

    def append(self, time: np.ndarray, cols: list) -> None:
        for k, block in enumerate([time] + list(cols)):
            data = np.ascontiguousarray(block, dtype="<f8")
            if self._wide:
                self._pending[k].append(data)
                self._pending_bytes += data.nbytes
            else:
                data.tofile(self._files[k])
        self.n += int(np.shape(time)[0])
        if self._wide and self._pending_bytes >= FLUSH_BYTES:
            self._flush()

    def _flush(self) -> None:
        for p, blocks in zip(self.paths, self._pending):
            if blocks:
                with open(p, "ab") as fh:
                    for data in blocks:
                        data.tofile(fh)
                blocks.clear()
        self._pending_bytes = 0

    def close(self) -> None:
        for fh in self._files:
            if not fh.closed:
                fh.close()
        self._pending = [[] for _ in self._pending]

    def finish(self, in_memory: bool = False) -> tuple[np.ndarray, list]:
        """Complete the files; return memory maps, or arrays read into memory.

        Reading back with ``fromfile`` costs one copy in memory; the file's
        pages stay in the page cache, outside the process. A wide sink is read
        into memory whatever ``in_memory`` says: each memory map holds a file
        descriptor.
        """
        head = npy_header(self.n)
        if self._wide:
            self._flush()
            for p in self.paths:
                with open(p, "r+b") as fh:
                    fh.write(head)
        else:
            for fh in self._files:
                fh.flush()
                fh.seek(0)
                fh.write(head)
                fh.close()
        if in_memory or self._wide:
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

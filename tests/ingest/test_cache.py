"""The binary cache: hits, invalidation, interrupted writes, memory bound."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import textwrap

import numpy as np
import pytest

from noisecal.ingest import cache, read_recording
from tests.conftest import write_csv


@pytest.fixture
def fresh_cache(tmp_path, monkeypatch):
    root = tmp_path / "cache"
    monkeypatch.setenv("NOISECAL_CACHE", str(root))
    return root


def bench_csv(path, n=3000, seed=0):
    rng = np.random.default_rng(seed)
    rows = [(f"{i * 0.01:.2f}", f"{a:.9g}", f"{b:.9g}")
            for i, (a, b) in enumerate(rng.standard_normal((n, 2)))]
    return write_csv(path, ["time [s]", "gyro_x [deg/s]", "acc_z [g]"], rows)


def entries(root):
    return sorted(p.name for p in root.iterdir() if p.name.startswith("v"))


def test_second_read_comes_from_the_cache(tmp_path, fresh_cache, monkeypatch):
    path = bench_csv(tmp_path / "r.csv")
    first = read_recording(path)
    assert len(entries(fresh_cache)) == 1
    import noisecal.ingest as ingest

    def no_parsing(*args, **kwargs):
        raise AssertionError("parsed again instead of using the cache")

    monkeypatch.setattr(ingest, "stream", no_parsing)
    second = read_recording(path)
    assert isinstance(second.time, np.memmap) or isinstance(second.time.base, np.memmap)
    np.testing.assert_array_equal(second.samples, first.samples)
    assert second.units == first.units and second.gaps == first.gaps
    assert second.source.sha256 == first.source.sha256


def test_changed_input_invalidates(tmp_path, fresh_cache):
    path = bench_csv(tmp_path / "r.csv", seed=1)
    a = read_recording(path)
    bench_csv(path, seed=2)  # same size, new content
    b = read_recording(path)
    assert a.source.sha256 != b.source.sha256
    assert not np.array_equal(a.samples, b.samples)
    assert len(entries(fresh_cache)) == 2


def test_partial_entry_is_rebuilt(tmp_path, fresh_cache):
    """An entry left without meta.json (write interrupted) is detected and rebuilt."""
    path = bench_csv(tmp_path / "r.csv")
    good = read_recording(path)
    expected, n, digest = good.samples, good.n, good.source.sha256
    del good  # drop the memory maps before damaging their files
    folder = cache.entry_dir(fresh_cache, digest)
    (folder / "meta.json").unlink()
    (folder / "c1.npy").unlink()
    (folder / "c1.npy").write_bytes(b"truncated")
    again = read_recording(path)
    np.testing.assert_array_equal(again.samples, expected)
    assert json.loads((folder / "meta.json").read_text())["meta"]["n"] == n


def test_no_cache_writes_nothing(tmp_path, fresh_cache):
    path = bench_csv(tmp_path / "r.csv")
    rec = read_recording(path, use_cache=False)
    assert rec.n == 3000
    assert not fresh_cache.exists() or not entries(fresh_cache)


def test_failed_read_leaves_no_entry(tmp_path, fresh_cache):
    path = tmp_path / "bad.csv"
    path.write_text("time [s],x [1]\n" + "".join(f"{i},{i}\n" for i in range(50)) + "50,zz\n")
    with pytest.raises(Exception):
        read_recording(path)
    left = list(fresh_cache.iterdir()) if fresh_cache.exists() else []
    assert not [p for p in left if p.name.startswith(("v", ".building"))]


def test_interrupted_run_leaves_no_output(tmp_path, fresh_cache):
    """Ctrl-C (SIGINT) during the static job: no output, no temporary file, no
    cache folder half-written.

    The signal is sent once the progress bar (drawn because stderr is a
    terminal, here a pseudo-terminal) shows the bootstrap under way and not
    finished, so the job is interrupted mid-bootstrap however fast it runs;
    50 000 replicates keep that phase a minute long, so a loaded machine reading the
    terminal late still finds the job mid-bootstrap."""
    import fcntl
    import pty
    import re
    import select
    import struct
    import termios
    import time as _time

    y = np.random.default_rng(0).standard_normal(400_000)
    path = tmp_path / "r.csv"
    with open(path, "w") as fh:
        fh.write("time [s],g [rad/s]\n")
        np.savetxt(fh, np.column_stack([np.arange(y.size) * 0.01, y]), delimiter=",", fmt="%.9g")
    out = tmp_path / "out" / "r.yaml"
    out.parent.mkdir()
    env = dict(os.environ, NOISECAL_CACHE=str(fresh_cache))
    master, slave = pty.openpty()
    # A new pseudo-terminal is 0 columns wide, and tqdm draws nothing in no width.
    fcntl.ioctl(slave, termios.TIOCSWINSZ, struct.pack("HHHH", 24, 120, 0, 0))
    proc = subprocess.Popen([sys.executable, "-m", "noisecal.cli", "static", str(path), "-o",
                             str(out), "--reps", "50000"], env=env, stdin=subprocess.DEVNULL,
                            stdout=subprocess.DEVNULL, stderr=slave,
                            # A shell's background job starts with SIGINT ignored, and
                            # Python then installs no Ctrl-C handler: restore it.
                            preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))
    os.close(slave)
    text, sent = "", False
    bar = re.compile(r"bootstrap:\s*\d+%\|[^|]*\|\s*(\d+)/(\d+)")
    deadline = _time.monotonic() + 180
    try:
        while _time.monotonic() < deadline:
            ready, _, _ = select.select([master], [], [], 0.05)
            if ready:
                try:
                    chunk = os.read(master, 65536)
                except OSError:  # the child closed the terminal
                    break
                if not chunk:
                    break
                text += chunk.decode("utf-8", "replace")
            if not sent:
                done = [(int(a), int(b)) for a, b in bar.findall(text)]
                if any(0 < a < b for a, b in done) and proc.poll() is None:
                    proc.send_signal(2)
                    sent = True
            elif proc.poll() is not None:
                break
        assert sent, "the job ended before it could be interrupted mid-bootstrap:\n" + text[-2000:]
        proc.wait(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
        os.close(master)
    assert proc.returncode == 130, text[-2000:]
    assert list(out.parent.iterdir()) == []
    assert not [p for p in fresh_cache.iterdir() if p.name.startswith(".building")]


MEMORY_PROBE = textwrap.dedent("""
    import sys
    import numpy as np
    import pandas, pyarrow, pyarrow.parquet  # imports are not the read's memory
    from noisecal.ingest import read_recording

    def status(key):
        for line in open("/proc/self/status"):
            if line.startswith(key):
                return int(line.split()[1]) * 1024

    open("/proc/self/clear_refs", "w").write("5")  # reset the peak (VmHWM)
    base = status("VmRSS")
    rec = read_recording(sys.argv[1], use_cache=sys.argv[2] == "cache")
    touched = sum(float(np.asarray(c).sum()) for c in (rec.time,) + rec.columns)
    decoded = 8 * rec.n * (1 + len(rec.channels))
    print((status("VmHWM") - base) / decoded)
""")


@pytest.mark.parametrize("mode", ["cache", "no-cache"])
def test_read_memory_bound(tmp_path, fresh_cache, mode):
    """Peak memory of a cold read, arrays included and touched, stays under 1.5×
    the decoded arrays — never a multiple of the CSV text (a ratio, not a timing;
    Linux peak-RSS accounting)."""
    n = 1_500_000
    rng = np.random.default_rng(3)
    path = tmp_path / "big.csv"
    with open(path, "w") as fh:
        fh.write("time [s],a [rad/s],b [rad/s],c [g]\n")
        np.savetxt(fh, np.column_stack([np.arange(n) * 0.0025, rng.standard_normal((n, 3))]),
                   delimiter=",", fmt="%.9g")
    env = dict(os.environ, NOISECAL_CACHE=str(fresh_cache))
    ratio = float(subprocess.run([sys.executable, "-c", MEMORY_PROBE, str(path), mode], env=env,
                                 capture_output=True, text=True, check=True).stdout)
    assert ratio <= 1.5, ratio

"""The cache: a file changed during its read, damaged entries and index
records, an unusable cache folder, leftovers of killed runs, very wide files.

Each case is a reported one; all are common practice, no source."""

from __future__ import annotations

import hashlib
import json
import os
import subprocess
import sys
import textwrap

import numpy as np
import pytest

import noisecal.ingest as ingest
from noisecal.errors import InputError
from noisecal.ingest import cache, read_recording
from tests.conftest import write_csv


@pytest.fixture
def fresh_cache(tmp_path, monkeypatch):
    root = tmp_path / "cache"
    monkeypatch.setenv("NOISECAL_CACHE", str(root))
    return root


def log(path, seed, n=2000, period=0.001):
    rng = np.random.default_rng(seed)
    rows = [(f"{i * period:.3f}", f"{a:.9g}", f"{b:.9g}")
            for i, (a, b) in enumerate(rng.standard_normal((n, 2)))]
    write_csv(path, ["time [s]", "gyro_x [rad/s]", "gyro_y [rad/s]"], rows)
    return np.loadtxt(path, delimiter=",", skiprows=1)


def entries(root):
    return sorted(p for p in root.iterdir() if p.name.startswith("v"))


def check(rec, ref):
    np.testing.assert_array_equal(rec.time, ref[:, 0] - ref[0, 0])
    np.testing.assert_array_equal(rec.channel("gyro_x"), ref[:, 1])
    np.testing.assert_array_equal(rec.channel("gyro_y"), ref[:, 2])


def test_file_rewritten_during_first_read_is_refused_and_not_cached(tmp_path, fresh_cache,
                                                                     monkeypatch):
    """The poisoning case: rewritten while its first, cached read runs. The run is
    refused in one line and nothing is stored, so a file with the original bytes
    later gets its own data, not the rewritten file's."""
    path = tmp_path / "r.csv"
    original = log(path, seed=1)
    keep = path.read_bytes()
    stream = ingest.stream

    def rewrite_midway(source, header, sink, repair=None, progress=None):
        start = stream(source, header, sink, repair, progress)
        log(path, seed=2)  # same size, other numbers, written while "reading"
        return start

    monkeypatch.setattr(ingest, "stream", rewrite_midway)
    with pytest.raises(InputError, match="changed while it was being read") as info:
        read_recording(path)
    assert "\n" not in str(info.value)
    assert entries(fresh_cache) == []
    monkeypatch.setattr(ingest, "stream", stream)
    twin = tmp_path / "twin.csv"
    twin.write_bytes(keep)
    check(read_recording(twin), original)
    check(read_recording(twin), original)  # and from the cache


@pytest.mark.parametrize("use_cache", [True, False])
def test_file_grown_during_read_is_refused(tmp_path, fresh_cache, monkeypatch, use_cache):
    """A logger still appending: refused, also without the cache."""
    path = tmp_path / "r.csv"
    log(path, seed=1)
    stream = ingest.stream

    def append_midway(source, header, sink, repair=None, progress=None):
        start = stream(source, header, sink, repair, progress)
        with open(path, "a") as fh:
            fh.write("99.000,1,1\n")
        return start

    monkeypatch.setattr(ingest, "stream", append_midway)
    with pytest.raises(InputError, match="changed while"):
        read_recording(path, use_cache=use_cache)
    assert not fresh_cache.exists() or entries(fresh_cache) == []


def _cached(tmp_path, fresh_cache):
    path = tmp_path / "r.csv"
    ref = log(path, seed=3)
    rec = read_recording(path)
    digest = rec.source.sha256
    del rec  # drop the memory maps before damaging their files
    return path, ref, cache.entry_dir(fresh_cache, digest)


def test_flipped_bytes_in_a_cached_column_are_found_and_rebuilt(tmp_path, fresh_cache, capfd):
    """16 flipped bytes in a cached column (a reported case): detected on load, the
    entry rebuilt, the result the file's, one note on stderr."""
    path, ref, folder = _cached(tmp_path, fresh_cache)
    column = folder / "c0.npy"
    data = bytearray(column.read_bytes())
    for k in range(16):
        data[400 + 37 * k] ^= 0xFF
    column.write_bytes(bytes(data))
    capfd.readouterr()
    check(read_recording(path), ref)
    err = capfd.readouterr().err
    assert err.count("\n") == 1 and "damaged" in err and "c0.npy" in err
    assert (folder / "c0.npy").read_bytes() != bytes(data)  # rebuilt


@pytest.mark.parametrize("edit", ["period", "names", "n", "truncate"])
def test_edited_metadata_or_truncated_column_is_found(tmp_path, fresh_cache, edit):
    """Edits to the metadata ('10 Hz', swapped channel names, a row count) and a
    truncated column file are detected; the file's own values come back."""
    path, ref, folder = _cached(tmp_path, fresh_cache)
    meta_path = folder / "meta.json"
    stored = json.loads(meta_path.read_text())
    if edit == "period":
        stored["meta"]["period"] = 0.1
    elif edit == "names":
        stored["meta"]["names"] = stored["meta"]["names"][::-1]
    elif edit == "n":
        stored["meta"]["n"] -= 1
    if edit == "truncate":
        column = folder / "c1.npy"
        column.write_bytes(column.read_bytes()[:-800])
    else:
        meta_path.write_text(json.dumps(stored))
    rec = read_recording(path)
    check(rec, ref)
    assert rec.period == pytest.approx(0.001)
    assert rec.channels == ("gyro_x", "gyro_y")


def test_edited_metadata_with_its_checksum_recomputed_still_cannot_serve_another_hash(
        tmp_path, fresh_cache):
    """An entry moved under another file's hash (folder renamed, its checksums
    intact) records its own input hash, which no longer matches: not served."""
    a, ref_a, folder_a = _cached(tmp_path, fresh_cache)
    b = tmp_path / "b.csv"
    ref_b = log(b, seed=4)
    digest_b = hashlib.sha256(b.read_bytes()).hexdigest()
    folder_a.rename(cache.entry_dir(fresh_cache, digest_b))
    check(read_recording(b), ref_b)


def test_index_pointing_at_another_hash_serves_nothing_wrong(tmp_path, fresh_cache):
    """The index record of file A edited to name B's hash (with or without its
    record checksum recomputed): A is read as A."""
    a, ref_a, _ = _cached(tmp_path, fresh_cache)
    b = tmp_path / "b.csv"
    log(b, seed=5)
    digest_b = read_recording(b).source.sha256
    index_path = fresh_cache / "index.json"
    for recompute in (False, True):
        table = json.loads(index_path.read_text())
        key = next(k for k in table if k.startswith(str(a.resolve()) + "|"))
        table[key]["sha256"] = digest_b
        if recompute:
            table[key]["check"] = cache._record_check(key, digest_b)
        index_path.write_text(json.dumps(table))
        rec = read_recording(a)
        check(rec, ref_a)
        assert rec.source.sha256 == hashlib.sha256(a.read_bytes()).hexdigest()


def test_garbage_index_is_ignored(tmp_path, fresh_cache):
    path, ref, _ = _cached(tmp_path, fresh_cache)
    (fresh_cache / "index.json").write_text("[1, 2")
    check(read_recording(path), ref)
    (fresh_cache / "index.json").write_text('["not", "a", "table"]')
    check(read_recording(path), ref)


@pytest.mark.parametrize("where", ["file", "unwritable"])
def test_unusable_cache_location_means_no_cache_and_one_note(tmp_path, monkeypatch, capfd,
                                                             where):
    """A file where the folder should be, and a folder that cannot be created
    (under /proc, read-only even for root): the run reads without the cache
    and says so once."""
    if where == "file":
        root = tmp_path / "cache"
        root.write_text("not a folder")
    else:
        root = "/proc/self/noisecal-cache"
    monkeypatch.setenv("NOISECAL_CACHE", str(root))
    monkeypatch.setattr("noisecal.paths._noted", set())
    path = tmp_path / "r.csv"
    ref = log(path, seed=6)
    capfd.readouterr()
    check(read_recording(path), ref)
    check(read_recording(path), ref)
    err = capfd.readouterr().err
    assert err.count("\n") == 1 and "without the cache" in err, err
    if where == "file":
        assert root.read_text() == "not a folder"


KILLED = textwrap.dedent("""
    import os, signal, sys
    from noisecal.ingest import read_recording, sink

    append = sink.NpySink.append

    def append_then_die(self, time, cols):
        append(self, time, cols)
        os.kill(os.getpid(), signal.SIGTERM)  # default action: the process ends here

    sink.NpySink.append = append_then_die
    read_recording(sys.argv[1], use_cache=sys.argv[2] == "cache")
""")


@pytest.mark.parametrize("mode", ["cache", "no-cache"])
def test_leftovers_of_a_killed_read_are_cleaned_next_time(tmp_path, fresh_cache, monkeypatch,
                                                          mode):
    """SIGTERM in the middle of a read leaves a partial entry (or scratch .npy
    files); the next run removes them and reads normally."""
    import tempfile

    scratch = tmp_path / "tmp"
    scratch.mkdir()
    path = tmp_path / "r.csv"
    ref = log(path, seed=7)
    env = dict(os.environ, NOISECAL_CACHE=str(fresh_cache), TMPDIR=str(scratch))
    proc = subprocess.run([sys.executable, "-c", KILLED, str(path), mode], env=env,
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == -15, proc.stderr
    where, prefix = (fresh_cache, ".building-") if mode == "cache" else (scratch, "noisecal-scratch-")
    left = [p for p in where.iterdir() if p.name.startswith(prefix)]
    assert any(p.is_dir() and list(p.glob("*.npy")) for p in left), left
    for p in left:
        os.utime(p, (0, 0))  # as a leftover of yesterday's run
    monkeypatch.setattr(tempfile, "tempdir", str(scratch))
    check(read_recording(path, use_cache=mode == "cache"), ref)
    assert not [p for p in where.iterdir() if p.name.startswith(prefix)]


def test_cleaning_spares_a_folder_a_running_read_holds(tmp_path):
    """A work folder whose lock is held (a run still going) is not removed, however old."""
    from noisecal.paths import LockedFolder, clean_stale

    held = LockedFolder(tmp_path, ".building-")
    for p in tmp_path.iterdir():
        os.utime(p, (0, 0))
    assert clean_stale(tmp_path, ".building-") == 0 and held.path.is_dir()
    held.release()
    assert list(tmp_path.iterdir()) == []


WIDE = textwrap.dedent("""
    import resource, sys
    import numpy as np
    from noisecal.ingest import read_recording

    resource.setrlimit(resource.RLIMIT_NOFILE, (256, resource.getrlimit(resource.RLIMIT_NOFILE)[1]))
    ref = np.loadtxt(sys.argv[1], delimiter=",", skiprows=1)
    for use_cache in (sys.argv[2] == "cache",) * 2:  # cold, then warm
        rec = read_recording(sys.argv[1], use_cache=use_cache)
        assert len(rec.channels) == ref.shape[1] - 1
        np.testing.assert_array_equal(np.column_stack(rec.columns), ref[:, 1:])
    print("ok")
""")


@pytest.mark.parametrize("mode", ["cache", "no-cache"])
def test_thousands_of_columns_with_few_file_descriptors(tmp_path, fresh_cache, mode):
    """1,500 channels with at most 256 open files allowed: read, cached and read
    back, without 'Too many open files' and without a partial entry."""
    n, c = 40, 1500
    data = np.column_stack([np.arange(n) * 0.01,
                            np.random.default_rng(8).standard_normal((n, c)).round(6)])
    path = tmp_path / "wide.csv"
    with open(path, "w") as fh:
        fh.write(",".join(["time [s]"] + [f"ch{i} [1]" for i in range(c)]) + "\n")
        np.savetxt(fh, data, delimiter=",", fmt="%.6f")
    env = dict(os.environ, NOISECAL_CACHE=str(fresh_cache))
    proc = subprocess.run([sys.executable, "-c", WIDE, str(path), mode], env=env,
                          capture_output=True, text=True, timeout=300)
    assert proc.stdout.strip() == "ok", proc.stderr[-3000:]
    if mode == "cache":
        assert len(entries(fresh_cache)) == 1
        assert not [p for p in fresh_cache.iterdir() if p.name.startswith(".building-")]

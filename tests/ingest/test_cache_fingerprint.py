"""The cache's cheap check on load: each column's stat fingerprint and sampled
windows; a column whose fingerprint changed is not trusted. The reference for
every check is the values numpy.loadtxt reads from the input and zlib's CRC-32
(reference libraries); the cases are common practice, no source."""

from __future__ import annotations

import json
import os
import zlib

import pytest

from noisecal.ingest import cache, read_recording
from tests.ingest.test_cache_checks import check, log


@pytest.fixture
def fresh_cache(tmp_path, monkeypatch):
    root = tmp_path / "cache"
    monkeypatch.setenv("NOISECAL_CACHE", str(root))
    return root


def cached(tmp_path, seed=3, n=20000):
    path = tmp_path / "r.csv"
    ref = log(path, seed=seed, n=n)
    rec = read_recording(path)
    folder = cache.entry_dir(tmp_path / "cache", rec.source.sha256)
    del rec  # drop the memory maps before touching their files
    return path, ref, folder


def stored(folder):
    return json.loads((folder / "meta.json").read_text())


def test_sampled_windows_are_zlib_crc32_of_the_file(tmp_path, fresh_cache):
    _, _, folder = cached(tmp_path)
    for name, crc in stored(folder)["sampled"].items():
        data = (folder / name).read_bytes()
        last = len(data) - cache.SAMPLE_BYTES
        want = zlib.crc32(str(len(data)).encode())
        for k in range(cache.SAMPLE_WINDOWS):
            a = last * k // (cache.SAMPLE_WINDOWS - 1)
            want = zlib.crc32(data[a:a + cache.SAMPLE_BYTES], want)
        assert crc == f"{want:08x}"


def test_edit_with_the_mtime_put_back_is_found(tmp_path, fresh_cache, capfd):
    """A changed value with the file's mtime restored: the ctime still changed, so the
    column is checked in full, found damaged and rebuilt."""
    path, ref, folder = cached(tmp_path)
    column = folder / "c1.npy"
    st = os.stat(column)
    data = bytearray(column.read_bytes())
    data[128 + 8 * 5000 + 3] ^= 0x10  # one bit of one sample, far from the sampled windows
    column.write_bytes(bytes(data))
    os.utime(column, ns=(st.st_atime_ns, st.st_mtime_ns))
    capfd.readouterr()
    check(read_recording(path), ref)
    err = capfd.readouterr().err
    assert "damaged" in err and "c1.npy" in err


def test_a_touched_column_is_not_trusted(tmp_path, fresh_cache, capfd):
    """A column whose fingerprint changed but whose bytes did not (touched, copied
    back): the entry is rebuilt, with one note, and the next load is quiet."""
    path, ref, folder = cached(tmp_path)
    os.utime(folder / "time.npy", ns=(1, 1))
    capfd.readouterr()
    check(read_recording(path), ref)
    assert "time.npy" in capfd.readouterr().err
    check(read_recording(path), ref)
    assert capfd.readouterr().err == ""


def test_silent_change_in_a_sampled_window_is_found(tmp_path, fresh_cache, capfd):
    """A change the stat fingerprint cannot see (simulated by recording the new
    fingerprint, as a failing disk would leave it) inside a sampled window."""
    path, ref, folder = cached(tmp_path)
    column = folder / "c0.npy"
    data = bytearray(column.read_bytes())
    data[-1] ^= 0x01  # the last window is always sampled
    column.write_bytes(bytes(data))
    doc = stored(folder)
    doc["stat"]["c0.npy"] = cache.stat_fingerprint(column)
    doc["meta_sha256"] = cache._stored_checksum(doc)
    (folder / "meta.json").write_text(json.dumps(doc))
    capfd.readouterr()
    check(read_recording(path), ref)
    assert "c0.npy" in capfd.readouterr().err


def test_entry_of_another_layout_is_not_served(tmp_path, fresh_cache):
    """meta.json without fingerprints (an older layout): not served, rebuilt."""
    path, ref, folder = cached(tmp_path)
    doc = stored(folder)
    del doc["stat"]
    doc["meta_sha256"] = cache._stored_checksum(doc)
    (folder / "meta.json").write_text(json.dumps(doc))
    check(read_recording(path), ref)
    assert "stat" in stored(folder)

"""The thread-pool map used for channels: order, errors, progress. Common practice, no source."""

from __future__ import annotations

import threading
import time

import pytest

from noisecal.errors import AnalysisError, InputError, NoisecalError
from noisecal.jobs.parallel import SharedBar, default_workers, map_ordered


def test_results_keep_input_order_when_later_items_finish_first():
    def slow_first(i):
        time.sleep(0.05 * (5 - i))
        return i * i
    assert map_ordered(slow_first, range(5), workers=3) == [0, 1, 4, 9, 16]


def test_items_run_concurrently():
    barrier = threading.Barrier(2, timeout=5)
    # Each call waits for the other: a serial map would time out on the barrier.
    assert map_ordered(lambda i: barrier.wait() is not None, [0, 1], workers=2) == [True, True]


def test_one_worker_runs_in_the_calling_thread():
    me = threading.get_ident()
    assert map_ordered(lambda _: threading.get_ident(), [1, 2], workers=1) == [me, me]


def test_earliest_failed_item_is_raised_and_is_the_noisecal_error():
    def fn(i):
        if i == 3:
            raise InputError("item 3 fails fast")
        if i == 1:
            time.sleep(0.2)
            raise AnalysisError("item 1 fails later")
        return i
    with pytest.raises(AnalysisError, match="item 1"):
        map_ordered(fn, range(5), workers=4)
    with pytest.raises(NoisecalError, match="item 3"):
        map_ordered(lambda i: fn(i) if i != 1 else i, range(5), workers=4)


def test_items_not_started_are_cancelled_after_an_error():
    started = []

    def fn(i):
        started.append(i)
        if i == 0:
            raise InputError("bad channel")
        time.sleep(0.3)
        return i
    with pytest.raises(InputError):
        map_ordered(fn, range(8), workers=2)
    time.sleep(0.4)
    assert len(started) < 8


def test_shared_bar_counts_every_update_from_threads():
    class Bar:
        def __init__(self):
            self.n, self.text = 0, ""

        def update(self, n=1):
            v = self.n
            time.sleep(0)  # invite a race the lock must prevent
            self.n = v + n

        def set_description(self, text):
            self.text = text

    bar = Bar()
    shared = SharedBar(bar)

    def work(i):
        for _ in range(500):
            shared.update(1)
        shared.set_description(f"ch{i}")
    map_ordered(work, range(4), workers=4)
    assert bar.n == 2000
    assert bar.text.startswith("ch")


def test_default_workers():
    assert default_workers(1) == 1
    assert 1 <= default_workers(50) <= 50


@pytest.mark.parametrize("value, expected", [("1", 1), ("3", 3), ("0", None), ("x", None),
                                             ("", None)])
def test_thread_share_from_the_environment(monkeypatch, value, expected):
    """NOISECAL_THREADS caps the per-channel threads (a batch worker's share of the
    cores); an unusable value falls back to the cores the process may use (common
    practice, no source)."""
    import os

    from noisecal.jobs.parallel import default_workers
    from noisecal.paths import threads

    monkeypatch.setenv("NOISECAL_THREADS", value)
    cores = len(os.sched_getaffinity(0))
    assert threads() == (expected if expected is not None else cores)
    assert default_workers(64) == (expected if expected is not None else cores)
    assert default_workers(1) == 1

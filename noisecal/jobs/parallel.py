"""Per-channel work on threads: results in input order, errors as if run in a loop.

The heavy steps of a channel (deviations, bootstrap records, refits) run in
compiled kernels that release the GIL, so channels overlap on threads without
copying the recording into other processes (it is memory-mapped from the
cache). Python threads also keep Ctrl-C in the main thread.
"""

from __future__ import annotations

import threading


def default_workers(count: int) -> int:
    """Threads for ``count`` independent items: one per core, at most one per item."""
    from ..paths import threads

    return max(1, min(count, threads()))


def map_ordered(fn, items, workers: int | None = None) -> list:
    """``[fn(item) for item in items]`` on a thread pool.

    Parameters
    ----------
    fn : callable
        Called once per item, on a worker thread.
    items : iterable
        Inputs; the results come back in this order.
    workers : int, optional
        Threads; default one per core, at most one per item. With one worker
        (or one item) ``fn`` runs in the calling thread.

    Returns
    -------
    list
        ``fn(item)`` for each item, in input order.

    Raises
    ------
    Exception
        When calls fail, the exception of the earliest failed item in input
        order (a ``NoisecalError`` stays what it is, so the CLI prints its one
        line), once the calls already running have returned; items not yet
        started are not started. The same error a plain loop would raise, as
        long as a later item does not fail for a reason an earlier one would
        have hidden.
    """
    items = list(items)
    workers = default_workers(len(items)) if workers is None else max(1, int(workers))
    if workers == 1 or len(items) <= 1:
        return [fn(item) for item in items]
    results = [None] * len(items)
    errors: dict = {}
    lock = threading.Lock()
    stop = threading.Event()
    queue = iter(range(len(items)))

    def worker():
        while not stop.is_set():
            with lock:
                i = next(queue, None)
            if i is None:
                return
            try:
                results[i] = fn(items[i])
            except BaseException as exc:  # noqa: BLE001 - handed to the caller below
                errors[i] = exc
                stop.set()

    # Daemon threads: after Ctrl-C the process exits without waiting for a channel
    # in progress (a pool's workers would be joined at exit).
    threads = [threading.Thread(target=worker, name=f"noisecal-channel-{k}", daemon=True)
               for k in range(min(workers, len(items)))]
    for t in threads:
        t.start()
    try:
        for t in threads:
            t.join()
    except BaseException:
        stop.set()
        raise
    if errors:
        raise errors[min(errors)]
    return results


class SharedBar:
    """A progress bar (tqdm or the silent stand-in) safe to update from worker threads.

    Parameters
    ----------
    bar : object
        Has ``update(n)`` and ``set_description(text)``.
    """

    def __init__(self, bar):
        self._bar = bar
        self._lock = threading.Lock()

    def update(self, n: int = 1) -> None:
        with self._lock:
            self._bar.update(n)

    def set_description(self, text: str) -> None:
        with self._lock:
            self._bar.set_description(text)

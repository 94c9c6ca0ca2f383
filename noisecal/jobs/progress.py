"""Progress on stderr when it is a terminal; silent otherwise."""

from __future__ import annotations

import sys
from contextlib import contextmanager


class _Silent:
    def update(self, n: int = 1) -> None:
        pass

    def set_description(self, text: str) -> None:
        pass


def visible(quiet: bool) -> bool:
    """Whether bars should be drawn: not quiet, and stderr is a terminal."""
    return not quiet and sys.stderr.isatty()


@contextmanager
def progress_bar(total: int, desc: str, quiet: bool):
    """A tqdm bar on stderr, or a no-op when quiet or stderr is not a terminal."""
    if not visible(quiet):
        yield _Silent()
        return
    from tqdm import tqdm

    bar = tqdm(total=total, desc=desc, file=sys.stderr, leave=False)
    try:
        yield bar
    finally:
        bar.close()


class StageBars:
    """``progress(stage, done, total)`` for ingest: one byte-counting bar per stage."""

    LABEL = {"hash": "hashing", "read": "reading"}

    def __init__(self, quiet: bool):
        self.on = visible(quiet)
        self.bars = {}

    def __call__(self, stage: str, done: int, total: int) -> None:
        if not self.on:
            return
        from tqdm import tqdm

        bar = self.bars.get(stage)
        if bar is None:
            bar = self.bars[stage] = tqdm(total=total, desc=self.LABEL.get(stage, stage),
                                          unit="B", unit_scale=True, file=sys.stderr,
                                          leave=False)
        bar.update(max(0, min(done, total) - bar.n))

    def close(self) -> None:
        for bar in self.bars.values():
            bar.close()
        self.bars = {}

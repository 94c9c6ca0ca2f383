"""Progress on stderr when it is a terminal; silent otherwise."""

from __future__ import annotations

import sys
from contextlib import contextmanager


class _Silent:
    def update(self, n: int = 1) -> None:
        pass


@contextmanager
def progress_bar(total: int, desc: str, quiet: bool):
    """A tqdm bar on stderr, or a no-op when quiet or stderr is not a terminal."""
    if quiet or not sys.stderr.isatty():
        yield _Silent()
        return
    from tqdm import tqdm

    bar = tqdm(total=total, desc=desc, file=sys.stderr, leave=False)
    try:
        yield bar
    finally:
        bar.close()

"""Where noisecal keeps files of its own (the cache), shared by every stage."""

from __future__ import annotations

import os
from pathlib import Path


def cache_root() -> Path:
    """The cache folder (not created).

    ``$NOISECAL_CACHE`` if set, else ``$XDG_CACHE_HOME/noisecal``, else
    ``~/.cache/noisecal``.
    """
    if os.environ.get("NOISECAL_CACHE"):
        return Path(os.environ["NOISECAL_CACHE"])
    base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    return Path(base) / "noisecal"

"""The raw table every reader produces, before validation."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np


@dataclass(frozen=True)
class RawTable:
    """Columns as read from a file, still in the file's units.

    Attributes
    ----------
    headers : list of str
        Header cells ``name [unit]``, the time column first.
    time : ndarray, shape (n,)
        Time column, int64 or float64, in the file's time unit.
    columns : list of ndarray, each shape (n,)
        Channel columns, float64, in the file's units.
    format : str
        ``"csv"``, ``"parquet"`` or ``"npz"``.
    locate : callable
        Maps a 0-based data-row index to a phrase naming it in the file,
        e.g. ``"line 12"``; used only to word error messages.
    """

    headers: list
    time: np.ndarray
    columns: list
    format: str
    locate: Callable[[int], str]

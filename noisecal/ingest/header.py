"""Header of a recording: ``name [unit]`` cells, time first, checked before any data."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import InputError
from ..units import split_header, time_scale, to_si


@dataclass(frozen=True)
class Header:
    """What the header says, with each channel's conversion to SI.

    Attributes
    ----------
    names : tuple of str
        Channel names (the time column excluded).
    source_units : tuple of str
        Units as written.
    units : tuple of str
        SI units.
    offset, scale : ndarray, shape (c,)
        SI value = offset + scale · file value (pint units are affine).
    time_scale : float
        Seconds per unit of the time column.
    time_integer : bool
        True for ``[ns]``: read as int64 so epoch nanoseconds stay exact.
    """

    names: tuple
    source_units: tuple
    units: tuple
    offset: np.ndarray
    scale: np.ndarray
    time_scale: float
    time_integer: bool


MAX_CELL = 256
"""Characters a header cell may have; a longer one is not a ``name [unit]`` cell
(a whole line of data, a pasted document) and is refused, not echoed."""


def _shown(cell: str) -> str:
    return repr(cell) if len(cell) <= 40 else repr(cell[:40]) + "…"


def _check_cell(cell: str, where: str) -> None:
    """Refuse a header cell too long to be one, or with brackets inside its name."""
    if len(cell) > MAX_CELL:
        raise InputError(f"{where}: header cell {_shown(cell)} is {len(cell):,} characters "
                         f"long (at most {MAX_CELL}); write it as 'name [unit]', e.g. "
                         "'gyro_x [deg/s]'")
    if cell.count("[") > 1 or cell.count("]") > 1:
        raise InputError(f"{where}: header cell {_shown(cell)} has '[' or ']' inside the "
                         "name; only the unit goes in brackets: rename the channel, e.g. "
                         "'x_0 [m]' for 'x[0] [m]'")


def parse_header(cells: list, path: str) -> Header:
    """Check the header cells and work out every conversion.

    Raises
    ------
    InputError
        Missing or unknown unit, time not first or not a time, a repeated name,
        a cell longer than ``MAX_CELL`` or with brackets in its name.
    """
    names, units = [], []
    for col, cell in enumerate(cells):
        _check_cell(str(cell), f"{path}, column {col + 1}")
        name, unit = split_header(str(cell), f"{path}, column {col + 1}")
        names.append(name)
        units.append(unit)
    if names[0].lower() != "time":
        raise InputError(f"{path}: the first column is {cells[0]!r}, not the time; "
                         "put a 'time [s]' or 'time [ns]' column first")
    seen = set()
    for name in names[1:]:
        if name in seen or name.lower() == "time":
            raise InputError(f"{path}: channel name {name!r} appears twice; "
                             "give each column its own name")
        seen.add(name)
    scale = time_scale(units[0], f"{path}, column 'time'")
    offsets, scales, si_units = [], [], []
    for name, unit in zip(names[1:], units[1:]):
        values, si_unit = to_si(np.array([0.0, 1.0]), unit, f"{path}, column {name!r}")
        offsets.append(values[0])
        scales.append(values[1] - values[0])
        si_units.append(si_unit)
    return Header(tuple(names[1:]), tuple(units[1:]), tuple(si_units), np.array(offsets),
                  np.array(scales), scale, units[0].strip() == "ns")

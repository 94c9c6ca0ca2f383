"""A unit's report: its stored runs and re-check verdicts as one HTML file."""

from __future__ import annotations

from pathlib import Path

from .. import history
from ..errors import InputError


def run_unit_report(db: str, unit: str, out: str, overwrite: bool = False) -> Path:
    """Write the self-contained HTML report of ``unit``'s history.

    Parameters
    ----------
    db : str
        History database (read only).
    unit : str
        Serial number, as stored with ``--unit``.
    out : str
        Report path (``.html``); checked before the database is read.
    overwrite : bool
        Replace an existing report.

    Returns
    -------
    Path
        The file written.
    """
    from ..export.atomic import write_text
    from ..export.html import check_report_path, render_unit

    path = check_report_path(out, [db, f"{db}-wal", f"{db}-shm"], overwrite,
                             option="-o")
    runs = history.runs_of(db, unit)
    if not runs:
        raise InputError(f"{history.printable(unit)}: no runs stored in {db}; store runs "
                         "with --unit SERIAL --db FILE")
    write_text(path, render_unit(unit, str(db), runs), overwrite=overwrite)
    return path

"""A unit's history: store a run's parameters, print and plot them over time, export CSV."""

from __future__ import annotations

import csv
import io
from contextlib import contextmanager
from pathlib import Path

import numpy as np

from .. import __version__, history
from ..errors import InputError
from ..export.atomic import STDOUT, Staged, check_target
from .recheck import estimates_of


def parameters_of(sections: dict) -> list:
    """A run's fitted numbers (its YAML content) as history rows."""
    params = []
    for channel, name, e, _ in estimates_of(sections):
        if "value" in e:
            lo, hi = e.get("ci95", [None, None])
            params.append(history.Parameter(channel, name, e["value"], lo, hi, e.get("unit", "")))
        elif "upper_bound" in e:
            params.append(history.Parameter(channel, name, None, None, e["upper_bound"],
                                            e.get("unit", ""), True))
    return params


def store(db: str, unit: str, sensor: str, job: str, sections: dict, input_sha256: str,
          verdict: str | None = None, parameter_sections: dict | None = None) -> int:
    """Record a run (its YAML content's fitted numbers) under ``unit``."""
    return history.record_run(db, unit, sensor, job, input_sha256, f"noisecal {__version__}",
                              parameters_of(parameter_sections or sections), verdict)


class Recorder:
    """A history database opened, validated and migrated before a run's analysis.

    Calling it with the job's result gives the context manager in which the run is
    stored: its row is committed when the block ends without error, so a job puts
    its files in place inside it and the files and the row appear together.

    Parameters
    ----------
    db : str
        Database path (also an input no output may replace).
    unit, sensor, job : str
        What the run is stored as.
    facts : callable
        ``facts(result) -> (sections, input_sha256, verdict)``.
    """

    def __init__(self, db: str, unit: str, sensor: str, job: str, facts):
        if not unit.strip():
            raise InputError("--unit: give the unit's serial number (not empty)")
        self.path = Path(db)
        self.unit, self.sensor, self.job, self.facts = unit, sensor, job, facts
        self.run_id: int | None = None
        # An existing database is validated (and migrated) now, before any work; a new
        # one is only checked for a writable folder and created when the run is stored,
        # so that a run refused later leaves no empty database behind.
        self._con = history.connect(self.path) if self.path.exists() else None
        if self._con is None:
            history.check_new(self.path)

    @property
    def paths(self) -> list:
        """Files the run must not write to: the database and its journal files."""
        return [self.path, Path(f"{self.path}-wal"), Path(f"{self.path}-shm")]

    @contextmanager
    def __call__(self, result):
        sections, sha, verdict = self.facts(result)
        if self._con is None:
            self._con = history.connect(self.path)
        with history.adding_run(self._con, self.path, self.unit, self.sensor, self.job, sha,
                                f"noisecal {__version__}", parameters_of(sections),
                                verdict) as run_id:
            yield run_id
        self.run_id = run_id

    def close(self) -> None:
        if self._con is not None:
            self._con.close()


def table(db: str, unit: str, param: str | None = None, since: str | None = None) -> str:
    """The parameter table over time, as text (names shown safely)."""
    runs = history.runs_of(db, unit, param, since)
    if not runs:
        return f"{history.printable(unit)}: no runs stored in {db}"
    lines = [f"unit {history.printable(unit)}: {len(runs)} run(s) in {db}"]
    for r in runs:
        head = (f"run {r['run']}  {r['date']}  {history.printable(r['job'])}  sensor "
                f"{history.printable(r['sensor'])}  input {r['input_sha256'][:12]}")
        if r["verdict"]:
            head += f"  verdict {r['verdict']}"
        lines.append(head)
        for p in r["parameters"]:
            name = history.printable(f"{p.channel}.{p.name}")
            if p.is_bound:
                lines.append(f"    {name:<32} < {p.upper:.4g} {history.printable(p.unit)}")
            else:
                ci = (f" [{p.lower:.4g}, {p.upper:.4g}]" if p.lower is not None and
                      p.upper is not None else "")
                lines.append(f"    {name:<32} {p.value:.4g}{ci} {history.printable(p.unit)}")
    return "\n".join(lines)


def export_csv(db: str, unit: str, out: str, param: str | None = None,
               since: str | None = None, overwrite: bool = False) -> int:
    """One row per run and parameter, with a ``run`` column; returns the row count.

    ``out`` ``-`` writes the CSV to standard output."""
    if out != STDOUT:
        check_target(Path(out), [Path(db)], overwrite)
    runs = history.runs_of(db, unit, param, since)
    buf = io.StringIO()
    w = csv.writer(buf)
    w.writerow(["run", "date", "unit", "sensor", "job", "input_sha256", "tool_version",
                "verdict", "channel", "parameter", "value", "lower", "upper", "unit_of_value",
                "is_upper_bound"])
    count = 0
    for r in runs:
        for p in r["parameters"]:
            w.writerow([r["run"], r["date"], unit, r["sensor"], r["job"], r["input_sha256"],
                        r["tool_version"], r["verdict"] or "", p.channel, p.name,
                        "" if p.value is None else repr(p.value),
                        "" if p.lower is None else repr(p.lower),
                        "" if p.upper is None else repr(p.upper), p.unit, int(p.is_bound)])
            count += 1
    with Staged(overwrite) as staged:
        staged.text(out if out == STDOUT else Path(out), buf.getvalue())
        staged.commit()
    return count


def plot(db: str, unit: str, out: str, param: str | None = None, since: str | None = None,
         overwrite: bool = False) -> None:
    """Each parameter against time with its interval (bounds drawn as down-arrows)."""
    import matplotlib

    matplotlib.use("Agg")
    import datetime as _dt

    import matplotlib.pyplot as plt

    check_target(Path(out), [Path(db)], overwrite)
    runs = history.runs_of(db, unit, param, since)
    if not runs:
        raise InputError(f"{history.printable(unit)}: no runs stored in {db}")
    series: dict = {}
    for r in runs:
        when = _dt.datetime.fromisoformat(r["date"])
        for p in r["parameters"]:
            series.setdefault((p.channel, p.name, p.unit), []).append((when, p))
    keys = sorted(series)
    cols = min(3, len(keys))
    rows = int(np.ceil(len(keys) / cols))
    fig, axes = plt.subplots(rows, cols, figsize=(5.5 * cols, 3.4 * rows), squeeze=False)
    for ax, key in zip(axes.flat, keys):
        for when, p in series[key]:
            if p.is_bound:
                ax.plot([when], [p.upper], "v", color="0.5")
            else:
                lo = p.value - (p.lower if p.lower is not None else p.value)
                hi = (p.upper if p.upper is not None else p.value) - p.value
                ax.errorbar([when], [p.value], yerr=[[lo], [hi]], fmt="o", ms=4,
                            color="#1f77b4", capsize=3)
        ax.set_title(history.printable(f"{key[0]}.{key[1]} [{key[2]}]"), fontsize=8)
        ax.tick_params(axis="x", labelrotation=30, labelsize=7)
        ax.grid(True, alpha=0.3)
    for ax in list(axes.flat)[len(keys):]:
        ax.axis("off")
    fig.suptitle(history.printable(f"unit {unit}: parameters over time (95 %; ▼ upper bound)"),
                 fontsize=10)
    fig.tight_layout()
    try:
        with Staged(overwrite) as staged:
            fig.savefig(staged.path(Path(out)), dpi=100, format="png")
            staged.commit()
    finally:
        plt.close(fig)

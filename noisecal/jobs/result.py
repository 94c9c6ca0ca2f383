"""What every job's result object offers: its parameters, a summary, a mapping, a file.

A job returns a frozen result holding typed values (Estimates, curves, models);
the YAML block, the text summary, the plots, the re-check and the history are
views made from it. :class:`JobResult` is the part they share.
"""

from __future__ import annotations

import copy
import math
import numbers
from pathlib import Path
from typing import NamedTuple

from ..errors import InputError
from ..types import Estimate


class Parameter(NamedTuple):
    """One fitted number of a job, as the re-check and the history see it.

    Attributes
    ----------
    channel : str
        Channel (or ``"all"``, ``"pixel"``, ``"odometry"``) it belongs to.
    name : str
        Parameter name, as in the YAML block.
    estimate : Estimate
        Full-precision value, interval or bound, unit.
    how : dict
        How a re-check compares it: ``linear`` (by the difference, for signed
        quantities), ``power`` (2 for variance coefficients), ``more_of`` (what
        more data means).
    """

    channel: str
    name: str
    estimate: Estimate
    how: dict


class ParameterError(InputError, ValueError):
    """A keyword argument of the Python API that is out of range or of the wrong kind.

    The message names the Python parameter (``reps=5: …``); the command line
    turns it into its option (``--reps 5: …``).
    """

    def __init__(self, param: str, value, text: str):
        self.param, self.value, self.text = param, value, text
        super().__init__(f"{param}={value!r}: {text}")

    def as_option(self) -> str:
        """The same message with the command-line option in place of the parameter."""
        return f"--{self.param.replace('_', '-')} {self.value}: {self.text}"


def whole(name: str, value, lowest: int) -> int:
    """``value`` as a whole number of at least ``lowest``, or a ParameterError."""
    if isinstance(value, bool) or not isinstance(value, numbers.Integral):
        raise ParameterError(name, value, "give a whole number")
    if value < lowest:
        raise ParameterError(name, value, f"give at least {lowest}")
    return int(value)


def seconds(name: str, value, none_ok: bool = True) -> float | None:
    """``value`` as a positive finite number of seconds (None allowed if ``none_ok``)."""
    if value is None and none_ok:
        return None
    if isinstance(value, bool) or not isinstance(value, numbers.Real) or not (
            math.isfinite(value) and value > 0):
        raise ParameterError(name, value, "give a positive number of seconds")
    return float(value)


class JobResult:
    """Methods every job result shares (mixed into each frozen result class).

    A subclass provides ``sections`` (the YAML content), ``parameters()``,
    ``_summary()`` and ``_render(out)`` (the YAML text; side-file paths
    relative to ``out``'s folder).
    """

    def parameters(self) -> list[Parameter]:  # pragma: no cover - every job overrides it
        raise NotImplementedError

    def summary(self) -> str:
        """Plain-text summary: the headline numbers with intervals and units, notes."""
        return self._summary()

    def to_dict(self) -> dict:
        """The YAML block's content as plain Python values (a copy)."""
        return copy.deepcopy(self.sections)

    def write(self, path: str | Path, overwrite: bool = False) -> Path:
        """Write the YAML block atomically; an existing file is replaced only with
        ``overwrite=True``.

        Returns
        -------
        Path
            The file written.
        """
        from ..export.atomic import write_text

        path = Path(path)
        if path.is_dir():
            raise InputError(f"{path}: is a folder; give a file name for the YAML block")
        if path.exists() and not overwrite:
            raise ParameterError("path", str(path), "exists; pass overwrite=True to replace it")
        # Put in place exclusively unless replacing was asked for: a file that
        # appeared meanwhile (another run) is refused, not replaced.
        write_text(path, self._render(path), overwrite=overwrite)
        return path

    def report(self, path: str | Path, overwrite: bool = False) -> Path:
        """Write the self-contained HTML report of this result atomically; an existing
        file is replaced only with ``overwrite=True``.

        Returns
        -------
        Path
            The file written.
        """
        from ..export.html import write_report

        return write_report(self, path, overwrite)

    def estimate(self, channel: str, name: str) -> Estimate:
        """The Estimate of one parameter (full precision)."""
        for p in self.parameters():
            if p.channel == channel and p.name == name:
                return p.estimate
        have = ", ".join(f"{p.channel}.{p.name}" for p in self.parameters())
        raise ParameterError("name", f"{channel}.{name}", f"no such parameter; there are {have}")

    def confidence_interval(self, channel: str, name: str, level: float = 0.95) -> Estimate:
        """The parameter's Estimate at another confidence level, where its method allows.

        Parameters
        ----------
        channel, name : str
        level : float
            Two-sided level in (0, 1).

        Returns
        -------
        Estimate
        """
        if not 0.0 < float(level) < 1.0:
            raise ParameterError("level", level, "give a confidence level between 0 and 1, "
                                 "e.g. 0.9")
        est = self.estimate(channel, name)
        if abs(level - est.level) < 1e-12:
            return est
        other = self._at_level(channel, name, float(level))
        if other is None:
            raise ParameterError("level", level, f"{channel}.{name} has its interval at "
                                 f"{est.level:g} only ({est.method})")
        return other

    def _at_level(self, channel: str, name: str, level: float) -> Estimate | None:
        """Recompute one interval at ``level``; None where the method does not allow it."""
        return None


def offset_estimate(alignment) -> Estimate:
    """A sensor–truth time offset (:class:`~noisecal.analysis.align.Alignment`) as an Estimate, s."""
    return Estimate(float(alignment.offset), float(alignment.lower), float(alignment.upper),
                    "s", "cross-correlation of motion, refined by a Huber loss; sandwich "
                    "interval (Newey-West)")

"""Inspect a recording: what it holds and what is wrong with it, nothing written."""

from __future__ import annotations

import numpy as np

from ..ingest import read_recording
from ..types import Recording
from .static import MIN_SAMPLES

JITTER_WARN = 0.01
"""Timestamp jitter, as a fraction of the period, worth a warning (common practice, no source)."""


def problems(rec: Recording) -> list[str]:
    """Findings a user should know before analysing the recording."""
    found = []
    if rec.gaps:
        missing = sum(g.missing for g in rec.gaps)
        found.append(f"{len(rec.gaps)} gap(s), {missing} sample(s) missing; Allan terms "
                     "never span a gap")
    for run in rec.saturated:
        found.append(f"{run.channel}: {run.samples} samples stuck at {run.value:.6g} from "
                     f"t = {run.start_s:.6g} s (clipping?)")
    if rec.jitter > JITTER_WARN * rec.period:
        found.append(f"timestamp jitter {rec.jitter:.3g} s is {rec.jitter / rec.period:.1%} "
                     "of the period")
    longest = max(b - a for a, b in rec.segments)
    if longest < MIN_SAMPLES:
        found.append(f"longest run without gaps is {longest} samples; the static analysis "
                     f"needs {MIN_SAMPLES} ({MIN_SAMPLES * rec.period:.3g} s)")
    for name in rec.channels:
        if np.ptp(rec.channel(name)) == 0:
            found.append(f"{name}: constant channel")
    found.extend(rec.source.repairs)
    return found


def describe(rec: Recording) -> str:
    """A plain-text description of the recording."""
    lines = [
        f"{rec.source.path} ({rec.source.format}, {rec.source.size_bytes} bytes, "
        f"sha256 {rec.source.sha256[:16]}…)",
        f"  samples   {rec.n}",
        f"  duration  {rec.duration:.6g} s ({rec.duration / 3600:.3g} h)",
        f"  rate      {1 / rec.period:.6g} Hz (period {rec.period:.6g} s, jitter {rec.jitter:.3g} s)",
        "  channels",
    ]
    for name, src, si in zip(rec.channels, rec.source_units, rec.units):
        y = rec.channel(name)
        aux = "  (auxiliary)" if name in rec.auxiliary else ""
        lines.append(f"    {name:<16} [{src}] -> [{si}]  mean {y.mean():.6g}  "
                     f"std {y.std():.6g}{aux}")
    if rec.auxiliary:
        lines.append(f"  auxiliary {', '.join(rec.auxiliary)}: kept, not a quantity the noise "
                     "fit analyses; left out of the static fit unless named with --channels")
    lines.extend(f"  note      {n}" for n in rec.source.notes)
    for g in rec.gaps:
        lines.append(f"  gap at {g.start_s:.6g} s, {g.length_s:.6g} s long ({g.missing} samples)")
    found = problems(rec)
    lines.append("  problems: " + ("none found" if not found else ""))
    lines.extend(f"    - {p}" for p in found)
    return "\n".join(lines)


def run_inspect(path: str, repair: str | None = None, use_cache: bool = True) -> str:
    """Read and describe a recording."""
    return describe(read_recording(path, repair=repair, use_cache=use_cache))

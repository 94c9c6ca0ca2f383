"""Re-check cases on the simulated range sensor (tests/recheck/range_sim.py)."""

from __future__ import annotations

from pathlib import Path

from noisecal.ingest import read_recording
from noisecal.ingest.mapping import read_map
from noisecal.jobs import motion
from noisecal.jobs.recheck import recheck
from tests.recheck.range_sim import write_drive, write_map

COVARIATE = "beacon.B1.range"


def baseline(folder: Path, seed: int, **drive) -> Path:
    """A motion baseline with the law fitted (the covariate given as an option, as
    ``--covariate`` does, not in the map), written the way the job writes it."""
    sensor, truth = write_drive(folder, seed, name="base", **drive)
    mp = write_map(folder)
    res = motion.analyse(read_recording(sensor, use_cache=False),
                         read_recording(truth, use_cache=False), read_map(mp, COVARIATE),
                         seed=seed)
    out = folder / "base.yaml"
    out.write_text(motion.render(res.sections))
    return out


def pair_verdict(root: Path, seed: int, base_drive: dict, new_drive: dict, **options):
    """Re-check a new drive against a baseline in another folder; the RecheckResult."""
    base = baseline(root / f"unit{seed}" / "A", 2 * seed, **base_drive)
    sensor, truth = write_drive(root / f"unit{seed}" / "B", 2 * seed + 1, name="new",
                                **new_drive)
    return recheck(str(base), str(sensor), str(truth), use_cache=False, **options)

"""The demo: the committed bench recording through inspect and static."""

from __future__ import annotations

from pathlib import Path

from ..errors import InputError
from .inspect import run_inspect
from .static import run_static, summary

RECORDING = "recordings/bench_static.parquet"
OUT_DIR = "reports/demo"


def run_demo(root: str = ".", quiet: bool = False) -> str:
    """Run the demo from the project root; return what it prints.

    Writes ``reports/demo/static.yaml`` and ``reports/demo/static.png``.
    """
    base = Path(root)
    rec = base / RECORDING
    if not rec.exists():
        raise InputError(f"{rec}: demo recording missing; run 'make demo' from the "
                         "project folder (or 'make demo-data' to make it again)")
    out = base / OUT_DIR
    out.mkdir(parents=True, exist_ok=True)
    text = [run_inspect(str(rec)), ""]
    result = run_static(str(rec), str(out / "static.yaml"), str(out / "static.png"),
                        overwrite=True, quiet=quiet, command=f"noisecal demo ({RECORDING})")
    text.append(summary(result))
    text.append(f"\nwrote {out / 'static.yaml'} and {out / 'static.png'}")
    return "\n".join(text)

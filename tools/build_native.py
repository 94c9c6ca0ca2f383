"""Rebuild noisecal's C kernels in place, without reinstalling the package.

``pip install -e .`` builds them too (an optional extension); this is the quick
loop while editing ``noisecal/_native/*.c``: the same flags, one gcc call, and
the library replaced atomically (a test run loading it meanwhile sees the old
one or the new one, never half a file).
"""

from __future__ import annotations

import os
import subprocess
import sys
import sysconfig
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
FOLDER = ROOT / "noisecal" / "_native"
SOURCES = ["engine.c", "fit.c", "special.c"]
FLAGS = ["-O3", "-fopenmp-simd", "-std=c99", "-shared", "-fPIC", "-Wall"]


def main() -> int:
    target = FOLDER / ("kernels" + sysconfig.get_config_var("EXT_SUFFIX"))
    cc = os.environ.get("CC", "gcc")
    fd, tmp = tempfile.mkstemp(dir=FOLDER, suffix=".so.tmp")
    os.close(fd)
    try:
        cmd = [cc, *FLAGS, *(str(FOLDER / s) for s in SOURCES), "-lm", "-o", tmp]
        done = subprocess.run(cmd)
        if done.returncode != 0:
            return done.returncode
        os.replace(tmp, target)
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)
    print(f"built {target.relative_to(ROOT)}")
    return 0


if __name__ == "__main__":
    sys.exit(main())

"""The static job's kernels in C, loaded with ctypes when they were built.

The numba kernels (:mod:`noisecal.analysis.engine`, :mod:`noisecal.fit.avar_cov`,
…) cost about 0.7 s of every fresh process before they compute anything:
importing numba, the scipy.linalg it loads, its CPU target and each kernel's
cache entry. The same kernels in C (``engine.c``, ``fit.c``) are compiled into
one shared library when the package is installed, if a C compiler is at hand
(``pip`` builds it as an optional extension; without one, or with
``NOISECAL_NATIVE=0``, the numba kernels run instead, with the same results to
rounding). ctypes releases the GIL for each call, so channels still overlap on
threads.

A library older than its sources (an editable install whose C files changed
since the build) is not loaded, with a warning: re-run ``make`` (or
``python tools/build_native.py``).
"""

from __future__ import annotations

import ctypes
import importlib.machinery
import os
import warnings
from pathlib import Path

import numpy as np

_FOLDER = Path(__file__).resolve().parent
_STATE: dict = {}

P = ctypes.c_void_p
"""An array argument: pass :func:`ptr` of a C-contiguous array."""
I64 = ctypes.c_int64
F64 = ctypes.c_double


def _path() -> Path | None:
    for suffix in importlib.machinery.EXTENSION_SUFFIXES:
        path = _FOLDER / f"kernels{suffix}"
        if path.is_file():
            return path
    return None


def library():
    """The loaded C library, or None (not built, stale, or ``NOISECAL_NATIVE=0``)."""
    if os.environ.get("NOISECAL_NATIVE", "1").strip() == "0":
        return None
    if "lib" not in _STATE:
        path = _path()
        lib = None
        if path is not None:
            built = path.stat().st_mtime
            sources = list(_FOLDER.glob("*.c")) + list(_FOLDER.glob("*.h"))
            newer = [s.name for s in sources if s.stat().st_mtime > built]
            if newer:
                # Same numbers either way, but a run ~0.7 s slower than it should be.
                warnings.warn(f"noisecal: {path.name} is older than {', '.join(newer)}; "
                              "the numba kernels run instead; rebuild with `make` or "
                              "`python tools/build_native.py`", RuntimeWarning, stacklevel=2)
            else:
                try:
                    lib = ctypes.CDLL(str(path))
                except OSError:
                    lib = None
        _STATE["lib"] = lib
    return _STATE["lib"]


def enabled() -> bool:
    """Whether the C kernels run (built, current, and not turned off)."""
    return library() is not None


def function(name: str, argtypes: list, restype=None):
    """The C function ``name`` with its ctypes signature (looked up once).

    Parameters
    ----------
    name : str
        Exported symbol.
    argtypes : list
        ctypes types of the arguments (:data:`P` for arrays, :data:`I64`, :data:`F64`).
    restype : ctypes type, optional
        Return type; None for void.

    Raises
    ------
    RuntimeError
        The library is not loaded (callers check :func:`enabled` first).
    """
    fn = _STATE.get(name)
    if fn is None:
        lib = library()
        if lib is None:
            raise RuntimeError("noisecal's C kernels are not loaded")
        fn = getattr(lib, name)
        fn.argtypes = argtypes
        fn.restype = restype
        _STATE[name] = fn
    return fn


def ptr(a: np.ndarray, dtype=np.float64) -> int:
    """Address of ``a``'s data, refusing what the C side would misread.

    Raises
    ------
    TypeError
        ``a`` is not a C-contiguous array of ``dtype``.
    """
    if not isinstance(a, np.ndarray) or a.dtype != dtype or not a.flags.c_contiguous:
        raise TypeError(f"C kernel argument: need a C-contiguous {np.dtype(dtype)} array, "
                        f"got {getattr(a, 'dtype', type(a))}")
    return a.ctypes.data

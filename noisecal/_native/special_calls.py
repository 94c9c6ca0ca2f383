"""Python faces of the C special functions (``special.c``): the same arguments,
results, shapes and edge values as :mod:`noisecal.analysis.special`'s numpy code,
which they stand in for when the C kernels are loaded.

Arguments are broadcast with numpy to one shape, made C-contiguous float64 and
passed to an element-wise C loop; the result is reshaped, and a 0-d result is
returned as a numpy scalar, as the numpy functions do. The coefficient tables
(the uniform expansion's c_k(η), ln Γ(1 + a) near 0) are the numpy module's
own, passed with every call.
"""

from __future__ import annotations

import numpy as np

from . import I64, P, function, ptr

_TABLES: dict = {}


def _tables() -> tuple[np.ndarray, np.ndarray]:
    """special.py's Temme table (20 × 30) and ln Γ(1 + a) coefficients (26), as
    C-contiguous float64 arrays (built once)."""
    if "temme" not in _TABLES:
        from ..analysis import special

        temme = np.ascontiguousarray(special._TEMME, dtype=np.float64)
        lg1p = np.ascontiguousarray(special._lgamma1p_coefficients(), dtype=np.float64)
        if temme.shape != (20, 30) or lg1p.shape != (26,):
            raise ValueError("special_calls: coefficient tables of an unexpected shape "
                             f"{temme.shape}, {lg1p.shape}; special.c expects (20, 30), (26,)")
        _TABLES["lg1p"] = lg1p
        _TABLES["temme"] = temme
    return _TABLES["temme"], _TABLES["lg1p"]


def _inputs(*args) -> tuple[tuple[int, ...], list[np.ndarray]]:
    """Broadcast shape and the arguments as flat C-contiguous float64 copies."""
    arrays = np.broadcast_arrays(*[np.asarray(v, dtype=float) for v in args])
    shape = arrays[0].shape
    return shape, [np.ascontiguousarray(v, dtype=np.float64).reshape(-1) for v in arrays]


def _one(name: str, x) -> np.ndarray | float:
    shape, (x,) = _inputs(x)
    out = np.empty(x.shape[0])
    function(name, [P, I64, P])(ptr(x), x.shape[0], ptr(out))
    return out.reshape(shape)[()]


def ndtr(x):
    """Φ(x), element-wise: see :func:`noisecal.analysis.special.ndtr`."""
    return _one("nc_ndtr", x)


def ndtri(p):
    """Φ⁻¹(p), element-wise: see :func:`noisecal.analysis.special.ndtri`."""
    return _one("nc_ndtri", p)


def _gamma(name: str, a, x, flag: int):
    temme, lg1p = _tables()
    shape, (a, x) = _inputs(a, x)
    out = np.empty(a.shape[0])
    function(name, [P, P, I64, P, P, I64, P])(ptr(a), ptr(x), a.shape[0], ptr(temme),
                                              ptr(lg1p), flag, ptr(out))
    return out.reshape(shape)[()]


def gammainc(a, x):
    """P(a, x): see :func:`noisecal.analysis.special.gammainc`."""
    return _gamma("nc_gammainc", a, x, 0)


def gammaincc(a, x):
    """Q(a, x): see :func:`noisecal.analysis.special.gammaincc`."""
    return _gamma("nc_gammainc", a, x, 1)


def gammaincinv(a, p):
    """x with P(a, x) = p: see :func:`noisecal.analysis.special.gammaincinv`."""
    return _gamma("nc_gammaincinv", a, p, 0)


def gammainccinv(a, q):
    """x with Q(a, x) = q: see :func:`noisecal.analysis.special.gammainccinv`."""
    return _gamma("nc_gammaincinv", a, q, 1)


def betainc(a, b, x):
    """I_x(a, b): see :func:`noisecal.analysis.special.betainc`."""
    shape, (a, b, x) = _inputs(a, b, x)
    out = np.empty(a.shape[0])
    function("nc_betainc", [P, P, P, I64, P])(ptr(a), ptr(b), ptr(x), a.shape[0], ptr(out))
    return out.reshape(shape)[()]

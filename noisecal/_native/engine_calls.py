"""Python faces of the C deviation-engine kernels (``engine.c``): the same arguments
as the numba kernels of :mod:`noisecal.analysis.engine` they stand in for."""

from __future__ import annotations

import numpy as np

from . import F64, I64, P, function, ptr


def integrate(y: np.ndarray, mean: float, period: float, x: np.ndarray) -> np.ndarray:
    """Phase of ``y`` into ``x`` (shape (n + 1,)): see ``engine._integrate``."""
    if x.shape[0] != y.shape[0] + 1:
        raise ValueError("phase buffer must hold n + 1 values")
    function("nc_integrate", [P, I64, F64, F64, P])(ptr(y), y.shape[0], float(mean),
                                                    float(period), ptr(x))
    return x

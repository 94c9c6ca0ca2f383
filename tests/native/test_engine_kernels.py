"""The C deviation-engine kernels against the numba kernels they stand in for."""

from __future__ import annotations

import numpy as np
import pytest

from noisecal.analysis import engine

from . import requires_native

pytestmark = requires_native


def test_integrate_equals_numba_and_cumsum():
    """Reference: numpy's cumsum of (y − mean)·period (independent library), and the
    numba kernel, on 100 001 samples."""
    from noisecal._native import engine_calls

    y = np.random.default_rng(1).normal(3.0, 1.0, 100_001)
    m = float(np.mean(y))
    got = engine_calls.integrate(y, m, 0.01, np.empty(y.shape[0] + 1))
    ref = np.concatenate([[0.0], np.cumsum((y - m) * 0.01)])
    numba_x = engine._integrate(y, m, 0.01, np.empty(y.shape[0] + 1))
    np.testing.assert_allclose(got, ref, rtol=0, atol=1e-9)
    np.testing.assert_array_equal(got, numba_x)


def test_a_strided_or_wrong_typed_array_is_refused():
    """ctypes passes a bare address: a view or an int array would be misread, so the
    call refuses it (common practice, no source)."""
    from noisecal._native import engine_calls

    y = np.ones(20)
    with pytest.raises(TypeError):
        engine_calls.integrate(y[::2], 1.0, 0.1, np.empty(11))
    with pytest.raises(TypeError):
        engine_calls.integrate(np.ones(10, dtype=np.int64), 1.0, 0.1, np.empty(11))

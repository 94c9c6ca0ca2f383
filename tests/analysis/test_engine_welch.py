"""The batched Welch PSD equals scipy.signal.welch with linear detrend (reference library)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import signal

from noisecal.analysis import engine


@pytest.mark.parametrize("n, nperseg", [(2 ** 21, 4096), (50_000, 4096), (10_001, 1250),
                                        (4097, 511)])
def test_equals_scipy(n, nperseg):
    rng = np.random.default_rng(n)
    x = np.cumsum(rng.standard_normal(n)) * 1e-3 + rng.standard_normal(n) + 0.01 * np.arange(n)
    f_ref, p_ref = signal.welch(x, fs=200.0, nperseg=nperseg, detrend="linear")
    f, p = engine.welch_linear(x, 200.0, nperseg)
    np.testing.assert_allclose(f, f_ref, rtol=1e-14)
    np.testing.assert_allclose(p, p_ref, rtol=1e-9, atol=1e-12 * p_ref.max())

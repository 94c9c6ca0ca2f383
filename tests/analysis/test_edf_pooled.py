"""Pooled EDF over many runs (analysis/edf.pooled_edf) with grouped run lengths."""

from __future__ import annotations

import numpy as np
import pytest

import noisecal.analysis.edf as E


@pytest.mark.parametrize("alpha", [0, -2])
def test_grouped_lengths_keep_the_pooled_edf(alpha, monkeypatch):
    """600 runs of random lengths: the pooled EDF from lengths grouped on a
    ratio-2^(1/8) grid within 1e-3 of the one from every length (the weighted mean
    of independent chi-squares, (Σw)²/Σ(w²/ν); common practice, no source)."""
    rng = np.random.default_rng(0)
    lengths = rng.integers(200, 3000, 600) + 1
    for m in (1, 16, 128):
        w = np.maximum(lengths - 2 * m, 0).astype(float)
        ok = w > 0
        grouped = E.pooled_edf(alpha, "oadev", m, lengths[ok], w[ok])
        monkeypatch.setattr(E, "MAX_EDF_LENGTHS", 10 ** 9)
        full = E.pooled_edf(alpha, "oadev", m, lengths[ok], w[ok])
        monkeypatch.setattr(E, "MAX_EDF_LENGTHS", 32)
        assert grouped == pytest.approx(full, rel=1e-3)


def test_few_lengths_are_not_grouped():
    """Up to 32 distinct lengths every run's EDF is its own: the pooled value is the
    formula evaluated by hand on three runs."""
    lengths = np.array([1001, 2001, 4001])
    w = (lengths - 2).astype(float)
    nus = [E.estimator_edf(0, "oadev", 1, int(n)) for n in lengths]
    expected = w.sum() ** 2 / sum(x * x / v for x, v in zip(w, nus))
    assert E.pooled_edf(0, "oadev", 1, lengths, w) == pytest.approx(expected, rel=1e-12)

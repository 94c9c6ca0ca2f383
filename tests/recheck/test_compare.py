"""Re-check statistics against scipy and statsmodels; verdicts on simulated units."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from noisecal.fit import compare
from noisecal.fit.simulate import simulate_rate
from noisecal.ingest import read_recording
from noisecal.jobs.recheck import recheck
from noisecal.jobs.static import characterise
from noisecal.export import yaml_block
from tests.conftest import rate_csv

N, K = 1e-3, 2e-4


def test_f_test_matches_scipy():
    """Reference library: at F = scipy.stats.f.ppf(0.975, 12, 20) the two-sided
    p-value of equal variances is 0.05; the F = 1 point gives about 1."""
    f = stats.f.ppf(0.975, 12, 20)
    assert compare.f_test(1.0, 20, f, 12) == pytest.approx(0.05, rel=1e-9)
    low = stats.f.ppf(0.025, 12, 20)
    assert compare.f_test(1.0, 20, low, 12) == pytest.approx(0.05, rel=1e-9)
    assert compare.f_test(2.0, 30, 2.0, 30) == pytest.approx(1.0, abs=1e-12)


def test_holm_matches_statsmodels():
    """Reference library: statsmodels' multipletests(method='holm')."""
    from statsmodels.stats.multitest import multipletests

    p = [0.01, 0.04, 0.03, 0.2, 0.0005]
    ref = multipletests(p, alpha=0.05, method="holm")[1]
    np.testing.assert_allclose(compare.holm(p), ref, rtol=1e-12)
    assert compare.holm([0.2, None, 0.01]) == [0.2, None, 0.02]


def _block(tmp_path, name, n, seed, scale=1.0, reps=60, k=K):
    y = simulate_rate(np.array([0, (N * scale) ** 2, 0, k ** 2, 0]), 0.1, n,
                      np.random.default_rng(seed))
    rec = read_recording(rate_csv(tmp_path / f"{name}.csv", y, 0.1), use_cache=False)
    res = characterise(rec, reps=reps, seed=seed)
    path = tmp_path / f"{name}.yaml"
    path.write_text(yaml_block.render(res.sections))
    return path, tmp_path / f"{name}.csv"


def verdicts(tmp_path, cases: int, first_seed: int) -> dict:
    out = {"consistent": 0, "changed": 0, "inconclusive": 0}
    for s in range(cases):
        base, _ = _block(tmp_path, f"b{s}", 2 ** 14, first_seed + 2 * s, k=0.0)
        _, new = _block(tmp_path, f"n{s}", 2 ** 14, first_seed + 2 * s + 1, k=0.0)
        out[recheck(str(base), str(new)).verdict] += 1
    print(f"same noise, {cases} units: {out}")
    return out


def test_same_noise_is_consistent_fast_set(tmp_path):
    """A white-noise unit re-recorded with the same noise is 'consistent' (Holm-
    corrected tests at 5 %: at most one of 16 seeded units may come out otherwise;
    binomial tripwire). With a random walk too short to decide to the tolerance,
    the honest verdict is 'inconclusive' instead (tested below)."""
    out = verdicts(tmp_path, 16, 300)
    assert out["consistent"] >= 15, out


@pytest.mark.slow
def test_same_noise_is_consistent_slow_set(tmp_path):
    """200 seeded units with the same noise: 'consistent' in at least 95 % (the acceptance level)."""
    out = verdicts(tmp_path, 200, 30_000)
    assert out["consistent"] >= 190, out


def test_white_noise_up_thirty_percent_is_worse(tmp_path):
    """White noise ×1.3 on a 2^14-sample recording: white_noise 'worse', overall
    'changed' (exit status 1)."""
    base, _ = _block(tmp_path, "base", 2 ** 14, 1)
    _, new = _block(tmp_path, "new", 2 ** 14, 2, scale=1.3)
    res = recheck(str(base), str(new))
    white = [c for c in res.comparisons if c.name == "white_noise"][0]
    assert white.verdict == "worse" and res.verdict == "changed" and res.exit_status == 1
    assert white.ratio == pytest.approx(1.3, rel=0.05)


def test_too_short_is_inconclusive(tmp_path):
    """A recording too short to decide the baseline's random walk: 'inconclusive' (exit
    3), with how many times longer to record. Whether the short record bounds the term
    (the figure is then the length ratio) or resolves it with a wide interval (then the
    80 % power calculation on its interval), the figure is the length ratio within 5 %."""
    base, _ = _block(tmp_path, "base", 2 ** 16, 3)
    _, new = _block(tmp_path, "new", 1500, 4)
    res = recheck(str(base), str(new))
    rw = [c for c in res.comparisons if c.name == "bias_random_walk"][0]
    assert rw.verdict == "inconclusive" and rw.longer == pytest.approx(2 ** 16 / 1500, rel=0.05)
    assert res.verdict == "inconclusive" and res.exit_status == 3


def test_limits_say_within_or_out_of_spec(tmp_path):
    base, _ = _block(tmp_path, "base", 2 ** 14, 5)
    _, new = _block(tmp_path, "new", 2 ** 14, 6)
    ok = tmp_path / "ok.yaml"
    ok.write_text("limits: {gyro_x: {white_noise: {max: 1.2e-3}}}\n")
    tight = tmp_path / "tight.yaml"
    tight.write_text("limits: {gyro_x: {white_noise: {max: 0.9e-3}}}\n")
    assert recheck(str(base), str(new), limits=str(ok)).within_spec is True
    assert recheck(str(base), str(new), limits=str(tight)).within_spec is False

"""Benchmarks of the deviation engine, ingest and the static job (``make bench``).

Every figure is a ratio against a reference measured in the same run, on the
same data: allantools for the deviations, one numpy reduction pass for the
memory-speed limit, pandas.read_csv for ingest. Writes reports/bench.json and
prints a table. Data are simulated (fixed seeds); nothing here is a test.
"""

from __future__ import annotations

import json
import os
import platform
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from noisecal.analysis.allan import deviation, factor_grid  # noqa: E402
from noisecal.fit.simulate import simulate_rate  # noqa: E402

RATE = 400.0
DAY = int(24 * 3600 * RATE)      # 34.56 M samples
HOUR = int(3600 * RATE)          # 1.44 M samples
GYRO = np.array([0.0, 4.4e-5 ** 2, 0.0, 1.2e-6 ** 2, 0.0])  # white + random walk


def best_of(fn, repeat=3):
    """Shortest wall time of ``repeat`` calls, and the last result."""
    best, out = np.inf, None
    for _ in range(repeat):
        t = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t)
    return best, out


def bench_allan(results):
    import allantools

    y = simulate_rate(GYRO, 1 / RATE, DAY, np.random.default_rng(1)) + 0.01
    m = factor_grid(DAY, "oadev", "dense", per_decade=10)
    deviation(y[:100_000], 1 / RATE, m[:3])  # compile outside the timing
    t_ref, ref = best_of(lambda: allantools.oadev(y, rate=RATE, data_type="freq",
                                                  taus=m / RATE), repeat=1)
    t_eng, (dev, _) = best_of(lambda: deviation(y, 1 / RATE, m, "oadev"), repeat=3)
    t_red, _ = best_of(lambda: np.add.reduce(y), repeat=5)
    results["allan_taus"] = int(m.shape[0])
    results["allan_samples"] = int(DAY)
    results["allan_seconds_allantools"] = t_ref
    results["allan_seconds_engine"] = t_eng
    results["allan_seconds_one_reduction"] = t_red
    results["allan_speedup_vs_allantools"] = t_ref / t_eng
    results["allan_max_rel_diff"] = float(np.max(np.abs(dev / ref[1] - 1.0)))
    results["allan_time_over_memory_limit"] = t_eng / (m.shape[0] * t_red)


PEAK_PROBE = """
import sys, time
import numpy as np
import pandas, pyarrow, pyarrow.parquet
from noisecal.ingest import read_recording
def status(key):
    for line in open('/proc/self/status'):
        if line.startswith(key):
            return int(line.split()[1]) * 1024
open('/proc/self/clear_refs', 'w').write('5')
base = status('VmRSS')
t = time.perf_counter()
rec = read_recording(sys.argv[1], use_cache=True)
elapsed = time.perf_counter() - t
sum(float(np.asarray(c).sum()) for c in (rec.time,) + rec.columns)
decoded = 8 * rec.n * (1 + len(rec.channels))
print(elapsed, (status('VmHWM') - base) / decoded)
"""


def bench_ingest(results, folder: Path):
    import pandas as pd

    rng = np.random.default_rng(2)
    path = folder / "hour.csv"
    cols = [simulate_rate(GYRO, 1 / RATE, HOUR, rng) for _ in range(6)]
    with open(path, "w") as fh:
        fh.write("time [s]," + ",".join(f"ch{i} [rad/s]" for i in range(6)) + "\n")
        np.savetxt(fh, np.column_stack([np.arange(HOUR) / RATE] + cols), delimiter=",",
                   fmt="%.9g")
    results["ingest_csv_bytes"] = path.stat().st_size
    t_pd, _ = best_of(lambda: pd.read_csv(path, engine="c"), repeat=3)
    try:
        # pandas >= 3.1 parses one file on every core; the one-thread figure shows
        # how much of the gap that is.
        with pd.option_context("mode.max_threads", 1):
            t_pd1, _ = best_of(lambda: pd.read_csv(path, engine="c"), repeat=3)
    except (KeyError, pd.errors.OptionError):
        t_pd1 = t_pd
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    firsts, ratios = [], []
    for k in range(3):
        env["NOISECAL_CACHE"] = str(folder / f"cache{k}")
        out = subprocess.run([sys.executable, "-c", PEAK_PROBE, str(path)], env=env,
                             capture_output=True, text=True, check=True).stdout.split()
        firsts.append(float(out[0]))
        ratios.append(float(out[1]))
    warm = subprocess.run([sys.executable, "-c", PEAK_PROBE, str(path)], env=env,
                          capture_output=True, text=True, check=True).stdout.split()
    results["ingest_seconds_pandas"] = t_pd
    results["ingest_seconds_first_read"] = min(firsts)
    results["ingest_seconds_cached_read"] = float(warm[0])
    results["ingest_time_over_pandas"] = min(firsts) / t_pd
    results["ingest_seconds_pandas_one_thread"] = t_pd1
    results["ingest_time_over_pandas_one_thread"] = min(firsts) / t_pd1
    results["ingest_peak_rss_over_decoded"] = min(ratios)
    results["cached_read_speedup_vs_pandas"] = t_pd / float(warm[0])


def bench_static(results, folder: Path):
    import pyarrow as pa
    import pyarrow.parquet as pq

    path = folder / "day.parquet"
    rng = np.random.default_rng(3)
    writer = None
    chunk = HOUR
    for start in range(0, DAY, chunk):
        n = min(chunk, DAY - start)
        table = {"time [s]": (start + np.arange(n)) / RATE}
        for i in range(6):
            table[f"ch{i} [rad/s]"] = simulate_rate(GYRO, 1 / RATE, n, rng)
        batch = pa.table(table)
        if writer is None:
            writer = pq.ParquetWriter(path, batch.schema)
        writer.write_table(batch)
    writer.close()
    env = dict(os.environ, PYTHONPATH=str(ROOT), NOISECAL_CACHE=str(folder / "static-cache"))
    for label in ("cold", "warm"):
        out = folder / f"day-{label}.yaml"
        cmd = ["/usr/bin/time", "-v"] if Path("/usr/bin/time").exists() else []
        t = time.perf_counter()
        proc = subprocess.run(cmd + [sys.executable, "-m", "noisecal.cli", "static", str(path),
                                     "-o", str(out), "--quiet", "--overwrite"],
                              env=env, capture_output=True, text=True, check=True)
        results[f"static_day_seconds_{label}"] = time.perf_counter() - t
        peak = [line for line in proc.stderr.splitlines() if "Maximum resident" in line]
        if peak:
            results[f"static_day_peak_rss_mb_{label}"] = int(peak[0].split()[-1]) / 1024
    results["static_day_decoded_mb"] = 8 * DAY * 7 / 2 ** 20


TARGETS = {
    "allan_speedup_vs_allantools": (">=", 6.0),
    "allan_max_rel_diff": ("<=", 1e-9),
    "allan_time_over_memory_limit": ("<=", 2.0),
    "ingest_time_over_pandas": ("<=", 1.2),
    "ingest_peak_rss_over_decoded": ("<=", 1.5),
    "cached_read_speedup_vs_pandas": (">=", 20.0),
}


def main():
    results = {"machine": {"cpus": os.cpu_count(), "python": platform.python_version(),
                           "platform": platform.platform(),
                           "pandas": __import__("pandas").__version__}}
    with tempfile.TemporaryDirectory(prefix="noisecal-bench-") as tmp:
        folder = Path(tmp)
        print("deviation engine …", file=sys.stderr)
        bench_allan(results)
        print("ingest …", file=sys.stderr)
        bench_ingest(results, folder)
        if "--quick" not in sys.argv:
            print("static job on a day-long recording …", file=sys.stderr)
            bench_static(results, folder)
    verdict = {}
    for key, (op, target) in TARGETS.items():
        value = results[key]
        verdict[key] = {"value": value, "target": f"{op} {target:g}",
                        "met": bool(value >= target if op == ">=" else value <= target)}
    results["targets"] = verdict
    out = ROOT / "reports" / "bench.json"
    out.write_text(json.dumps(results, indent=2) + "\n")
    print(f"{'figure':<34} {'value':>12}  target     met")
    for key, v in verdict.items():
        print(f"{key:<34} {v['value']:>12.4g}  {v['target']:<10} {'yes' if v['met'] else 'NO'}")
    for key in sorted(results):
        if key.startswith(("static_day", "ingest_seconds", "ingest_time_over_pandas_one")):
            print(f"{key:<34} {results[key]:>12.4g}")
    print(f"wrote {out}")


if __name__ == "__main__":
    main()

"""Benchmarks of the deviation engine, ingest and the static job (``make bench``).

Every figure is a ratio against a reference measured in the same run, on the
same data: allantools for the deviations, one numpy reduction pass for the
memory-speed limit, pandas.read_csv for ingest, and pandas.read_csv +
allantools.oadev (10 taus a decade) for the static job on a 2 h CSV. Writes
reports/bench.json and prints a table; ``--only allan,ingest,static-csv,batch,static-day``
runs a subset and writes reports/bench-partial.json instead. Data are simulated
(fixed seeds); nothing here is a test.
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
touched = time.perf_counter() - t  # a cached read's memory maps are paged in here
decoded = 8 * rec.n * (1 + len(rec.channels))
print(elapsed, (status('VmHWM') - base) / decoded, touched)
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
    # The same with one pass over every value (np.sum), which pages the memory maps in.
    results["ingest_seconds_cached_read_and_one_pass"] = float(warm[2])


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


REFERENCE_JOB = """
import sys
import numpy as np
import pandas as pd
import allantools
frame = pd.read_csv(sys.argv[1])
n = frame.shape[0]
top = n // 4
m = np.unique(np.round(np.logspace(0, np.log10(top), int(np.ceil(np.log10(top) * 10)) + 1)))
for name in frame.columns[1:]:
    allantools.oadev(frame[name].to_numpy(), rate=float(sys.argv[2]), data_type="freq",
                     taus=m / float(sys.argv[2]))
"""


def timed_run(cmd, env):
    """Wall time and peak RSS (MB, from /usr/bin/time -v when present) of one process."""
    wrap = ["/usr/bin/time", "-v"] if Path("/usr/bin/time").exists() else []
    t = time.perf_counter()
    proc = subprocess.run(wrap + cmd, env=env, capture_output=True, text=True, check=True)
    elapsed = time.perf_counter() - t
    peak = [line for line in proc.stderr.splitlines() if "Maximum resident" in line]
    return elapsed, (int(peak[0].split()[-1]) / 1024 if peak else float("nan"))


def bench_static_csv(results, folder: Path, repeat: int = 2):
    """``noisecal static`` on a 2 h, 400 Hz, 6-channel CSV against pandas.read_csv +
    allantools.oadev at 10 taus a decade on the same file, each a fresh process
    (imports included), cold cache (a new cache folder) and warm, best of
    ``repeat``."""
    n = 2 * HOUR
    path = folder / "two-hours.csv"
    rng = np.random.default_rng(4)
    models = [GYRO, np.array([0.0, 4.4e-5 ** 2, 2e-6 ** 2, 1.2e-6 ** 2, 0.0])]
    cols = [simulate_rate(models[i % 2], 1 / RATE, n, rng) + 0.01 * i for i in range(6)]
    with open(path, "w") as fh:
        fh.write("time [s]," + ",".join(f"ch{i} [rad/s]" for i in range(6)) + "\n")
        np.savetxt(fh, np.column_stack([np.arange(n) / RATE] + cols), delimiter=",",
                   fmt="%.9g")
    del cols
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    # Byte-compiled as an installed package is: with PYTHONDONTWRITEBYTECODE set, every
    # run would compile noisecal's modules again while the reference's come compiled.
    subprocess.run([sys.executable, "-m", "compileall", "-q", str(ROOT / "noisecal")],
                   check=True, capture_output=True)
    ref, cold, warm = [], [], []
    for k in range(repeat):
        ref.append(timed_run([sys.executable, "-c", REFERENCE_JOB, str(path), str(RATE)], env))
        env["NOISECAL_CACHE"] = str(folder / f"csv-cache{k}")
        job = [sys.executable, "-m", "noisecal.cli", "static", str(path), "-o",
               str(folder / "two-hours.yaml"), "--quiet", "--overwrite"]
        cold.append(timed_run(job, env))
        warm.append(timed_run(job, env))
    t_ref, t_cold, t_warm = (min(t for t, _ in runs) for runs in (ref, cold, warm))
    peak_ref = max(p for _, p in ref)
    peak = max(p for _, p in cold + warm)
    results["static_csv_bytes"] = path.stat().st_size
    results["static_csv_seconds_reference"] = t_ref
    results["static_csv_seconds_cold"] = t_cold
    results["static_csv_seconds_warm"] = t_warm
    results["static_csv_speedup_cold"] = t_ref / t_cold
    results["static_csv_speedup_warm"] = t_ref / t_warm
    results["static_csv_peak_rss_mb_reference"] = peak_ref
    results["static_csv_peak_rss_mb"] = peak
    results["static_csv_peak_over_reference"] = peak / peak_ref


TARGETS = {
    "allan_speedup_vs_allantools": (">=", 6.0),
    "allan_max_rel_diff": ("<=", 1e-9),
    "allan_time_over_memory_limit": ("<=", 2.0),
    "ingest_time_over_pandas": ("<=", 1.5),
    "ingest_peak_rss_over_decoded": ("<=", 1.5),
    "cached_read_speedup_vs_pandas": (">=", 20.0),
    "static_csv_speedup_cold": (">=", 2.0),
    "static_csv_speedup_warm": (">=", 4.0),
    "static_csv_peak_over_reference": ("<=", 1.0),
}


def bench_batch(results, folder: Path, rows: int = 12):
    """Scaling of ``noisecal batch``: rows per minute with 1 and 2 local workers (the
    whole command, cluster start-up included, which is also given alone), and the
    per-row overhead of the Dask path against a plain loop over the same task body in
    this process (warm: one row run first), on a fresh cluster and on a warm one.
    Rows: static, 8192 samples at 100 Hz, one channel, 60 bootstrap replicates."""
    import logging
    import shutil

    from distributed import LocalCluster

    from noisecal import history
    from noisecal.jobs import batch

    data = folder / "batch"
    data.mkdir()
    lines = ["job,recording,unit,sensor,options"]
    for k in range(rows + 1):
        y = np.random.default_rng(k).normal(0.0, 1e-3, 8192)
        with open(data / f"u{k}.csv", "w") as fh:
            fh.write("time [s],gyro_x [rad/s]\n")
            np.savetxt(fh, np.column_stack([np.arange(y.size) * 0.01, y]), delimiter=",",
                       fmt="%.9g")
        lines.append(f"static,u{k}.csv,U{k},imu,reps=60 seed={k + 1}")
    (data / "warm.csv").write_text("\n".join(lines[:2]) + "\n")
    (data / "m.csv").write_text("\n".join(lines[:1] + lines[2:]) + "\n")
    # Plain loop: the task body and the history write, one row after another.
    warm = batch.read_manifest(data / "warm.csv")[0]
    out = folder / "loop"
    out.mkdir()
    batch.run_row(warm, str(out), None, "warm")
    entries = batch.read_manifest(data / "m.csv")
    con = history.connect(out / "history.db")
    t = time.perf_counter()
    for row in entries:
        batch._record(con, out / "history.db", out, row, batch.run_row(row, str(out), None,
                                                                        "loop"))
    t_loop = time.perf_counter() - t
    con.close()
    results["batch_rows"] = rows
    results["batch_seconds_plain_loop"] = t_loop
    for n in (1, 2):
        t = time.perf_counter()
        c = LocalCluster(n_workers=n, threads_per_worker=1, processes=True,
                         host="127.0.0.1", dashboard_address=":0",
                         silence_logs=logging.ERROR)
        start = time.perf_counter() - t
        c.close()
        target = folder / f"dask{n}"
        t = time.perf_counter()
        res = batch.run_batch(data / "m.csv", target, workers=n, quiet=True)
        total = time.perf_counter() - t
        assert res.count("done") == rows, res.summary()
        results[f"batch_seconds_cluster_start_{n}_workers"] = start
        results[f"batch_seconds_{n}_workers"] = total
        results[f"batch_rows_per_minute_{n}_workers"] = 60 * rows / total
        shutil.rmtree(target)
    # The same on a warm cluster (its worker has imported noisecal and loaded the
    # compiled kernels on a first batch): what a long-lived cluster costs per row.
    c = LocalCluster(n_workers=1, threads_per_worker=1, processes=True, host="127.0.0.1",
                     dashboard_address=":0", silence_logs=logging.ERROR)
    try:
        batch.run_batch(data / "warm.csv", folder / "warmup", scheduler=c.scheduler_address,
                        quiet=True)
        t = time.perf_counter()
        res = batch.run_batch(data / "m.csv", folder / "warm", scheduler=c.scheduler_address,
                              quiet=True)
        results["batch_seconds_1_worker_warm"] = time.perf_counter() - t
        assert res.count("done") == rows, res.summary()
    finally:
        c.close()
    results["batch_overhead_seconds_per_row_1_worker_warm"] = (
        results["batch_seconds_1_worker_warm"] - t_loop) / rows
    results["batch_rows_per_minute_plain_loop"] = 60 * rows / t_loop
    results["batch_speedup_2_over_1_workers"] = (results["batch_seconds_1_workers"]
                                                 / results["batch_seconds_2_workers"])
    # Per row, beyond the work itself and the cluster's start-up: scheduling, the
    # fresh worker's imports and compiled-code loads, the transfer of the outcome.
    results["batch_overhead_seconds_per_row_1_worker"] = (
        results["batch_seconds_1_workers"] - results["batch_seconds_cluster_start_1_workers"]
        - t_loop) / rows


def main():
    results = {"machine": {"cpus": os.cpu_count(), "python": platform.python_version(),
                           "platform": platform.platform(),
                           "pandas": __import__("pandas").__version__}}
    with tempfile.TemporaryDirectory(prefix="noisecal-bench-") as tmp:
        folder = Path(tmp)
        only = sys.argv[sys.argv.index("--only") + 1].split(",") if "--only" in sys.argv else None
        run = lambda name: only is None or name in only  # noqa: E731
        if run("allan"):
            print("deviation engine …", file=sys.stderr)
            bench_allan(results)
        if run("ingest"):
            print("ingest …", file=sys.stderr)
            bench_ingest(results, folder)
        if run("static-csv"):
            print("static job on a 2 h CSV against pandas + allantools …", file=sys.stderr)
            bench_static_csv(results, folder)
        if run("batch"):
            print("batch scaling: plain loop, 1 and 2 local Dask workers …", file=sys.stderr)
            bench_batch(results, folder)
        if "--quick" not in sys.argv and run("static-day"):
            print("static job on a day-long recording …", file=sys.stderr)
            bench_static(results, folder)
    verdict = {}
    for key, (op, target) in TARGETS.items():
        if key not in results:
            continue
        value = results[key]
        verdict[key] = {"value": value, "target": f"{op} {target:g}",
                        "met": bool(value >= target if op == ">=" else value <= target)}
    results["targets"] = verdict
    out = ROOT / "reports" / ("bench.json" if only is None else "bench-partial.json")
    out.write_text(json.dumps(results, indent=2) + "\n")
    print(f"{'figure':<34} {'value':>12}  target     met")
    for key, v in verdict.items():
        print(f"{key:<34} {v['value']:>12.4g}  {v['target']:<10} {'yes' if v['met'] else 'NO'}")
    for key in sorted(results):
        if key.startswith(("static_day", "static_csv_seconds", "static_csv_peak_rss",
                           "ingest_seconds", "ingest_time_over_pandas_one", "batch_")):
            print(f"{key:<34} {results[key]:>12.4g}")
    print(f"wrote {out}")


if __name__ == "__main__":
    main()

"""Make the demo recordings in recordings/ (invented data, fixed seed).

Scenario (invented): the "Marten-3" orchard rover's inertial unit, a
fictional six-axis MEMS IMU called NC-40, bolted to the isolated bench of the
rover team's workshop and logged at rest for 6 h at 20 Hz. Like every MEMS
unit it low-passes its output before the 20 Hz sampling: a 2nd-order
Butterworth at 5 Hz (DC gain 1), which pulls the shortest taus below N/√τ.
The log has a 3 s dropout (a logger stall) and 50 µs timestamp jitter. Values
are stored at the unit's output resolution (0.0005 deg/s, 1e-5 g).

True noise terms (SI; the data are simulated from exactly these):

=========  ===================  ===================  ====================  =============
channel    white noise N        bias instability B   bias random walk K    rate ramp R
=========  ===================  ===================  ====================  =============
gyro_x/y/z 4.363e-5 rad/s/√Hz   1.939e-5 rad/s       1.212e-6 rad/s·√Hz    0
           (0.15 deg/√h)        (4 deg/h)            (15 deg/h/√h)
accel_x/y  5.0e-4 m/s²/√Hz      1.961e-4 m/s²        9.2e-6 m/s²·√Hz       0
           (0.03 m/s/√h)        (0.02 mg)
accel_z    as accel_x           as accel_x           as accel_x            2.0e-7 m/s³
=========  ===================  ===================  ====================  =============

N is the low-frequency level (what a filter stepping well above 0.1 s sees).
Quantization at the output resolution adds under 0.1 % to N² and is left
out of the table.

A second log, ``bench_static_swap.parquet``, is the replacement unit fitted
after the rover's IMU was swapped: the same model on the same bench, 3 h at
20 Hz (seed 20261202, no dropout), with the same terms as above except gyro_z,
whose white noise is 1.6 times the first unit's (6.981e-5 rad/s/√Hz, 0.24
deg/√h: a unit whose gyro is noisier than its twin's). The demo re-checks it
against the first unit's block: gyro_z's white noise changed, the rest as
before. Run: ``python tools/make_demo_recordings.py``.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from noisecal.fit.simulate import simulate_rate

SEED = 20261201
RATE_HZ = 20.0
HOURS = 6.0
DEG = np.pi / 180.0
G = 9.80665

GYRO = np.array([0.0, 4.363e-5 ** 2, 1.939e-5 ** 2, 1.212e-6 ** 2, 0.0])
ACCEL = np.array([0.0, 5.0e-4 ** 2, 1.961e-4 ** 2, 9.2e-6 ** 2, 0.0])
ACCEL_Z = ACCEL + np.array([0.0, 0.0, 0.0, 0.0, 2.0e-7 ** 2])
# Constant offsets: turn-on bias plus the projection of Earth's rate and gravity.
OFFSET_DEG_S = {"gyro_x": 0.021, "gyro_y": -0.013, "gyro_z": 0.0035}
OFFSET_G = {"accel_x": 0.0041, "accel_y": -0.0027, "accel_z": 1.0012}
GYRO_LSB_DEG_S = 0.0005
ACCEL_LSB_G = 1e-5
DROPOUT_AT_S, DROPOUT_S = 8280.0, 3.0
LOW_PASS_HZ = 5.0
SWAP_SEED, SWAP_HOURS = 20261202, 3.0
SWAP_GYRO_Z_WHITE = 1.6  # the replacement unit's gyro_z white noise, times the first's


def low_pass(y: np.ndarray, period: float) -> np.ndarray:
    """The unit's output filter: 2nd-order Butterworth, DC gain 1, started at rest."""
    from scipy import signal

    sos = signal.butter(2, LOW_PASS_HZ, fs=1.0 / period, output="sos")
    return signal.sosfilt(sos, y, zi=signal.sosfilt_zi(sos) * y[0])[0]


def make_static(path: Path, seed: int = SEED, hours: float = HOURS,
                white_scale: dict | None = None, dropout: bool = True) -> None:
    """Write one bench log: ``white_scale`` multiplies a channel's white noise."""
    rng = np.random.default_rng(seed)
    period = 1.0 / RATE_HZ
    n = int(hours * 3600 * RATE_HZ)
    scale = white_scale or {}
    t_ns = np.arange(n, dtype=np.int64) * int(period * 1e9)
    t_ns += np.round(rng.normal(0.0, 50e3, n)).astype(np.int64)  # 50 µs jitter
    t_ns += 1_780_000_000 * 10 ** 9  # an epoch start in 2026
    columns = {"time [ns]": t_ns}
    for name, offset in OFFSET_DEG_S.items():
        model = GYRO * np.array([1.0, scale.get(name, 1.0) ** 2, 1.0, 1.0, 1.0])
        rate = low_pass(simulate_rate(model, period, n, rng), period) / DEG + offset
        columns[f"{name} [deg/s]"] = np.round(rate / GYRO_LSB_DEG_S) * GYRO_LSB_DEG_S
    for name, offset in OFFSET_G.items():
        model = ACCEL_Z if name == "accel_z" else ACCEL
        acc = low_pass(simulate_rate(model, period, n, rng), period) / G + offset
        columns[f"{name} [g]"] = np.round(acc / ACCEL_LSB_G) * ACCEL_LSB_G
    keep = np.ones(n, dtype=bool)
    if dropout:
        start = int(DROPOUT_AT_S * RATE_HZ)
        keep[start:start + int(DROPOUT_S * RATE_HZ)] = False
    table = pa.table({k: v[keep] for k, v in columns.items()})
    tmp = path.with_suffix(".part")
    pq.write_table(table, tmp, compression="zstd", use_dictionary=[k for k in columns if k != "time [ns]"],
                   column_encoding={"time [ns]": "DELTA_BINARY_PACKED"})
    tmp.replace(path)


if __name__ == "__main__":
    out = Path(__file__).resolve().parent.parent / "recordings"
    make_static(out / "bench_static.parquet")
    print(f"wrote {out / 'bench_static.parquet'}")
    make_static(out / "bench_static_swap.parquet", SWAP_SEED, SWAP_HOURS,
                {"gyro_z": SWAP_GYRO_Z_WHITE}, dropout=False)
    print(f"wrote {out / 'bench_static_swap.parquet'}")

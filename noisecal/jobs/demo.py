"""The demo: the committed recordings through inspect, static and motion."""

from __future__ import annotations

from pathlib import Path

from ..errors import InputError
from .inspect import describe, run_inspect
from .motion import run_motion
from .motion import summary as motion_summary
from .odometry import run_odometry
from .odometry import summary as odometry_summary
from .static import run_static, summary
from .targets import run_targets
from .targets import summary as targets_summary

RECORDING = "recordings/bench_static.parquet"
SWAP = "recordings/bench_static_swap.parquet"
"""The replacement unit's bench log (tools/make_demo_recordings.py): gyro_z noisier."""
DRIVE = ("recordings/drive_linesensor.csv", "recordings/drive_truth.csv",
         "recordings/drive_map.yaml")
YARD = ("recordings/yard_detections.csv", "recordings/yard_survey.csv",
        "recordings/yard_camera.yaml")
ENCODERS = ("recordings/encoder_ticks.csv", "recordings/encoder_truth.csv",
            "recordings/encoder_config.yaml")
FILTER = ("recordings/filter_model.yaml",
          ("recordings/filter_log_run1.csv", "recordings/filter_log_run2.csv",
           "recordings/filter_log_run3.csv"))
"""The rover's lateral filter model and its logs (tools/make_filter_demo.py): the model
takes its noise from the static and motion blocks this demo writes."""
BAG = ("recordings/bench_imu_ros2", "/imu/data")
"""The ROS 2 MCAP bench bag (tools/make_demo_bag.py) and its IMU topic."""
OUT_DIR = "reports/demo"


def run_demo(root: str = ".", quiet: bool = False) -> str:
    """Run the demo from the project root; return what it prints.

    Writes ``static``, ``motion``, ``odometry`` and ``targets`` ``.yaml``, ``.png`` and
    ``.html`` (the self-contained report), ``recheck`` (the replacement unit against
    the first unit's block), ``filter`` and ``consistency`` ``.yaml`` and ``.html``, and
    the ROS 2 bag's outputs in ``reports/demo/``.
    """
    base = Path(root)
    rec = base / RECORDING
    if not rec.exists():
        raise InputError(f"{rec}: demo recording missing; run 'make demo' from the "
                         "project folder (or 'make demo-data' to make it again)")
    out = base / OUT_DIR
    out.mkdir(parents=True, exist_ok=True)
    text = [run_inspect(str(rec)), ""]
    result = run_static(str(rec), str(out / "static.yaml"), str(out / "static.png"),
                        overwrite=True, quiet=quiet, command=f"noisecal demo ({RECORDING})",
                        report=str(out / "static.html"))
    text.append(summary(result))
    text += ["", *_recheck(base, out, quiet)]
    sensor, truth, mapping = (str(base / p) for p in DRIVE)
    drive = run_motion(sensor, truth, str(out / "motion.yaml"), mapping,
                       str(out / "motion.png"), overwrite=True, quiet=quiet,
                       command=f"noisecal demo ({DRIVE[0]} against {DRIVE[1]})",
                       report=str(out / "motion.html"))
    text += ["", motion_summary(drive)]
    ticks, truth, config = (str(base / p) for p in ENCODERS)
    wheels = run_odometry(ticks, truth, config, str(out / "odometry.yaml"),
                          str(out / "odometry.png"), overwrite=True, quiet=quiet,
                          command=f"noisecal demo ({ENCODERS[0]} against {ENCODERS[1]})",
                          report=str(out / "odometry.html"))
    text += ["", odometry_summary(wheels)]
    detections, survey, camera = (str(base / p) for p in YARD)
    yard = run_targets(detections, survey, camera, str(out / "targets.yaml"),
                       str(out / "targets.png"), overwrite=True,
                       command=f"noisecal demo ({YARD[0]})", report=str(out / "targets.html"))
    text += ["", targets_summary(yard)]
    text += ["", *_filter(base, out, quiet)]
    text += ["", *_ros_bag(base, out, quiet)]
    text.append(f"\nwrote static, motion, odometry and targets .yaml, .png and .html (the "
                f"report), recheck, filter and consistency .yaml and .html, and the ROS 2 bag's "
                f"static block, plot, report and parameter file into {out}")
    return "\n".join(text)


def _recheck(base: Path, out: Path, quiet: bool) -> list:
    """The replacement unit re-checked against the first unit's block just written."""
    from .recheck import run_recheck
    from .recheck import summary as recheck_summary

    res = run_recheck(str(out / "static.yaml"), str(base / SWAP), str(out / "recheck.yaml"),
                      overwrite=True,
                      command=f"noisecal demo (recheck {OUT_DIR}/static.yaml {SWAP})",
                      report=str(out / "recheck.html"))
    return [recheck_summary(res)]


def _filter(base: Path, out: Path, quiet: bool) -> list:
    """The rover's filter: its discrete Q and R from the blocks just written, and the
    consistency of its three logged passes with an ALS estimate."""
    from .consistency import run_consistency
    from .consistency import summary as consistency_summary
    from .filter import run_filter
    from .filter import summary as filter_summary

    model = str(base / FILTER[0])
    matrices = run_filter(model, str(out / "filter.yaml"), overwrite=True,
                          command=f"noisecal demo (filter {FILTER[0]})",
                          report=str(out / "filter.html"))
    check = run_consistency([str(base / p) for p in FILTER[1]], model,
                            str(out / "consistency.yaml"), estimate=True, overwrite=True,
                            command=f"noisecal demo (consistency --estimate {FILTER[0]})",
                            report=str(out / "consistency.html"))
    return [filter_summary(matrices), "", consistency_summary(check)]


def _ros_bag(base: Path, out: Path, quiet: bool) -> list:
    """The bench bag's IMU topic: static block and plot, and the ROS 2 parameter file."""
    from ..export.atomic import write_text
    from ..export.ros_params import render_result
    from ..ingest.ros_bag import RosInput

    bag = RosInput(str(base / BAG[0]), BAG[1])
    imu = run_static(bag, str(out / "static_ros2.yaml"), str(out / "static_ros2.png"),
                     overwrite=True, quiet=quiet,
                     command=f"noisecal demo ({BAG[0]} --topic {BAG[1]})",
                     report=str(out / "static_ros2.html"))
    params = out / "imu_params.yaml"
    write_text(params, render_result(imu, "imu_driver"), overwrite=True)
    return [describe(imu.recording), "", summary(imu),
            f"wrote {out / 'static_ros2.yaml'} and the ROS 2 parameter file {params}"]

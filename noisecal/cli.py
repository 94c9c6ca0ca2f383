"""Command line: parse arguments, call a job, turn errors into one line and status 2."""

from __future__ import annotations

import argparse
import atexit
import os
import shlex
import signal
import sys
import threading

from . import __version__
from .errors import InputError, NoisecalError
from .export.atomic import STDOUT, WRITTEN, remove_leftovers
from .history import DEFAULT_DB, printable
from .jobs.result import ParameterError

EXIT_ERROR = 2


class _Parser(argparse.ArgumentParser):
    """argparse with one-line errors (what, and where to look), status 2."""

    def error(self, message: str):
        self.exit(EXIT_ERROR, f"{self.prog}: error: {printable(message)}; see "
                  f"'{self.prog} --help'\n")


def _ranged(kind, low=None, high=None, low_open=False, high_open=False, example=""):
    """An argparse type: a number of ``kind`` within bounds (one-line error otherwise)."""
    def parse(text: str):
        try:
            value = kind(text)
        except ValueError:
            raise argparse.ArgumentTypeError(
                f"{text!r} is not {'an integer' if kind is int else 'a number'}") from None
        if value != value or (low is not None and (value < low or low_open and value == low)) \
                or (high is not None and (value > high or high_open and value == high)):
            where = " and ".join(b for b in (
                (f"{'above' if low_open else 'at least'} {low}" if low is not None else ""),
                (f"{'below' if high_open else 'at most'} {high}" if high is not None else ""))
                if b)
            raise argparse.ArgumentTypeError(f"{text} is out of range; give a value {where}"
                                             + (f", e.g. {example}" if example else ""))
        return value
    parse.__name__ = "integer" if kind is int else "number"
    return parse


SEED = _ranged(int, 0, 2**32 - 1, example="1")
"""Seeds numpy accepts (``SeedSequence`` refuses negative ones with a traceback)."""
# The other numeric options are checked by the jobs (ParameterError, InputError), whose
# messages the CLI turns into the option's.


def _report_option(p) -> None:
    p.add_argument("--report", metavar="PATH.html", help="also write a self-contained HTML "
                   "report (numbers, plots, warnings, provenance; opens offline)")


def _history_options(p) -> None:
    p.add_argument("--unit", metavar="SERIAL", help="store this run in the history database "
                   "under the unit's serial number")
    p.add_argument("--sensor", help="sensor name stored with --unit (default: the input file)")
    p.add_argument("--db", default=DEFAULT_DB, help="history database (default noisecal.db "
                   "in the working folder)")


def _ros_options(p, truth: bool = False) -> None:
    """Options of a ROS bag or CSV export as the recording."""
    p.add_argument("--topic", help="topic to read when the recording is a ROS bag (.bag, "
                   ".mcap, .db3 or a ROS 2 bag folder)")
    if truth:
        p.add_argument("--truth-topic", help="truth topic: of the --truth bag, or of the "
                       "recording's own bag when --truth is left out")
    p.add_argument("--type", dest="msgtype", metavar="TYPE",
                   help="message type, e.g. sensor_msgs/msg/Imu: units of a ROS CSV export; "
                   "a bag topic of another type is refused")


def _node_name(text: str) -> str:
    """An argparse type: a ROS node name (checked before any work)."""
    from .export.ros_params import check_node

    try:
        return check_node(text)
    except InputError as exc:
        raise argparse.ArgumentTypeError(str(exc).split(": ", 1)[1]) from None


def _output_options(p) -> None:
    p.add_argument("--as", dest="output_as", choices=["noisecal", "ros"], default="noisecal",
                   help="what -o holds: the noisecal block (default) or a ROS 2 parameter "
                   "file (message covariance arrays, REP 145 *_stddev)")
    p.add_argument("--node", type=_node_name,
                   help="node name of the ROS 2 parameter file (default noisecal)")
    p.add_argument("--units", choices=["si", "customary"], default="si",
                   help="customary: fitted numbers also in the input's units, beside SI")


def _recording_arg(path, topic, msgtype):
    """The recording path, with its ROS selections where any is given."""
    if topic is None and msgtype is None:
        return path
    from .ingest.ros_bag import RosInput

    return RosInput(path, topic, msgtype)


def _truth_arg(args):
    """The truth: another file, another bag's topic, or a topic of the recording's bag."""
    path = args.truth if args.truth is not None else args.recording
    return _recording_arg(path, args.truth_topic, None)


def _parser() -> argparse.ArgumentParser:
    p = _Parser(prog="noisecal", description=(
        "Noise models with 95 % intervals, and the Q and R a Kalman filter needs, "
        "from sensor recordings."))
    p.add_argument("--version", action="version", version=f"noisecal {__version__}")
    sub = p.add_subparsers(dest="command", required=True, parser_class=_Parser)

    s = sub.add_parser("static", help="characterise a recording made at rest")
    s.add_argument("recording", help="CSV, Parquet or .npz; columns 'name [unit]', time first")
    s.add_argument("-o", "--output", required=True,
                   help="YAML block to write (- for standard output)")
    s.add_argument("--dt", type=float, help="filter time step, s (default: sample period)")
    s.add_argument("--channels", help="comma-separated channels, in filter order")
    s.add_argument("--plot", help="PNG path (default: beside the YAML)")
    s.add_argument("--repair", choices=["sort", "drop"],
                   help="repair timestamps that are not increasing (recorded in provenance)")
    s.add_argument("--reps", type=int, default=200, help="bootstrap replicates (default 200)")
    s.add_argument("--seed", type=SEED, default=1, help="bootstrap seed (default 1)")
    s.add_argument("--overwrite", action="store_true", help="replace existing outputs")
    s.add_argument("--quiet", action="store_true", help="no progress bar")
    s.add_argument("--no-cache", action="store_true",
                   help="do not read or write the binary cache of validated recordings")
    _ros_options(s)
    _output_options(s)
    s.add_argument("--allan-points", choices=["inline", "sidecar"], default="inline",
                   help="sidecar: the Allan point tables in OUT.allan.yaml beside the "
                   "block, which stays short (default inline)")
    _report_option(s)
    _history_options(s)

    m = sub.add_parser("motion", help="measurement noise of a sensor against ground truth")
    m.add_argument("recording", help="sensor recording (CSV, Parquet or .npz), time first")
    m.add_argument("--truth", help="truth recording, same formats (a bag's truth topic: "
                   "--truth-topic; --truth left out means the recording's own bag)")
    m.add_argument("--map", help="measurement map YAML (default: same channel names)")
    m.add_argument("--odometry", metavar="CONFIG",
                   help="the recording is wheel odometry (encoder ticks or increments) "
                   "described by this config YAML: fit the odometry motion model instead")
    m.add_argument("-o", "--output", required=True,
                   help="YAML block to write (- for standard output)")
    m.add_argument("--plot", help="PNG path (default: beside the YAML)")
    m.add_argument("--covariate", help="fit sigma^2 = a + b*x^2 against this truth quantity "
                   "(speed, turn_rate, a truth channel, ...)")
    m.add_argument("--gate", type=float, default=0.997,
                   help="probability of the chi-square gate (default 0.997)")
    m.add_argument("--max-offset", type=float, default=1.0,
                   help="largest sensor-truth time offset searched, s (default 1)")
    m.add_argument("--seed", type=SEED, default=1, help="seed of the robust fit (default 1)")
    m.add_argument("--overwrite", action="store_true", help="replace existing outputs")
    m.add_argument("--quiet", action="store_true", help="no progress bar")
    m.add_argument("--no-cache", action="store_true", help="do not use the binary cache")
    _ros_options(m, truth=True)
    _output_options(m)
    _report_option(m)
    _history_options(m)

    c = sub.add_parser("targets", help="camera measurement noise from surveyed targets")
    c.add_argument("detections", help="detections CSV: time [s], id, u [px], v [px][, score]")
    c.add_argument("--survey", required=True, help="survey CSV: id, x [m], y [m], z [m][, sigma]")
    c.add_argument("--camera", required=True, help="camera YAML: intrinsics, distortion, pose")
    c.add_argument("--poses", help="per-frame platform poses (time, x, y, z [m], roll, pitch, "
                   "yaw [rad], world-from-body); the camera file's pose is then body-from-camera")
    c.add_argument("-o", "--output", required=True,
                   help="YAML block to write (- for standard output)")
    c.add_argument("--plot", help="PNG path (default: beside the YAML)")
    c.add_argument("--ground", choices=["ray", "homography", "dlt"], default="ray",
                   help="pixels to ground: ray-plane (default), the camera file's homography, "
                   "or one estimated by normalized DLT from the floor targets")
    c.add_argument("--gate", type=float, default=0.997,
                   help="probability of the chi-square gate (default 0.997)")
    c.add_argument("--seed", type=SEED, default=1, help="seed (robust fit, Monte Carlo)")
    c.add_argument("--overwrite", action="store_true", help="replace existing outputs")
    _report_option(c)
    _history_options(c)

    r = sub.add_parser("recheck", help="compare a new recording with a baseline block; exit "
                       "0 consistent, 1 changed, 3 inconclusive, 2 error")
    r.add_argument("baseline", help="a YAML block written by static, motion or targets")
    r.add_argument("recording", help="the new recording (sensor, odometry or detections)")
    r.add_argument("-o", "--output",
                   help="YAML block to write (and a PNG beside it; - for standard output)")
    r.add_argument("--truth", help="the new drive's truth (motion and odometry baselines)")
    _ros_options(r, truth=True)
    r.add_argument("--limits", help="engineering limits YAML: limits: {channel: {parameter: "
                   "{max: x}}} (SI)")
    r.add_argument("--tolerance", type=float, default=1.25,
                   help="change (ratio) a re-check must be able to see to say consistent "
                   "(default 1.25)")
    r.add_argument("--alpha", type=float, default=0.01,
                   help="family-wise false-alarm rate, Holm-corrected (default 0.01)")
    r.add_argument("--verdict-on", metavar="WHAT", default="all",
                   help="what the verdict and exit status rest on: all (default), decidable "
                   "(what this recording can decide; the rest is listed with the data it "
                   "needs) or channel.parameter names, comma-separated")
    r.add_argument("--at", metavar="X[,X...]", help="also compare a variance law's sigma at "
                   "these covariate values (SI), e.g. --at 10,30 for ranges in m")
    for key, what in (("map", "measurement map"), ("config", "odometry config"),
                      ("camera", "camera file"), ("survey", "survey")):
        r.add_argument(f"--{key}", help=f"the baseline's {what}, where it is not found as "
                       "stored (relative to the baseline's folder)")
    r.add_argument("--poses", help="the new session's platform poses (a baseline from a "
                   "moving camera)")
    r.add_argument("--accept-edited", action="store_true",
                   help="accept a baseline whose checksum fails (an intended hand edit); "
                   "recorded in the output, stated values compared")
    r.add_argument("--overwrite", action="store_true", help="replace existing outputs")
    r.add_argument("--no-cache", action="store_true", help="do not use the binary cache")
    _report_option(r)
    _history_options(r)

    fm = sub.add_parser("filter", help="your filter's discrete Phi, Q and R with intervals, "
                        "from a model file (Van Loan; Jacobians for a Python model)")
    fm.add_argument("model", help="model YAML: states, dt, F or Phi (or python), noise, "
                    "measurements")
    fm.add_argument("-o", "--output", required=True,
                    help="YAML block to write (- for standard output)")
    fm.add_argument("--draws", type=_ranged(int, 200, example="2000"), default=2000,
                    help="Monte Carlo draws over the noise intervals (default 2000)")
    fm.add_argument("--seed", type=SEED, default=1, help="Monte Carlo seed (default 1)")
    fm.add_argument("--overwrite", action="store_true", help="replace existing outputs")
    _report_option(fm)

    cs = sub.add_parser("consistency", help="NIS, NEES and whiteness of a running filter's "
                        "log; exit 0 consistent, 1 not, 2 error")
    cs.add_argument("logs", nargs="+", metavar="LOG", help="filter log(s), one per run: "
                    "nu_<measurement>, S_<a>_<b> [, x_<state>, P_<a>_<b>, truth_<state>]")
    cs.add_argument("--model", required=True, help="the filter's model YAML")
    cs.add_argument("-o", "--output", required=True,
                    help="YAML block to write (- for standard output)")
    cs.add_argument("--estimate", action="store_true", help="also estimate Q and R by "
                    "autocovariance least squares (needs filter_used in the model)")
    cs.add_argument("--lags", type=_ranged(int, 1, example="20"),
                    help="lags of the whiteness test and ALS (default: from the filter's "
                    "error dynamics)")
    cs.add_argument("--level", type=float, default=0.95,
                    help="level of the bands and intervals (default 0.95)")
    cs.add_argument("--reps", type=int, default=200,
                    help="bootstrap replicates of the ALS intervals (default 200)")
    cs.add_argument("--seed", type=SEED, default=1, help="bootstrap seed (default 1)")
    cs.add_argument("--overwrite", action="store_true", help="replace existing outputs")
    cs.add_argument("--no-cache", action="store_true", help="do not use the binary cache")
    _report_option(cs)

    h = sub.add_parser("history", help="a unit's stored runs: table, plot, CSV")
    h.add_argument("unit", metavar="SERIAL")
    h.add_argument("--db", default=DEFAULT_DB, help="history database (default noisecal.db)")
    h.add_argument("--param", help="only this parameter (name, or channel.name)")
    h.add_argument("--since", help="only runs on or after this date (ISO, e.g. 2026-06-01)")
    h.add_argument("--export", choices=["csv"], help="write one row per run and parameter")
    h.add_argument("-o", "--output",
                   help="path of the export (with --export; - for standard output)")
    h.add_argument("--plot", help="PNG: each parameter with its interval over time")
    h.add_argument("--overwrite", action="store_true", help="replace existing outputs")

    b = sub.add_parser("batch", help="run every row of a manifest on Dask workers (local "
                       "cluster by default); exit 0 all rows done, 1 some failed")
    b.add_argument("manifest", help="CSV (job,recording,unit,sensor[,truth,camera,survey,"
                   "baseline,map,config,poses,options]) or YAML; paths relative to it")
    b.add_argument("-o", "--output", required=True, metavar="OUTDIR",
                   help="output folder: OUTDIR/<unit>/<sensor>.<job>.yaml and .png")
    b.add_argument("--db", help="history database (default OUTDIR/history.db)")
    b.add_argument("--scheduler", metavar="ADDRESS", default=os.environ.get(
                   "NOISECAL_SCHEDULER") or None, help="a running Dask scheduler, e.g. "
                   "tcp://10.0.0.5:8786 (default NOISECAL_SCHEDULER, else a local cluster)")
    b.add_argument("--workers", type=_ranged(int, 1, example="2"),
                   help="processes of the local cluster (default one per core)")
    b.add_argument("--overwrite", action="store_true", help="run every row again and "
                   "replace outputs no batch wrote")
    b.add_argument("--quiet", action="store_true", help="no progress bar")

    f = sub.add_parser("fleet", help="the fleet's distribution of each parameter from a "
                       "history database")
    f.add_argument("--db", required=True, help="history database (e.g. OUTDIR/history.db)")
    f.add_argument("--sensor", help="only runs of this sensor name")
    f.add_argument("-o", "--output", required=True, help="YAML summary to write")
    f.add_argument("--plot", help="PNG: each unit's value and interval against the fleet's")
    f.add_argument("--limits", help="limits YAML: limits: {channel: {parameter: {max: x}}} "
                   "(SI)")
    f.add_argument("--report", metavar="PATH.html", help="also write a self-contained "
                   "HTML report")
    f.add_argument("--overwrite", action="store_true", help="replace existing outputs")

    u = sub.add_parser("report", help="a unit's history as one self-contained HTML report")
    u.add_argument("unit", metavar="SERIAL")
    u.add_argument("--db", default=DEFAULT_DB, help="history database (default noisecal.db)")
    u.add_argument("-o", "--output", required=True, metavar="PATH.html",
                   help="the report to write")
    u.add_argument("--overwrite", action="store_true", help="replace an existing report")

    i = sub.add_parser("inspect", help="describe a recording and the problems found")
    i.add_argument("recording")
    i.add_argument("--repair", choices=["sort", "drop"])
    _ros_options(i)
    i.add_argument("--no-cache", action="store_true", help="do not use the binary cache")

    d = sub.add_parser("demo", help="run the committed demo recording into reports/demo")
    d.add_argument("--quiet", action="store_true")
    return p


EXIT_PIPE = 141
"""Standard output closed early (``| head``): 128 + SIGPIPE, as a shell reports a
program the pipe ended; never 1, which a re-check uses for 'changed'."""

_FACTS = {
    "static": lambda r: (r.sections, r.recording.source.sha256, None),
    "motion": lambda r: (r.sections, r.sensor.source.sha256, None),
    "motion --odometry": lambda r: (r.sections, r.odometry.source.sha256, None),
    "targets": lambda r: (r.sections, r.detections.sha256, None),
    "recheck": lambda r: (r.new_sections, (r.new_sections.get("provenance", {}).get("input")
                                           or r.new_sections.get("provenance", {})
                                           .get("detections") or {}).get("sha256", ""),
                          r.verdict),
}
"""What each job stores in the history: sections, input SHA-256, verdict."""


class Signalled(KeyboardInterrupt):
    """SIGTERM or SIGHUP, raised like Ctrl-C so that every cleanup path runs."""

    def __init__(self, signum: int):
        super().__init__(signum)
        self.signum = signum


def _on_signal(signum, frame):
    # Further signals would cut the cleanup short: the first one decides.
    for sig in _SIGNALS + (signal.SIGINT,):
        signal.signal(sig, signal.SIG_IGN)
    raise Signalled(signum)


_SIGNALS = tuple(getattr(signal, n) for n in ("SIGTERM", "SIGHUP") if hasattr(signal, n))


def _say(text: str, to_stderr: bool = False) -> None:
    """Print text for a terminal: names from files and options have their control
    characters shown escaped, never acted on."""
    print("\n".join(printable(line) for line in str(text).split("\n")),
          file=sys.stderr if to_stderr else sys.stdout)


def _error(message: str) -> None:
    """The one line of an error on stderr (a newline in a name shown as \\n)."""
    print(f"noisecal: error: {printable(message)}", file=sys.stderr)


def _recorder(args, job: str):
    """The history the run is stored in (opened and validated now, before any work)."""
    if not getattr(args, "unit", None):
        return None
    from pathlib import Path

    from .jobs.history import Recorder

    source = getattr(args, "recording", None) or getattr(args, "detections", "")
    return Recorder(args.db, args.unit, args.sensor or Path(source).name, job, _FACTS[job])


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``noisecal`` console script; returns the exit status.

    Exit statuses: 0 done (a re-check: consistent), 1 a re-check found a change, 3 a
    re-check is inconclusive, 2 an error (one line on stderr, nothing written),
    128 + n after signal n (130 Ctrl-C, 143 SIGTERM, 129 SIGHUP; nothing written),
    141 when standard output was closed early.
    """
    argv = sys.argv[1:] if argv is None else argv
    args = _parser().parse_args(argv)
    command = "noisecal " + shlex.join(argv)
    previous = {}
    if threading.current_thread() is threading.main_thread():
        for sig in _SIGNALS:
            previous[sig] = signal.signal(sig, _on_signal)
    first_written = len(WRITTEN)
    try:
        return _run(args, command, lambda job: _recorder(args, job))
    except ParameterError as exc:
        _error(exc.as_option())
        return EXIT_ERROR
    except NoisecalError as exc:
        _error(str(exc))
        return EXIT_ERROR
    except KeyboardInterrupt as exc:
        remove_leftovers()
        signum = exc.signum if isinstance(exc, Signalled) else signal.SIGINT
        written = ", ".join(printable(str(f)) for f in WRITTEN[first_written:])
        try:
            print(f"noisecal: interrupted ({signal.Signals(signum).name}); "
                  + (f"{written} had been written" if written else "nothing was written"),
                  file=sys.stderr)
        except OSError:
            pass
        return 128 + int(signum)
    except BrokenPipeError:
        # Python would report the pipe again when flushing at exit: point stdout at
        # /dev/null so that it ends quietly.
        try:
            devnull = os.open(os.devnull, os.O_WRONLY)
            os.dup2(devnull, sys.stdout.fileno())
        except (OSError, ValueError):
            pass
        return EXIT_PIPE
    finally:
        remove_leftovers()
        for sig, handler in previous.items():
            signal.signal(sig, handler)


def _run(args, command: str, recorder) -> int:
    """Dispatch one parsed command line; returns the exit status."""
    to_stdout = getattr(args, "output", None) == STDOUT
    # With -o - standard output carries the YAML (or CSV) alone; the rest goes to stderr.
    say = (lambda text: _say(text, True)) if to_stdout else _say
    record = None
    try:
        if args.command == "static":
            from .jobs.static import run_static, summary

            channels = [c.strip() for c in args.channels.split(",")] if args.channels else None
            record = recorder("static")
            result = run_static(_recording_arg(args.recording, args.topic, args.msgtype),
                                args.output, args.plot, args.dt, channels,
                                args.repair, args.overwrite, args.reps, args.seed,
                                args.quiet, command, use_cache=not args.no_cache,
                                record=record, report=args.report, output_as=args.output_as,
                                node=args.node, units=args.units,
                                allan_points=args.allan_points)
            say(summary(result))
        elif args.command == "motion" and args.truth is None and args.truth_topic is None:
            raise InputError("motion needs the truth: --truth FILE, or --truth-topic TOPIC "
                             "of the recording's bag")
        elif args.command == "motion" and args.odometry:
            from .jobs.odometry import run_odometry, summary as odometry_summary

            if args.map or args.covariate:
                raise InputError("--odometry takes the pose channels from its config; "
                                 "leave out --map and --covariate")
            record = recorder("motion --odometry")
            if args.output_as != "noisecal" or args.units != "si" or args.node:
                raise InputError("--as, --node and --units apply to static and motion; "
                                 "leave them out with --odometry")
            result = run_odometry(_recording_arg(args.recording, args.topic, args.msgtype),
                                  _truth_arg(args), args.odometry, args.output,
                                  args.plot, args.max_offset, args.overwrite, args.quiet,
                                  command, use_cache=not args.no_cache, record=record,
                                  report=args.report)
            say(odometry_summary(result))
        elif args.command == "motion":
            from .jobs.motion import run_motion, summary as motion_summary

            record = recorder("motion")
            result = run_motion(_recording_arg(args.recording, args.topic, args.msgtype),
                                _truth_arg(args), args.output, args.map, args.plot,
                                args.covariate, args.gate, args.max_offset, args.overwrite,
                                args.seed, args.quiet, command, use_cache=not args.no_cache,
                                record=record, report=args.report, output_as=args.output_as,
                                node=args.node, units=args.units)
            say(motion_summary(result))
        elif args.command == "targets":
            from .jobs.targets import run_targets, summary as targets_summary

            record = recorder("targets")
            result = run_targets(args.detections, args.survey, args.camera, args.output,
                                 args.plot, args.ground, args.gate, args.overwrite, args.seed,
                                 command, args.poses, record=record, report=args.report)
            say(targets_summary(result))
        elif args.command == "recheck":
            from .jobs.recheck import run_recheck, summary as recheck_summary

            try:
                at = ([float(x) for x in args.at.split(",")] if args.at else None)
            except ValueError:
                raise InputError(f"--at {args.at}: give numbers separated by commas, "
                                 "e.g. 10,30") from None
            files = {k: getattr(args, k) for k in ("map", "config", "camera", "survey")
                     if getattr(args, k)}
            record = recorder("recheck")
            truth = _truth_arg(args) if args.truth or args.truth_topic else None
            result = run_recheck(args.baseline,
                                 _recording_arg(args.recording, args.topic, args.msgtype),
                                 args.output, truth,
                                 args.limits, args.tolerance, args.overwrite,
                                 use_cache=not args.no_cache, command=command,
                                 alpha=args.alpha, files=files, poses=args.poses,
                                 accept_edited=args.accept_edited,
                                 verdict_on=args.verdict_on, at=at, record=record,
                                 report=args.report)
            say(recheck_summary(result))
            _done(say, args, record)
            return result.exit_status
        elif args.command == "history":
            return _history(args, say)
        elif args.command == "filter":
            from .jobs.filter import run_filter, summary as filter_summary

            result = run_filter(args.model, args.output, args.draws, args.seed,
                                args.overwrite, command, report=args.report)
            say(filter_summary(result))
            _done(say, args, None)
        elif args.command == "consistency":
            from .jobs.consistency import run_consistency, summary as consistency_summary

            result = run_consistency(args.logs, args.model, args.output, args.estimate,
                                     args.lags, args.reps, args.seed, args.level,
                                     args.overwrite, command, use_cache=not args.no_cache,
                                     report=args.report)
            say(consistency_summary(result))
            _done(say, args, None)
            return result.exit_status
        elif args.command == "batch":
            from .api import batch

            try:
                result = batch(args.manifest, output=args.output, db=args.db,
                               scheduler=args.scheduler, workers=args.workers,
                               overwrite=args.overwrite, progress=not args.quiet,
                               command=command, say=say)
            except KeyboardInterrupt:
                print("noisecal: batch stopped: the rows stored so far are kept; run the "
                      "same command again to do the rest", file=sys.stderr)
                raise
            say(result.summary())
            return result.exit_status
        elif args.command == "fleet":
            from .api import fleet

            result = fleet(args.db, output=args.output, sensor=args.sensor,
                           limits=args.limits, plot=args.plot, report=args.report,
                           overwrite=args.overwrite)
            say(result.summary())
            say("wrote " + ", ".join(printable(p) for p in (args.output, args.plot,
                                                            args.report) if p))
        elif args.command == "report":
            from .jobs.report import run_unit_report

            run_unit_report(args.db, args.unit, args.output, args.overwrite)
            say(f"wrote {printable(args.output)}")
        elif args.command == "inspect":
            from .jobs.inspect import run_inspect

            _say(run_inspect(_recording_arg(args.recording, args.topic, args.msgtype),
                             args.repair, use_cache=not args.no_cache))
        elif args.command == "demo":
            from .jobs.demo import run_demo

            _say(run_demo(quiet=args.quiet))
        if args.command in _JOBS:
            _done(say, args, record)
        return 0
    finally:
        if record is not None:
            record.close()


_JOBS = ("static", "motion", "targets")


def _done(say, args, record) -> None:
    """The closing lines: what was written and where the run was stored."""
    if args.output and args.output != STDOUT:
        say(f"wrote {printable(args.output)}")
    if getattr(args, "report", None):
        say(f"wrote {printable(args.report)}")
    if record is not None and record.run_id is not None:
        say(f"stored as run {record.run_id} of unit {printable(args.unit)} in "
            f"{printable(args.db)}")


def _history(args, say) -> int:
    from pathlib import Path

    from .export.atomic import check_target
    from .jobs import history as hist

    if args.export and not args.output:
        raise InputError("--export csv needs -o OUT.csv")
    if args.output and not args.export:
        raise InputError(f"-o {args.output}: give --export csv with it")
    targets = [Path(t) for t in (args.output, args.plot) if t and t != STDOUT]
    if len(targets) == 2 and targets[0].resolve() == targets[1].resolve():
        raise InputError(f"--plot {args.plot}: the same path as -o; give each its own path")
    for target in targets:  # all checked before anything is written
        check_target(target, [Path(args.db)], args.overwrite)
    say(hist.table(args.db, args.unit, args.param, args.since))
    if args.export:
        rows = hist.export_csv(args.db, args.unit, args.output, args.param, args.since,
                               args.overwrite)
        where = "standard output" if args.output == STDOUT else printable(args.output)
        say(f"wrote {rows} row(s) to {where}")
    if args.plot:
        hist.plot(args.db, args.unit, args.plot, args.param, args.since, args.overwrite)
        say(f"wrote {printable(args.plot)}")
    return 0


def console() -> None:
    """The ``noisecal`` command: :func:`main`, then a quick exit.

    When :func:`main` returns every output is written, renamed into place and closed;
    what a normal interpreter exit would still do is tear down numba's compiler,
    pyarrow and matplotlib module by module (0.2–0.45 s after a static run, measured).
    The command flushes its streams, runs the exit handlers and ends there. A run that
    started Dask (``batch``, ``fleet`` on a cluster) exits normally, so that its cluster
    shuts down in order.
    """
    code = main()
    if "distributed" in sys.modules or "dask" in sys.modules:
        sys.exit(code)
    try:
        sys.stdout.flush()
    except (OSError, ValueError):
        code = EXIT_PIPE if code == 0 else code
    try:
        sys.stderr.flush()
    except (OSError, ValueError):
        pass
    atexit._run_exitfuncs()
    os._exit(code)


if __name__ == "__main__":
    console()

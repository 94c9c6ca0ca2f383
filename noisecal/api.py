"""The Python API: read a recording, run a job, get a typed result.

Every function takes keyword-only options, checks them at the call and names
the Python parameter in its error (:class:`~noisecal.jobs.result.ParameterError`,
a ``ValueError``); the command line maps its options onto these calls. Each
job returns a frozen result with ``summary()``, ``to_dict()``, ``write(path)``,
``parameters()``, ``estimate(channel, name)`` and ``confidence_interval(channel,
name, level=…)``.

Examples
--------
>>> import numpy as np, noisecal
>>> y = np.random.default_rng(1).normal(0.0, 2e-3, 8192)
>>> rec = noisecal.read({"gyro_x": y}, period=0.01, units={"gyro_x": "rad/s"})
>>> rec.channels, rec.period
(('gyro_x',), 0.01)
>>> res = noisecal.static(rec, reps=40, seed=3)
>>> d = res.to_dict()["channels"]["gyro_x"]["white_noise"]
>>> sorted(d)[:3]
['ci95', 'method', 'tau_s']
>>> noisecal.static(rec, reps=5)
Traceback (most recent call last):
...
noisecal.jobs.result.ParameterError: reps=5: at least 20 bootstrap replicates are needed for a 95 % interval; 200 is the default
"""

from __future__ import annotations

import numbers
from pathlib import Path


from .jobs.result import ParameterError, seconds, whole
from .types import Recording

__all__ = ["read", "static", "motion", "odometry", "targets", "recheck", "batch", "fleet",
           "filter", "consistency", "ros_parameters", "ParameterError"]


def _probability(name: str, value) -> float:
    if isinstance(value, bool) or not isinstance(value, numbers.Real) or not 0.5 < value < 1:
        raise ParameterError(name, value, "give a probability between 0.5 and 1, e.g. 0.997")
    return float(value)


def _recording(name: str, value, use_cache: bool = True) -> Recording:
    """A Recording given as one, or a path read with the file readers."""
    from .ingest.ros_bag import RosInput

    if isinstance(value, Recording):
        return value
    if isinstance(value, (str, Path, RosInput)):
        from .ingest import read_recording

        return read_recording(value, use_cache=use_cache)
    raise ParameterError(name, type(value).__name__, "give a path or a noisecal Recording "
                         "(noisecal.read)")


def _path(name: str, value) -> str:
    if not isinstance(value, (str, Path)):
        raise ParameterError(name, type(value).__name__, "give a file path")
    return str(value)


def read(source, *, period: float | None = None, units: dict | None = None,
         time=None, repair: str | None = None, cache: bool = True, topic: str | None = None,
         msgtype: str | None = None) -> Recording:
    """A recording from a file, or from arrays in memory.

    Parameters
    ----------
    source : str, Path or mapping of str to array_like
        A CSV, Parquet or .npz file (columns ``name [unit]``, time first), or
        channel name → samples, shape (n,).
    period : float, optional
        Sample period, s, for arrays without ``time``.
    units : mapping of str to str, optional
        Unit of each array (required for arrays), e.g. ``"deg/s"``, ``"g"``.
    time : array_like, shape (n,), optional
        Sample times of the arrays, s.
    repair : {None, "sort", "drop"}
        Timestamp repair of a file (recorded in its provenance).
    cache : bool
        Use the binary cache of validated files.
    topic : str, optional
        Topic of a ROS bag (``.bag``, ``.mcap``, ``.db3`` or a ROS 2 bag folder);
        its time is ``header.stamp``, its channels the message's field paths.
    msgtype : str, optional
        Message type, e.g. ``"sensor_msgs/msg/Imu"``: units of a ROS CSV export;
        a bag topic of another type is refused.

    Returns
    -------
    Recording
        SI samples, times in s from the first sample, gaps and provenance.

    Examples
    --------
    >>> import numpy as np, noisecal
    >>> rec = noisecal.read({"acc_z": np.full(100, 1.0)}, period=0.1, units={"acc_z": "g"})
    >>> float(rec.channel("acc_z")[0]), rec.unit_of("acc_z")
    (9.80665, 'm/s**2')
    """
    if repair not in (None, "sort", "drop"):
        raise ParameterError("repair", repair, "give None, 'sort' or 'drop'")
    for name, value in (("topic", topic), ("msgtype", msgtype)):
        if value is not None and not (isinstance(value, str) and value.strip()):
            raise ParameterError(name, value, "give a name such as '/imu' or "
                                 "'sensor_msgs/msg/Imu'")
    if isinstance(source, (str, Path)):
        if period is not None or units is not None or time is not None:
            raise ParameterError("period", period, "a file names its own time column and "
                                 "units; give period/units/time only with arrays")
        from .ingest import read_recording
        from .ingest.ros_bag import RosInput

        if topic is not None or msgtype is not None:
            source = RosInput(str(source), topic, msgtype)
        return read_recording(source, repair=repair, use_cache=bool(cache))
    if topic is not None or msgtype is not None:
        raise ParameterError("topic", topic, "topic and msgtype apply to a bag or ROS CSV "
                             "export path, not to arrays")
    from .ingest.arrays import read_arrays

    return read_arrays(source, seconds("period", period), units, time)


def static(recording, *, channels: list[str] | None = None, dt: float | None = None,
           reps: int = 200, seed: int = 1, progress: bool = False, command: str = ""):
    """Characterise a recording made at rest: IEEE Std 952 terms, Q and R.

    Parameters
    ----------
    recording : Recording or path
    channels : list of str, optional
        Channels in the filter's order (default all).
    dt : float, optional
        Filter time step, s (default the sample period).
    reps : int
        Bootstrap replicates (at least 20).
    seed : int
        Bootstrap seed (channel i uses seed + i).
    progress : bool
        Show a progress bar on a terminal.
    command : str
        Command line for the provenance.

    Returns
    -------
    StaticResult
    """
    from .jobs.static import characterise

    # characterise checks the options (the re-check calls it with a baseline's too).
    return characterise(_recording("recording", recording), channels, dt, reps, seed,
                        not progress, command)


def motion(recording, *, truth, map: str | None = None, covariate: str | None = None,
           gate: float = 0.997, max_offset: float = 1.0, seed: int = 1, command: str = ""):
    """Measurement noise of a sensor against ground truth (R, gate, outliers, laws).

    Parameters
    ----------
    recording, truth : Recording or path
    map : str, optional
        Measurement-map YAML (default: channels with the same names).
    covariate : str, optional
        Truth quantity for the variance law σ² = a + b·x².
    gate : float
        Probability of the chi-square gate.
    max_offset : float
        Largest sensor–truth time offset searched, s.
    seed : int
    command : str

    Returns
    -------
    MotionResult
    """
    from .ingest.mapping import read_map, same_names
    from .jobs.motion import analyse

    sensor, tr = _recording("recording", recording), _recording("truth", truth)
    gate = _probability("gate", gate)
    max_offset = seconds("max_offset", max_offset, none_ok=False)
    seed = whole("seed", seed, 0)
    if covariate is not None and not isinstance(covariate, str):
        raise ParameterError("covariate", covariate, "give a truth quantity name, e.g. 'speed'")
    mapping = (read_map(_path("map", map), covariate) if map is not None
               else same_names(sensor.channels, tr.channels, covariate))
    return analyse(sensor, tr, mapping, gate, max_offset, seed, command)


def odometry(recording, *, truth, config, max_offset: float = 1.0, command: str = ""):
    """Wheel-odometry noise α1…α4 against ground truth.

    Parameters
    ----------
    recording, truth : Recording or path
    config : str
        Odometry config YAML (encoder geometry, channels).
    max_offset : float
        Largest time offset searched, s.
    command : str

    Returns
    -------
    OdometryResult
    """
    from .ingest.mapping import read_odometry_config
    from .jobs.odometry import analyse

    odo, tr = _recording("recording", recording), _recording("truth", truth)
    cfg = read_odometry_config(_path("config", config))
    return analyse(odo, tr, cfg, seconds("max_offset", max_offset, none_ok=False), command)


def targets(detections, *, survey, camera, poses=None, ground: str = "ray",
            gate: float = 0.997, seed: int = 1, command: str = ""):
    """Camera measurement noise from detections of surveyed targets.

    Parameters
    ----------
    detections, survey, camera : str
        Detections CSV, survey CSV, camera YAML.
    poses : Recording or path, optional
        Per-frame platform poses for a moving camera.
    ground : {"ray", "homography", "dlt"}
    gate : float
    seed : int
    command : str

    Returns
    -------
    TargetsResult
    """
    from .ingest.camera import read_camera, read_detections, read_survey
    from .jobs.targets import GROUND_METHODS, analyse, posed_camera

    if ground not in GROUND_METHODS:
        raise ParameterError("ground", ground, f"give one of {', '.join(GROUND_METHODS)}")
    cam = read_camera(_path("camera", camera))
    sv = read_survey(_path("survey", survey))
    det = read_detections(_path("detections", detections), sv, cam)
    if poses is not None:
        cam = posed_camera(cam, _recording("poses", poses), det)
    return analyse(cam, sv, det, ground, _probability("gate", gate), whole("seed", seed, 0),
                   command)


def recheck(baseline, recording, *, truth=None, limits: str | None = None,
            tolerance: float = 1.25, alpha: float = 0.01, files: dict | None = None,
            poses=None, accept_edited: bool = False, verdict_on: str | None = None,
            at: list | None = None, command: str = ""):
    """Re-run a baseline's job on a new recording and compare every parameter.

    Parameters
    ----------
    baseline : str
        The baseline YAML block.
    recording : str
        The new recording (detections for a camera baseline).
    truth : str, optional
        The new drive's truth (motion and odometry baselines).
    limits : str, optional
        Engineering limits YAML.
    tolerance : float
        Ratio (in σ) a parameter must be able to reveal to be called consistent.
    alpha : float
        Family-wise false-alarm rate (Holm).
    files : dict, optional
        Side files in place of the baseline's: ``map``, ``config``, ``camera``,
        ``survey`` (by default they are found relative to the baseline's folder).
    poses : str, optional
        The new session's platform poses (a moving-camera baseline).
    accept_edited : bool
        Accept a baseline whose checksum fails (a hand edit); recorded in the result.
    verdict_on : str, optional
        ``"all"`` (default), ``"decidable"`` (what this recording can decide), or
        ``"channel.name,..."``.
    at : list of float, optional
        Covariate values (SI) at which a variance law's σ is compared.
    command : str

    Returns
    -------
    RecheckResult
        ``verdict`` and ``exit_status`` (0 consistent, 1 changed, 3 inconclusive).
    """
    from .jobs.recheck import recheck as run

    if isinstance(tolerance, bool) or not isinstance(tolerance, numbers.Real) or \
            not tolerance > 1:
        raise ParameterError("tolerance", tolerance, "give a ratio above 1, e.g. 1.25")
    if isinstance(alpha, bool) or not isinstance(alpha, numbers.Real) or not 0 < alpha < 0.5:
        raise ParameterError("alpha", alpha, "give a false-alarm rate between 0 and 0.5, "
                             "e.g. 0.01")
    if files is not None and not (hasattr(files, "items") and all(
            isinstance(v, (str, Path)) for v in files.values())):
        raise ParameterError("files", files, "give a mapping such as {'map': 'drive_map.yaml'}")
    if at is not None and not all(isinstance(v, numbers.Real) for v in at):
        raise ParameterError("at", at, "give a list of covariate values in SI")
    return run(_path("baseline", baseline), _path("recording", recording),
               None if truth is None else _path("truth", truth),
               None if limits is None else _path("limits", limits), float(tolerance),
               command=command, alpha=float(alpha),
               files={k: str(v) for k, v in (files or {}).items()},
               poses=None if poses is None else _path("poses", poses),
               accept_edited=bool(accept_edited), verdict_on=verdict_on,
               at=None if at is None else [float(v) for v in at])


def filter(model, *, draws: int = 2000, seed: int = 1, command: str = ""):
    """Your filter's discrete Phi, Q and R with intervals, from a model file.

    Parameters
    ----------
    model : str or Path
        Model YAML: ``states``, ``dt``, ``F`` (continuous) or ``Phi`` (discrete) or
        ``python`` (a file with ``f(x, u, w, dt)``, ``h(x, v)``) with an
        ``operating_point``, ``noise`` and ``measurements`` (see README).
    draws : int
        Monte Carlo draws over the noise estimates' intervals (at least 200).
    seed : int
    command : str

    Returns
    -------
    FilterResult
        ``matrices`` (Phi, Q, R with ``_low``/``_high``), ``parameters()``.

    Examples
    --------
    >>> import noisecal.api as api
    >>> api.filter("model.yaml", draws=10)
    Traceback (most recent call last):
    ...
    noisecal.jobs.result.ParameterError: draws=10: give at least 200
    """
    from .jobs.filter import discretise
    from .model.spec import read_model

    draws = whole("draws", draws, 200)
    return discretise(read_model(_path("model", model)), draws, whole("seed", seed, 0),
                      command)


def consistency(logs, *, model, estimate: bool = False, lags: int | None = None,
                reps: int = 200, seed: int = 1, level: float = 0.95, command: str = ""):
    """Is a running filter's noise right? NIS, NEES, whiteness; Q and R by ALS.

    Parameters
    ----------
    logs : Recording, path, or list of them
        The filter's log, one per run: ``nu_<measurement>``, ``S_<a>_<b>``
        (optionally ``x_<state>``, ``P_<a>_<b>``, ``truth_<state>``).
    model : str or Path
        The filter's model YAML (``filter_used`` for ``estimate``).
    estimate : bool
        Estimate Q and R by autocovariance least squares.
    lags : int, optional
    reps : int
        Bootstrap replicates of the ALS intervals (at least 50).
    seed : int
    level : float
        Level of the bands and intervals.
    command : str

    Returns
    -------
    ConsistencyResult
        ``consistent``, ``direction``, ``nis``, ``nees``, ``whiteness``, ``als_fit``.
    """
    from .jobs.consistency import check
    from .model.spec import read_model

    items = logs if isinstance(logs, (list, tuple)) else [logs]
    recs = [_recording("logs", r) for r in items]
    return check(read_model(_path("model", model)), recs, bool(estimate), lags, reps, seed,
                 level, command)


def batch(manifest, *, output, db=None, scheduler: str | None = None,
          workers: int | None = None, overwrite: bool = False, progress: bool = False,
          command: str = "", say=None):
    """Run every row of a manifest on Dask workers and store each run in the history.

    Parameters
    ----------
    manifest : str or Path
        CSV with the header ``job,recording,unit,sensor`` (optional ``truth``,
        ``camera``, ``survey``, ``baseline``, ``map``, ``config``, ``poses``,
        ``options``) or YAML ``rows: [...]``; paths relative to the manifest.
    output : str or Path
        Output folder: ``<unit>/<sensor>.<job>.yaml`` (and ``.png``) per row.
    db : str or Path, optional
        History database (default ``output/history.db``), written by this process only.
    scheduler : str, optional
        Address of a running Dask scheduler; default a local cluster of processes.
    workers : int, optional
        Processes of the local cluster (default one per core).
    overwrite : bool
        Run every row again, unchanged inputs included.
    progress : bool
        A bar over rows on a terminal.
    command : str
        Command line for the provenance.
    say : callable, optional
        Called with one line per finished row.

    Returns
    -------
    BatchResult
        ``rows`` (each done, unchanged or failed with its one-line error),
        ``exit_status`` (0 all rows succeeded, 1 otherwise), ``summary()``.
    """
    from .jobs.batch import run_batch

    if workers is not None:
        workers = whole("workers", workers, 1)
    if scheduler is not None and not isinstance(scheduler, str):
        raise ParameterError("scheduler", scheduler, "give an address such as "
                             "'tcp://127.0.0.1:8786'")
    if scheduler and workers is not None:
        raise ParameterError("workers", workers, "sets the local cluster's processes; a "
                             "running cluster (scheduler) has its own workers, leave it out")
    return run_batch(_path("manifest", manifest), _path("output", output),
                     None if db is None else _path("db", db), scheduler or None, workers,
                     bool(overwrite), not progress, command, say)


def fleet(db, *, output=None, sensor: str | None = None, limits=None, plot=None,
          report=None, overwrite: bool = False):
    """The fleet's distribution of every stored parameter, across units.

    Parameters
    ----------
    db : str or Path
        History database.
    output : str or Path, optional
        YAML summary to write.
    sensor : str, optional
        Only runs stored under this sensor name.
    limits : str or Path, optional
        Limits YAML ``limits: {channel: {parameter: {max: x}}}`` (SI).
    plot : str or Path, optional
        PNG of each unit's value and interval against the fleet's.
    report : str or Path, optional
        Self-contained HTML report.
    overwrite : bool
        Replace existing outputs.

    Returns
    -------
    FleetResult
        Per parameter: the fleet's median and spread with intervals, units outside
        the fleet or a limit, the median's drift over time.
    """
    from .jobs.fleet import run_fleet

    if sensor is not None and not isinstance(sensor, str):
        raise ParameterError("sensor", sensor, "give a sensor name")
    return run_fleet(_path("db", db), None if output is None else _path("output", output),
                     sensor, None if limits is None else _path("limits", limits),
                     None if plot is None else _path("plot", plot), bool(overwrite),
                     None if report is None else _path("report", report))


def ros_parameters(result, *, node: str = "noisecal") -> str:
    """A static or motion result as a ROS 2 parameter file's text.

    Parameters
    ----------
    result : StaticResult or MotionResult
    node : str
        Node name the parameters are for (``<node>: ros__parameters: …``).

    Returns
    -------
    str
        The message covariance arrays (row-major, SI) and the REP 145 ``*_stddev``
        parameters of the characterised quantities (:mod:`noisecal.export.ros_params`).
    """
    from .export.ros_params import check_node, render_result

    if not (hasattr(result, "block") or hasattr(result, "model")) or not hasattr(
            result, "sections"):
        raise ParameterError("result", type(result).__name__, "give the result of "
                             "noisecal.static or noisecal.motion")
    try:
        node = check_node(node)
    except Exception:
        raise ParameterError("node", node, "give a ROS node name, e.g. 'imu_driver'") from None
    return render_result(result, node)

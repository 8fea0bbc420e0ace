"""``elopt run STUDY.toml`` and ``elopt resume FILE.h5``: run a study's trials into its file."""

from __future__ import annotations

import argparse
import signal
import threading
import time
from pathlib import Path
from typing import TYPE_CHECKING, Any

from elopt.optimizer.cli.cluster_args import add_cluster_arg

if TYPE_CHECKING:
    from elopt.optimizer.config.study_config import StudySpec
    from elopt.optimizer.run.dask_pool import DaskExecutor
    from elopt.optimizer.store import StudySnapshot, StudyWriter

#: Exit status of a run stopped by a signal: 128 + the signal's number, as shells report it.
SIGNAL_EXIT = {"SIGINT": 128 + signal.SIGINT, "SIGTERM": 128 + signal.SIGTERM}

BUDGET_HELP = (
    "A budget given here replaces the config's [budget] as a whole: --hours 10 alone runs "
    "for ten hours whatever trial count the config names. Exit status: 0 when the budget is "
    "reached, 130 when stopped by Ctrl-C (SIGINT), 143 when stopped by SIGTERM, 2 on an error."
)
SEED_HELP = (
    "The config's seed fixes the sampler's random stream: with --workers 1 the same seed "
    "gives the same trials in the same order; with several workers the order in which results "
    "come back varies, so only the first designs (TPE's random start, [sampler] "
    "startup_trials) are the same and later ones may differ."
)


def add_parser(subparsers: Any) -> None:
    run = subparsers.add_parser(
        "run",
        help="run an optuna study of an electrode family into a new HDF5 study file",
        description="Run the study described by STUDY.toml; every finished trial is committed "
        "to the study file at once, so a killed run loses nothing reported. "
        + BUDGET_HELP
        + " "
        + SEED_HELP,
    )
    run.add_argument("config", metavar="STUDY.toml")
    run.add_argument("--out", metavar="FILE.h5", help="study file (default studies/<name>.h5)")
    run.add_argument(
        "--overwrite",
        "--force",
        dest="overwrite",
        action="store_true",
        help="replace an existing study file (--force as in the other verbs)",
    )
    _budget_args(run)
    run.set_defaults(func=run_command)

    resume = subparsers.add_parser(
        "resume",
        help="continue a study from its file (after a stop, a kill or a power cut)",
        description="Continue the study stored in FILE.h5 with its stored config. Without "
        "--trials/--hours the budget the last run had left is finished; with them, that budget "
        "is replaced. Exit status: 0 when the budget is reached, 130 when stopped by Ctrl-C "
        "(SIGINT), 143 by SIGTERM, 2 on an error.",
    )
    resume.add_argument("study_file", metavar="FILE.h5")
    resume.add_argument(
        "--config",
        metavar="STUDY.toml",
        help="refuse to resume unless this config matches the stored one (budget and workers "
        "may differ)",
    )
    _budget_args(resume, more=True)
    resume.set_defaults(func=resume_command)


def _budget_args(p: argparse.ArgumentParser, more: bool = False) -> None:
    word = " more" if more else ""
    p.add_argument(
        "--trials",
        type=int,
        metavar="N",
        help=f"run N{word} finished trials (replaces the config's budget, hours included)",
    )
    p.add_argument(
        "--hours",
        type=float,
        metavar="H",
        help=f"run for at most H{word} hours (replaces the config's budget, trials included)",
    )
    p.add_argument(
        "--workers", type=int, metavar="N", help="worker processes (default: one per core)"
    )
    p.add_argument(
        "--log-every",
        type=float,
        metavar="S",
        default=None,
        help="without a terminal: a progress line every S seconds (default 60; 0 = every trial)",
    )
    add_cluster_arg(p)


def _checked_overrides(args: argparse.Namespace) -> tuple[int | None, float | None, int | None]:
    from elopt.optimizer.config.toml_tools import as_float, as_int

    trials = None if args.trials is None else as_int(args.trials, "--trials", low=1)
    hours = None if args.hours is None else as_float(args.hours, "--hours", low=0.0, low_open=True)
    workers = None if args.workers is None else as_int(args.workers, "--workers", low=1, high=256)
    if args.log_every is not None:
        as_float(args.log_every, "--log-every", low=0.0)
    return trials, hours, workers


def run_command(args: argparse.Namespace) -> int:
    from elopt.optimizer.cli.cluster_args import open_cluster
    from elopt.optimizer.config.study_config import load_study_config
    from elopt.optimizer.store import StudyWriter
    from elopt.optimizer.study.search import study_header

    trials, hours, workers = _checked_overrides(args)
    spec = load_study_config(args.config)
    if trials is None and hours is None:
        trials, hours = spec.budget.trials, spec.budget.hours
    out = Path(args.out) if args.out else Path("studies") / f"{spec.name}.h5"
    if not args.out:
        out.parent.mkdir(parents=True, exist_ok=True)
    cluster = open_cluster(args, spec)  # before the file: a cluster refused writes nothing
    try:
        writer = StudyWriter.create(out, study_header(spec), overwrite=args.overwrite)
    except BaseException:
        if cluster is not None:
            cluster.close()
        raise
    return _run_session(spec, writer, trials, hours, workers or spec.workers, args, cluster)


def resume_command(args: argparse.Namespace) -> int:
    from elopt.optimizer.cli.cluster_args import open_cluster
    from elopt.optimizer.config.study_config import identity_differences, study_identity
    from elopt.optimizer.config.toml_tools import load_toml
    from elopt.optimizer.errors import ConfigError
    from elopt.optimizer.store import StudyWriter, read_study

    more_trials, more_hours, workers = _checked_overrides(args)
    path = Path(args.study_file)
    snap = read_study(path)
    spec = spec_from_study(snap)
    if args.config:
        table, _ = load_toml(args.config)
        diffs = identity_differences(spec.identity, study_identity(table))
        if diffs:
            shown = "; ".join(diffs[:4]) + (
                f"; and {len(diffs) - 4} more" if len(diffs) > 4 else ""
            )
            raise ConfigError(
                f"{args.config} differs from the config stored in {path}: {shown}. Resume "
                "without --config to continue the stored study, or start a new one with "
                "`elopt run`"
            )
    finished = int((snap.state_names() != "interrupted").sum())
    if more_trials is None and more_hours is None:
        if len(snap.sessions["start_unix"]) == 0:  # killed before its first trial was asked
            target, hours = spec.budget.trials, spec.budget.hours
        else:
            target, hours = _left_over_budget(snap, finished)
        if target is None and hours is None:
            print(
                f"elopt: {path}: the study already reached its budget ({finished} finished trials); "
                "give --trials N or --hours H to go on"
            )
            return 0
    else:
        target = None if more_trials is None else finished + more_trials
        hours = more_hours
    cluster = open_cluster(args, spec)
    try:
        writer = StudyWriter.open(path)
    except BaseException:
        if cluster is not None:
            cluster.close()
        raise
    return _run_session(spec, writer, target, hours, workers or spec.workers, args, cluster)


def spec_from_study(snap: StudySnapshot) -> StudySpec:
    """Rebuild the study's spec from the config text stored in its file, and check that this
    elopt's family still has the stored parameters and metrics."""
    import tomllib

    from elopt.optimizer.config.study_config import parse_study_config
    from elopt.optimizer.errors import ConfigError, StudyFileError

    h = snap.header
    try:
        table = tomllib.loads(h.config_toml)
        spec = parse_study_config(table, h.config_toml, source=h.study_name)
    except (ConfigError, tomllib.TOMLDecodeError) as exc:
        raise StudyFileError(
            f"{snap.path}: the stored study config no longer fits this elopt ({exc}); "
            "resume it with the elopt version that wrote it "
            f"({h.elopt_version})"
        ) from None
    mismatches = []
    if tuple(spec.parameter_names) != tuple(h.parameter_names):
        mismatches.append(
            f"parameters now {list(spec.parameter_names)}, stored {list(h.parameter_names)}"
        )
    now_metrics = tuple(m.name for m in spec.metrics)
    if now_metrics != tuple(h.metric_names):
        mismatches.append(f"metrics now {list(now_metrics)}, stored {list(h.metric_names)}")
    if mismatches:
        raise StudyFileError(
            f"{snap.path}: family {h.family} changed since the study was written: "
            + "; ".join(mismatches)
            + "; start a new study with `elopt run`"
        )
    return spec


def _left_over_budget(snap: StudySnapshot, finished: int) -> tuple[int | None, float | None]:
    """What the last session's budget had left: its trial target, and its hours minus the time
    it ran (up to its last stored trial)."""
    s = snap.sessions
    if len(s["start_unix"]) == 0:
        return None, None
    last = len(s["start_unix"]) - 1
    target = int(s["target_trials"][last])
    target_left = target if target >= 0 and target > finished else None
    hours = float(s["hours"][last])
    hours_left = None
    if hours == hours:  # not NaN
        c = snap.columns
        in_last = c["session"] == last
        ran_s = (
            (float(c["finished_unix"][in_last].max()) - float(s["start_unix"][last]))
            if in_last.any()
            else 0.0
        )
        left = hours - max(ran_s, 0.0) / 3600.0
        hours_left = left if left > 1.0 / 3600.0 else None
    if target >= 0 and target_left is None:
        return None, None  # the trial budget is spent: that ended the study
    return target_left, hours_left


def _quiet_optuna() -> None:
    """Keep optuna's per-trial INFO lines off the study's progress display."""
    import optuna

    optuna.logging.set_verbosity(optuna.logging.WARNING)


def _run_session(
    spec: StudySpec,
    writer: StudyWriter,
    target: int | None,
    hours: float | None,
    workers: int,
    args: argparse.Namespace,
    cluster: DaskExecutor | None = None,
) -> int:
    from rich.console import Console

    from elopt.optimizer.cli.cluster_args import cluster_lost_error
    from elopt.optimizer.report.progress import PlainProgress, RichProgress
    from elopt.optimizer.report.safety import high_voltage_caution
    from elopt.optimizer.run.local_pool import LocalProcessPool
    from elopt.optimizer.study.search import RunLimits, run_search

    _quiet_optuna()
    console = Console(highlight=False, markup=False)
    path = writer.path
    stop = threading.Event()
    received: list[str] = []

    def on_signal(signum: int, frame: Any) -> None:
        # Only take note: printing from a handler can collide with the display's own writes.
        received.append(signal.Signals(signum).name)
        stop.set()

    previous = {s: signal.signal(s, on_signal) for s in (signal.SIGINT, signal.SIGTERM)}
    try:
        caution = high_voltage_caution(_max_drive_V(spec))
        if caution:
            console.print(caution, style="yellow")
        if console.is_terminal and args.log_every is None:
            progress: Any = RichProgress(console)
        else:
            progress = PlainProgress(every_s=60.0 if args.log_every is None else args.log_every)
        deadline = time.time() + hours * 3600.0 if hours is not None else None
        limits = RunLimits(target_trials=target, deadline_unix=deadline, hours=hours)
        if cluster is not None:
            cluster.on_lost = lambda reason: stop.set()  # a lost cluster stops like Ctrl-C
        with cluster or LocalProcessPool(workers) as executor:
            result = run_search(spec, writer, executor, limits, progress=progress, stop=stop)
    finally:
        writer.close()
        for s, handler in previous.items():
            signal.signal(s, handler)
    state = result.state
    if cluster is not None and cluster.lost_reason:
        raise cluster_lost_error(cluster, path, state)
    if result.reason == "stopped":
        print(
            f"elopt: {received[0] if received else 'stop'}: stopping; {state.n_finished} "
            f"finished trials are in {path} "
            f"({state.n_interrupted} interrupted, re-run on resume). Continue with: "
            f"elopt resume {path}"
        )
        return SIGNAL_EXIT.get(received[0], 130) if received else 130
    else:
        why = "trial budget reached" if result.reason == "budget" else "time budget used"
        print(
            f"elopt: {why}; {state.n_finished} finished trials in {path} "
            f"({state.n_feasible} feasible). Read the front with: elopt front {path}"
        )
    return 0


def _max_drive_V(spec: StudySpec) -> float:
    """The largest drive voltage the study can use (fixed, or the end of its search range)."""
    v = spec.fixed.get("drive_V", 0.0)
    top = abs(v) if isinstance(v, (int, float)) else 0.0
    for s in spec.search:
        if s.name == "drive_V":
            top = max(top, abs(s.low), abs(s.high))
    return top

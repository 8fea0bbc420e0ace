"""Start-up of the command line: ``elopt --help`` and the study readers on a large study.

    python tests/benchmarks/bench_startup.py [--trials 3000] [--runs 7] [--elopt PATH]

Builds a study file of the demo study's layout (configs/study_spindle_runout.toml) holding
``--trials`` trials with made-up values (timing only: nothing here is a check value), then
times each command as a user runs it (a fresh process each time) and prints the median and the
fastest wall time of ``--runs`` runs and the median CPU time (user + system, less sensitive to
a loaded machine than the wall time). Targets: ``elopt --help`` <= 0.3 s, ``elopt front`` on 3,000
trials <= 1 s. ``--elopt`` times another installation (e.g. an older commit's venv) on the
same file, for a before/after table in one run. The figures depend on the machine's load.
"""

from __future__ import annotations

import argparse
import os
import resource
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

DEMO = Path(__file__).resolve().parents[2] / "configs" / "study_spindle_runout.toml"
TARGETS_S = {"--help": 0.3, "front": 1.0}


def _design(header, rng: np.random.Generator, metrics: np.ndarray, samples: int):
    """A made-up solved design of the demo's layout: two conductors, ``samples`` surface
    samples each (timing only)."""
    from elopt.optimizer.record import ConductorRecord, DesignRecord, PeakRecord, SurfaceSamples

    names = ("sensor", "guard")
    surface = tuple(
        SurfaceSamples(
            conductor=name,
            kind="profile",
            points_m=rng.uniform(0, 1e-3, (samples, 2)),
            sigma_C_per_m2=rng.uniform(0, 1e-6, samples),
            field_V_per_m=rng.uniform(0, 1e6, samples),
            area_m2=rng.uniform(1e-9, 1e-8, samples),
            face=np.zeros(samples, dtype=np.int8),
            normal=np.tile([0.0, 1.0], (samples, 1)),
            arc_length_m=np.sort(rng.uniform(0, 1e-2, samples)),
        )
        for name in names
    )
    params = dict(
        zip(header.parameter_names, rng.uniform(0.1, 4.0, len(header.parameter_names)), strict=True)
    )
    return DesignRecord(
        family=header.family,
        parameters=params,
        parameter_units=dict(zip(header.parameter_names, header.parameter_units, strict=True)),
        conductors=(ConductorRecord(names[0], 1.0, None), ConductorRecord(names[1], 1.0, None)),
        ground_plane=True,
        capacitance_matrix_F=np.eye(2) * 1e-13,
        charges_C=np.array([1e-13, 1e-13]),
        potentials_V=np.ones(2),
        sense_capacitance_F=1e-13,
        sense_capacitance_meaning="made up",
        peak=PeakRecord(names[0], 1e6, (1e-3, 2e-3), False, 1e-3),
        relative_error_estimate=1e-4,
        requested_accuracy=1e-3,
        accuracy_met=True,
        n_unknowns=300,
        metrics=dict(zip(header.metric_names, metrics.tolist(), strict=True)),
        metric_units=dict(zip(header.metric_names, header.metric_units, strict=True)),
        surface=surface,
    )


def make_study(path: Path, trials: int) -> None:
    """A study file with the demo's header and ``trials`` made-up trials (seeded)."""
    from elopt.optimizer.config.study_config import load_study_config
    from elopt.optimizer.store import StudyWriter, TrialRecord
    from elopt.optimizer.study.search import study_header

    header = study_header(load_study_config(DEMO))
    rng = np.random.default_rng(1)
    n_par, n_met = len(header.parameter_names), len(header.metric_names)
    n_obj, n_con = len(header.objective_names), len(header.constraint_names)
    samples = 120
    with StudyWriter.create(path, header, overwrite=True, fsync=False) as w:
        w.begin_session(target_trials=trials, hours=None, workers=2)
        for i in range(trials):
            failed = i % 23 == 5
            metrics = rng.uniform(0.1, 5.0, n_met)
            # a third of the trials break their limits; objectives and constraints follow the
            # metrics as the writer checks
            for name, limit in zip(
                header.constraint_metrics, header.constraint_limits, strict=True
            ):
                metrics[header.metric_names.index(name)] = limit * (1.2 if i % 3 == 0 else 0.5)
            judged = dict(zip(header.metric_names, metrics.tolist(), strict=True))
            constraints = np.array(
                [
                    judged[m] - lim if kind == "max" else lim - judged[m]
                    for m, kind, lim in zip(
                        header.constraint_metrics,
                        header.constraint_kinds,
                        header.constraint_limits,
                        strict=True,
                    )
                ]
            )
            w.append(
                TrialRecord(
                    state="failed" if failed else "complete",
                    params=rng.uniform(0.1, 4.0, n_par),
                    metrics=np.full(n_met, np.nan) if failed else metrics,
                    objectives=np.full(n_obj, np.nan)
                    if failed
                    else np.array([judged[o] for o in header.objective_names]),
                    constraints=np.full(n_con, np.nan) if failed else constraints,
                    feasible=not failed and bool(np.all(constraints <= 0)),
                    session=0,
                    started_unix=1e9 + i,
                    finished_unix=1e9 + i + 1.0,
                    solve_s=1.0,
                    design=None if failed else _design(header, rng, metrics, samples),
                    info={"failure": "made up"} if failed else {},
                )
            )


def time_runs(cmd: list[str], runs: int) -> tuple[float, float, float] | None:
    """Median and fastest wall time and median CPU time (user + system) of ``runs`` runs;
    None when the command fails (an older elopt without that option)."""
    env = dict(os.environ, COLUMNS="120")
    walls, cpus = [], []
    for _ in range(runs):
        before = resource.getrusage(resource.RUSAGE_CHILDREN)
        t0 = time.perf_counter()
        proc = subprocess.run(cmd, capture_output=True, text=True, env=env)
        walls.append(time.perf_counter() - t0)
        after = resource.getrusage(resource.RUSAGE_CHILDREN)
        cpus.append(after.ru_utime - before.ru_utime + after.ru_stime - before.ru_stime)
        if proc.returncode != 0:
            return None
    return statistics.median(walls), min(walls), statistics.median(cpus)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--trials", type=int, default=3000)
    ap.add_argument("--runs", type=int, default=7)
    ap.add_argument(
        "--elopt", action="append", help="elopt executable(s) to time (default: this one)"
    )
    args = ap.parse_args()
    exes = args.elopt or [shutil.which("elopt") or str(Path(sys.executable).with_name("elopt"))]
    with tempfile.TemporaryDirectory() as tmp:
        study = Path(tmp) / "large.h5"
        t0 = time.perf_counter()
        make_study(study, args.trials)
        print(
            f"study file: {args.trials} trials, {study.stat().st_size / 1e6:.1f} MB, built in "
            f"{time.perf_counter() - t0:.1f} s; {args.runs} runs each, machine load "
            f"{os.getloadavg()[0]:.2f} (1-min average)"
        )
        cases = [
            ("--help", ["--help"]),
            ("--version", ["--version"]),
            ("front", ["front", str(study)]),
            ("front, all rows", ["front", str(study), "--top", "0"]),
            ("show", ["show", str(study), "17"]),
        ]
        print(
            f"{'command':<16}{'elopt':<48}{'median s':>10}{'fastest s':>11}{'CPU s':>8}"
            f"{'target s':>10}"
        )
        for name, argv in cases:
            for exe in exes:
                got = time_runs([exe, *argv], args.runs)
                if got is None:
                    print(f"{name:<16}{exe[-46:]:<48}{'(fails: no such option)':>29}")
                    continue
                median, fastest, cpu = got
                target = TARGETS_S.get(name)
                mark = "" if target is None else f"{target:>10.1f}"
                print(f"{name:<16}{exe[-46:]:<48}{median:>10.3f}{fastest:>11.3f}{cpu:>8.3f}{mark}")


if __name__ == "__main__":
    main()

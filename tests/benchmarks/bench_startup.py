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


def make_study(path: Path, trials: int) -> None:
    """A study file with the demo's header and ``trials`` made-up trials (seeded)."""
    from elopt.optimizer.config.study_config import load_study_config
    from elopt.optimizer.store import PROFILE_FIELDS, StudyWriter, TrialRecord
    from elopt.optimizer.study.search import study_header

    header = study_header(load_study_config(DEMO))
    rng = np.random.default_rng(1)
    n_par, n_met = len(header.parameter_names), len(header.metric_names)
    n_obj, n_con = len(header.objective_names), len(header.constraint_names)
    samples = 240
    with StudyWriter.create(path, header, overwrite=True, fsync=False) as w:
        w.begin_session(target_trials=trials, hours=None, workers=2)
        for i in range(trials):
            failed = i % 23 == 5
            metrics = rng.uniform(0.1, 5.0, n_met)
            profile = {name: rng.uniform(0, 1e-3, samples) for name in PROFILE_FIELDS}
            profile["conductor"] = (np.arange(samples) >= samples // 2).astype(np.int16)
            w.append(
                TrialRecord(
                    state="failed" if failed else "complete",
                    params=rng.uniform(0.1, 4.0, n_par),
                    metrics=np.full(n_met, np.nan) if failed else metrics,
                    objectives=np.full(n_obj, np.nan) if failed else metrics[:n_obj],
                    constraints=np.full(n_con, np.nan) if failed else rng.uniform(-1, 0.3, n_con),
                    feasible=not failed and i % 3 != 0,
                    session=0,
                    started_unix=1e9 + i,
                    finished_unix=1e9 + i + 1.0,
                    solve_s=1.0,
                    capacitance_F=np.zeros((0, 0)) if failed else np.eye(2) * 1e-13,
                    profile=None if failed else profile,
                    info={"failure": "made up"} if failed else {"conductors": ["sensor", "guard"]},
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

"""The demo study (configs/study_spindle_runout.toml, real guarded_disk solves) at 200 and
3,000 trials: trials per hour, share of wall time in solves, coordinator cost per trial, and
the speed-up of 2 workers over 1.

    python tests/benchmarks/bench_study.py [--large 3000] [--small 200]   (--large 0: small only)

"Solve share" = sum of the time workers spent inside the family's evaluate / (wall time x
workers), wall time from the start of the pool to the last trial stored. Targets: >= 90 % at
both sizes, >= 1.8x for 2 workers over 1. Two more lines separate the machinery from the
machine: the 1-worker study's own parameter sets replayed through the pool with 1 and 2
workers (same work, no sampler differences), and the same parameter sets in 1 vs 2 bare
multiprocessing processes (the machine's own ceiling for two concurrent solves). One run,
figures as measured.
"""

from __future__ import annotations

import argparse
import multiprocessing as mp
import sys
import tempfile
import time
from pathlib import Path

from elopt.optimizer.config.study_config import load_study_config
from elopt.optimizer.run.local_pool import LocalProcessPool
from elopt.optimizer.store import StudyWriter, read_study
from elopt.optimizer.study.search import RunLimits, run_search, study_header
from elopt.optimizer.study.trial_eval import TrialTask

DEMO = Path(__file__).resolve().parents[2] / "configs" / "study_spindle_runout.toml"


def measure(trials: int, workers: int, tmp: Path) -> dict:
    spec = load_study_config(DEMO)
    path = tmp / f"bench_{trials}_{workers}.h5"
    writer = StudyWriter.create(path, study_header(spec), overwrite=True)
    t0 = time.perf_counter()
    try:
        with LocalProcessPool(workers) as pool:
            result = run_search(spec, writer, pool, RunLimits(trials, None))
            wall = time.perf_counter() - t0
    finally:
        writer.close()
    st = result.state
    c = read_study(path).columns
    ok = c["state"] == 0
    solves = sorted(c["solve_s"][ok])
    n = st.n_finished
    return {
        "trials": n,
        "workers": workers,
        "wall_s": wall,
        "trials_per_hour": n / wall * 3600.0,
        "solve_share": float(sum(solves)) / (wall * workers),
        "median_solve_s": float(solves[len(solves) // 2]),
        "ask_ms": 1e3 * st.ask_s_total / n,
        "tell_ms": 1e3 * st.tell_s_total / n,
        "store_ms": 1e3 * st.store_s_total / n,
        "failed": st.n_failed,
        "sampler_end": st.sampler_kind,
        "path": path,
    }


def _stored_params(path: Path) -> list[dict[str, float]]:
    snap = read_study(path)
    names = snap.header.parameter_names
    return [dict(zip(names, map(float, row), strict=True)) for row in snap.columns["params"]]


def replay_speedup(path: Path) -> float:
    """The stored parameter sets of one study evaluated again through the local pool with 1
    and with 2 workers: the same work both times, so sampler differences drop out."""
    spec = load_study_config(DEMO)
    metric_names = tuple(m.name for m in spec.metrics)
    tasks = [
        TrialTask(i, spec.family_ref, p, metric_names, spec.rel_accuracy, spec.eps_r)
        for i, p in enumerate(_stored_params(path))
    ]
    rates = []
    for workers in (1, 2):
        with LocalProcessPool(workers) as pool:
            t0 = time.perf_counter()
            for t in tasks:
                pool.submit(t)
            done = 0
            while done < len(tasks):
                done += len(pool.poll(1.0))
            rates.append(len(tasks) / (time.perf_counter() - t0))
    return rates[1] / rates[0]


def _bare_eval(params: dict) -> float:
    from elopt.physics.electrodes.registry import get_family

    family = get_family("guarded_disk")
    spec = load_study_config(DEMO)
    t0 = time.perf_counter()
    family.evaluate(family.Params(**params), rel_accuracy=spec.rel_accuracy)
    return time.perf_counter() - t0


def bare_speedup(path: Path) -> tuple[float, float, float]:
    """The machine's own ceiling: the study's stored parameter sets evaluated in 1 and in 2
    plain multiprocessing processes, nothing of elopt's coordinator, store or pool involved.
    Returns (speed-up, median evaluation s with 1 process, with 2)."""
    params = _stored_params(path)
    rates, medians = [], []
    for k in (1, 2):
        with mp.get_context("spawn").Pool(k) as pool:
            pool.map(_bare_eval, params[: 2 * k])  # imports and compiled-code caches
            t0 = time.perf_counter()
            times = pool.map(_bare_eval, params, chunksize=1)
            rates.append(len(params) / (time.perf_counter() - t0))
            medians.append(sorted(times)[len(times) // 2])
    return rates[1] / rates[0], medians[0], medians[1]


def report(rows: list[dict], small: int) -> None:
    print(
        f"{'trials':>7} {'workers':>7} {'wall s':>8} {'trials/h':>9} {'solve share':>11} "
        f"{'median solve s':>14} {'ask ms':>7} {'tell ms':>7} {'store ms':>8} {'failed':>6} "
        f"{'sampler at end':>14}"
    )
    for r in rows:
        print(
            f"{r['trials']:>7} {r['workers']:>7} {r['wall_s']:>8.1f} {r['trials_per_hour']:>9.0f} "
            f"{100 * r['solve_share']:>10.1f}% {r['median_solve_s']:>14.3f} {r['ask_ms']:>7.2f} "
            f"{r['tell_ms']:>7.2f} {r['store_ms']:>8.2f} {r['failed']:>6} {r['sampler_end']:>14}"
        )
    speedup = rows[1]["trials_per_hour"] / rows[0]["trials_per_hour"]
    replay = replay_speedup(rows[0]["path"])
    ceiling, m1, m2 = bare_speedup(rows[0]["path"])
    print(f"speed-up of 2 workers over 1 at {small} trials: {speedup:.2f}x (target >= 1.8x)")
    print(f"same {small} parameter sets through the local pool, 2 workers over 1: {replay:.2f}x")
    print(
        f"machine ceiling, the same parameter sets in 2 bare processes over 1: {ceiling:.2f}x "
        f"(median evaluation {m1:.3f} s alone, {m2:.3f} s with two running)"
    )
    shares = ", ".join(f"{100 * r['solve_share']:.1f}% at {r['trials']}" for r in rows[1:])
    print(f"solve share with 2 workers: {shares} (target >= 90% at both)")


def main() -> None:
    # As the elopt command does: one BLAS thread per process (children inherit it) and
    # optuna's per-trial lines off.
    import optuna

    from elopt.physics.threads import limit_blas_threads

    limit_blas_threads()
    optuna.logging.set_verbosity(optuna.logging.WARNING)
    ap = argparse.ArgumentParser()
    ap.add_argument("--small", type=int, default=200)
    ap.add_argument("--large", type=int, default=3000, help="0 skips the large study")
    args = ap.parse_args()
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        runs = [(args.small, 1), (args.small, 2)] + ([(args.large, 2)] if args.large else [])
        for trials, workers in runs:
            rows.append(measure(trials, workers, Path(tmp)))
            print(f"  done: {trials} trials on {workers} worker(s)", file=sys.stderr, flush=True)
        report(rows, args.small)


if __name__ == "__main__":
    main()

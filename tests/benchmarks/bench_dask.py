"""Throughput of a study through the Dask path, 1 vs 2 workers, and the coordinator's own cost
per trial (which sets how many workers one coordinator can keep busy).

    python tests/benchmarks/bench_dask.py [--trials 40] [--repeats 3] [--instant 300]

The cluster is a real one on loopback: ``dask scheduler`` and single-threaded ``dask worker``
processes, so the coordinator's CPU time is its own (optuna, the study file, the Dask client).
Rows:
- demo study (configs/study_spindle_runout.toml, real guarded_disk solves) on the local
  process pool and on Dask with 1 and 2 workers, median of ``--repeats`` runs on warm workers.
  These rows draw designs with optuna's RandomSampler (fixed seed), so every run solves the
  very same designs whatever the number of workers (TPE's choices depend on the order in which
  trials finish, and solve times differ several-fold between designs);
- instant trials (the test-only analytic family, no solve, the study's own TPE sampler): the
  most trials per second the coordinator sustains through Dask, i.e. the ceiling whatever the
  number of workers, and what each trial costs the coordinator.
"Solve share" = time in the family's evaluate / (wall x workers). The machine is shared with
other developers' test runs, so every figure is a median and still noisy.
"""

from __future__ import annotations

import argparse
import math
import statistics
import sys
import tempfile
import time
from collections.abc import Callable
from pathlib import Path

import optuna

TESTS = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(TESTS))

from study_support.configs import fixture_study  # noqa: E402
from study_support.dask_cluster import LoopbackCluster  # noqa: E402

from elopt.optimizer.config.study_config import StudySpec, load_study_config  # noqa: E402
from elopt.optimizer.run.dask_pool import connect_cluster  # noqa: E402
from elopt.optimizer.run.local_pool import Executor, LocalProcessPool  # noqa: E402
from elopt.optimizer.store import StudyWriter, read_study  # noqa: E402
from elopt.optimizer.study.search import (  # noqa: E402
    RunLimits,
    SamplerFactory,
    make_sampler,
    run_search,
    study_header,
)

DEMO = TESTS.parent / "configs" / "study_spindle_runout.toml"


def random_designs(spec: StudySpec, kind: str, seed: int) -> optuna.samplers.BaseSampler:
    return optuna.samplers.RandomSampler(seed=seed)


def one_run(
    spec: StudySpec, executor: Executor, trials: int, path: Path, sampler: SamplerFactory
) -> dict[str, float]:
    writer = StudyWriter.create(path, study_header(spec), overwrite=True)
    cpu0, t0 = time.process_time(), time.perf_counter()
    try:
        limits = RunLimits(trials, None)
        state = run_search(spec, writer, executor, limits, sampler_factory=sampler).state
    finally:
        writer.close()
    wall, cpu = time.perf_counter() - t0, time.process_time() - cpu0
    c = read_study(path).columns
    solves = c["solve_s"][c["state"] == 0]
    n = state.n_finished
    return {
        "wall_s": wall,
        "trials_per_h": n / wall * 3600.0,
        "solve_s": float(statistics.median(solves)) if len(solves) else math.nan,
        "solve_share": float(solves.sum()) / (wall * executor.n_workers),
        "coord_cpu_ms": 1e3 * cpu / n,
        "ask_ms": 1e3 * state.ask_s_total / n,
        "tell_ms": 1e3 * state.tell_s_total / n,
        "store_ms": 1e3 * state.store_s_total / n,
        "failed": state.n_failed,
    }


def measure(
    label: str,
    spec: StudySpec,
    make_executor: Callable[[], Executor],
    workers: int,
    trials: int,
    repeats: int,
    tmp: Path,
) -> dict:
    sampler = make_sampler if "instant" in label else random_designs
    runs = []
    with make_executor() as ex:
        assert ex.n_workers == workers, (label, ex.n_workers)
        one_run(spec, ex, 2 * workers, tmp / "warmup.h5", sampler)  # imports, compiled kernels
        for i in range(repeats):
            runs.append(one_run(spec, ex, trials, tmp / f"run_{i}.h5", sampler))
    print(f"  done: {label}, {workers} worker(s)", file=sys.stderr, flush=True)
    med = {k: statistics.median(r[k] for r in runs) for k in runs[0]}
    return {"label": label, "workers": workers, "trials": trials, **med}


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--trials", type=int, default=40)
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--instant", type=int, default=300)
    args = ap.parse_args()
    demo = load_study_config(DEMO)
    rows = []
    with tempfile.TemporaryDirectory() as tmp_name:
        tmp = Path(tmp_name)
        instant = load_study_config(fixture_study(tmp, trials=args.instant))
        for w in (1, 2):
            pool = lambda w=w: LocalProcessPool(w)  # noqa: E731
            rows.append(measure("local pool", demo, pool, w, args.trials, args.repeats, tmp))
        for w in (1, 2):
            with LoopbackCluster(tmp, w) as cluster:
                dask = lambda c=cluster: connect_cluster(c.address)  # noqa: E731
                rows.append(measure("dask", demo, dask, w, args.trials, args.repeats, tmp))
                if w == 2:
                    rows.append(
                        measure("dask, instant", instant, dask, w, args.instant, args.repeats, tmp)
                    )
    print(f"medians of {args.repeats} runs each (shared 2-core machine: noisy)")
    print(
        f"{'path':<14} {'workers':>7} {'trials':>6} {'wall s':>7} {'trials/h':>9} "
        f"{'solve s/trial':>13} {'solve share':>11} {'coord CPU ms/trial':>18} {'ask ms':>7} "
        f"{'tell ms':>7} {'store ms':>8} {'failed':>6}"
    )
    for r in rows:
        print(
            f"{r['label']:<14} {r['workers']:>7} {r['trials']:>6} {r['wall_s']:>7.1f} "
            f"{r['trials_per_h']:>9.0f} {r['solve_s']:>13.3f} {100 * r['solve_share']:>10.1f}% "
            f"{r['coord_cpu_ms']:>18.1f} {r['ask_ms']:>7.2f} {r['tell_ms']:>7.2f} "
            f"{r['store_ms']:>8.2f} {r['failed']:>6.0f}"
        )
    pool1, pool2, dask1, dask2, ceiling = rows
    print(f"dask, 2 workers over 1: {dask2['trials_per_h'] / dask1['trials_per_h']:.2f}x")
    print(f"local pool, 2 workers over 1: {pool2['trials_per_h'] / pool1['trials_per_h']:.2f}x")
    print(f"dask over local pool, 2 workers: {dask2['trials_per_h'] / pool2['trials_per_h']:.2f}x")
    rate = ceiling["trials_per_h"] / 3600.0
    trial_s = 3600.0 / dask1["trials_per_h"]
    print(
        f"coordinator ceiling (instant trials, {args.instant} per run, TPE): {rate:.0f} trials/s, "
        f"{1e3 / rate:.0f} ms of coordinator wall per trial; at the demo study's {trial_s:.2f} s "
        f"per trial per worker one coordinator keeps about {rate * trial_s:.0f} workers busy "
        "(fewer later in a long study: TPE's ask cost grows with the trial count)"
    )


if __name__ == "__main__":
    main()

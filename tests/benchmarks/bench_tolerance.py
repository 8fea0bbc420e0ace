"""Benchmark: what judging a design across tolerances costs per trial.

Run: ``python tests/benchmarks/bench_tolerance.py [DESIGNS]`` (prints one table; a few minutes).
The same DESIGNS designs (seeded draws from the search space of
configs/study_spindle_tolerant.toml) are evaluated as study trials twice: nominal only (the
study without its ``[tolerance]`` table) and with the tolerances (+-10 um gap and fillet,
+-20 um standoff, worst cases). CPU time per trial is the process time of the evaluation, so a
loaded machine changes it less than wall time; both are printed, as medians, with the ratio.
"""

from __future__ import annotations

import dataclasses
import statistics
import sys
import time
from pathlib import Path

import numpy as np

from elopt.optimizer.config import load_study_config
from elopt.optimizer.study.search import trial_task
from elopt.optimizer.study.trial_eval import evaluate_task
from elopt.physics.threads import limit_blas_threads

ROOT = Path(__file__).resolve().parents[2]


def draw_designs(spec, n: int) -> list[dict[str, float]]:
    rng = np.random.default_rng(7)
    designs = []
    for _ in range(n):
        d = {}
        for r in spec.search:
            if r.log:
                d[r.name] = float(np.exp(rng.uniform(np.log(r.low), np.log(r.high))))
            else:
                d[r.name] = float(rng.uniform(r.low, r.high))
        designs.append(d)
    return designs


def main() -> None:
    limit_blas_threads()
    n = int(sys.argv[1]) if len(sys.argv) > 1 else 6
    tolerant = load_study_config(ROOT / "configs" / "study_spindle_tolerant.toml")
    nominal = dataclasses.replace(tolerant, tolerance=None)
    rows = {"nominal": [], "toleranced": []}
    evaluations, methods = [], []
    for k, design in enumerate(draw_designs(tolerant, n)):
        for label, spec in (("nominal", nominal), ("toleranced", tolerant)):
            wall0, cpu0 = time.perf_counter(), time.process_time()
            out = evaluate_task(trial_task(spec, k, design))
            rows[label].append((time.perf_counter() - wall0, time.process_time() - cpu0, out.ok))
            if label == "toleranced" and out.ok:
                evaluations.append(out.tolerance_info["evaluations"])
                methods.append(out.tolerance_info["method"])
    print(f"{'study':<12} {'trials':>6} {'ok':>3} {'median wall s':>14} {'median CPU s':>13}")
    med = {}
    for label, r in rows.items():
        wall = statistics.median(x[0] for x in r)
        cpu = statistics.median(x[1] for x in r)
        med[label] = (wall, cpu)
        ok = sum(x[2] for x in r)
        print(f"{label:<12} {len(r):>6} {ok:>3} {wall:>14.3f} {cpu:>13.3f}")
    print(
        f"ratio toleranced/nominal: wall {med['toleranced'][0] / med['nominal'][0]:.2f}x, "
        f"CPU {med['toleranced'][1] / med['nominal'][1]:.2f}x; pipeline evaluations per "
        f"toleranced trial: median {statistics.median(evaluations) if evaluations else 'n/a'} "
        f"({', '.join(sorted(set(methods)))})"
    )


if __name__ == "__main__":
    main()

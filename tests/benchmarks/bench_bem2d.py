"""2-D solver benchmark: one periodic interdigitated cell on a three-layer stack, and the
interdigitated demo study (configs/study_idc_humidity.toml).

    python tests/benchmarks/bench_bem2d.py [--repeats 30] [--trials 200] [--workers 2]

Part 1: zero-thickness fingers 10 um wide, 10 um gaps (period 40 um) on a glass half-space
under a 1 um passivation and a 5 um film, air above; solve_2d to 1e-4. Prints the median
milliseconds per solve (compiled kernels warmed up first; wall median and minimum, CPU
median), the unknowns, the error estimate and the achieved error against a 1e-7 reference.
Goal: <= 5 ms median.
Part 2: the demo study through the local pool (as ``elopt run``): wall time, trials per
hour, and the share of wall x workers spent inside the family's evaluate ("solve share").
The machine is shared; say how loaded it was when quoting the figures.

Part 1 after the periodic-kernel work (compiled near split, mirrored periodic matrix, shared
phase factors), measured 2 Dec 2026 18:11-18:13 UTC with before (e236b93) and after run
alternately, three rounds of 60 solves each, in one run (load average 15-16 on the 2 cores,
about eight processes per core, so wall-clock figures are several times an idle core's):

    periodic cell, 156 unknowns          before            after
    CPU ms per solve (median)            8.15 - 8.60       3.82 - 4.26
    wall ms, median                      24 - 64           12 - 29
    wall ms, min                         11.7 - 37         3.36 - 3.60
    estimate / achieved error            5.3e-5 / 1.6e-5   5.3e-5 / 1.6e-5 (C equal to 1e-15)

An idle core gave 7.1 ms median (6.8 min) before, so about 3.5 ms median is expected after
(CPU ratio 0.48; the loaded minimum is 3.4 ms); the <= 5 ms goal is met on CPU time and on
the minimum here, and could not be confirmed as a wall median on an idle core. A solve of a
stack not seen before adds about 0.6 ms of CPU (its spectra and image limits are kept per
stack; measured under load).

Earlier (same day, load average 10-15; each before / after pair back to back in one run):

    periodic cell, median ms (wall)    before 194  after 33   (load 14-15, final code:
                                       3 nodes/panel, levels 66 + 156 unknowns, achieved 1.6e-5)
                                       before 165  after 79   (load 10.5, 4 nodes/panel, 88 + 208)
    periodic cell, CPU ms per solve    before 82-90  after 8.9 (BLAS on one thread)
    demo study, 200 trials, 2 workers  before: did not finish; final code: 0 failed, 594 s
                                       wall, 1213 trials/h, solve share 97.7 %, median trial
                                       4.8 s (earlier steps: 1160 s and 1220 s, 10.8 s a trial)

Part 2 was not re-measured after the periodic-kernel work.

Re-run after the merges on a near-idle machine (2 Dec 2026 18:37, load 1.5): periodic cell
3.35 ms median, 3.15 ms min, 3.35 ms CPU; 156 unknowns, estimate 5.3e-5, true 1.6e-5.
"""

from __future__ import annotations

import argparse
import math
import statistics
import tempfile
import time
from pathlib import Path

from elopt.physics.bem2d import Strip, solve_2d
from elopt.physics.layout import Layout, driven
from elopt.physics.media import PlanarLayer
from elopt.physics.threads import limit_blas_threads

DEMO = Path(__file__).resolve().parents[2] / "configs" / "study_idc_humidity.toml"


def cell() -> tuple[Layout, float]:
    lam, w = 40e-6, 10e-6
    layers = (
        PlanarLayer("glass", 4.6, -math.inf, 0.0),
        PlanarLayer("passivation", 3.9, 0.0, 1e-6),
        PlanarLayer("film", 3.2, 1e-6, 6e-6),
    )
    conds = (
        driven("a", Strip(-w / 2, w / 2, 0.0), 1.0),
        driven("b", Strip(lam / 2 - w / 2, lam / 2 + w / 2, 0.0), 0.0),
    )
    return Layout(conds, layers=layers), lam


def bench_cell(repeats: int) -> None:
    layout, lam = cell()
    ref = -solve_2d(layout, period_m=lam, rel_accuracy=1e-7).capacitance_matrix_F[0, 1]
    solve_2d(layout, period_m=lam)
    times, cpu = [], []
    for _ in range(repeats):
        t0, c0 = time.perf_counter(), time.process_time()
        sol = solve_2d(layout, period_m=lam, rel_accuracy=1e-4)
        times.append(time.perf_counter() - t0)
        cpu.append(time.process_time() - c0)
    c = -sol.capacitance_matrix_F[0, 1]
    print("periodic cell, 3-layer stack, requested 1e-4")
    print(
        f"  {'median ms':>10} {'min ms':>8} {'CPU ms':>7} {'unknowns':>9} {'estimate':>9} "
        f"{'achieved':>9}"
    )
    print(
        f"  {1e3 * statistics.median(times):10.2f} {1e3 * min(times):8.2f} "
        f"{1e3 * statistics.median(cpu):7.2f} {sol.n_unknowns:9d} "
        f"{sol.rel_error_estimate:9.1e} {abs(c / ref - 1):9.1e}"
    )


def bench_study(trials: int, workers: int) -> None:
    from elopt.optimizer.config.study_config import load_study_config
    from elopt.optimizer.run.local_pool import LocalProcessPool
    from elopt.optimizer.store import StudyWriter, read_study
    from elopt.optimizer.study.search import RunLimits, run_search, study_header

    spec = load_study_config(DEMO)
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "bench_idc.h5"
        writer = StudyWriter.create(path, study_header(spec), overwrite=True)
        t0 = time.perf_counter()
        try:
            with LocalProcessPool(workers) as pool:
                result = run_search(spec, writer, pool, RunLimits(trials, None))
                wall = time.perf_counter() - t0
        finally:
            writer.close()
        c = read_study(path).columns
    ok = c["state"] == 0
    solves = sorted(c["solve_s"][ok])
    n = result.state.n_finished
    print(f"interdigitated demo study, {workers} worker(s)")
    print(
        f"  {'trials':>7} {'failed':>7} {'wall s':>8} {'trials/h':>9} {'solve share':>12} {'median s':>9}"
    )
    print(
        f"  {n:7d} {result.state.n_failed:7d} {wall:8.1f} {n / wall * 3600:9.0f} "
        f"{sum(solves) / (wall * workers):12.1%} {solves[len(solves) // 2]:9.2f}"
    )


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=30)
    ap.add_argument("--trials", type=int, default=200)
    ap.add_argument("--workers", type=int, default=2)
    args = ap.parse_args()
    limit_blas_threads()
    bench_cell(args.repeats)
    if args.trials > 0:
        bench_study(args.trials, args.workers)


if __name__ == "__main__":
    main()

"""Benchmark of the electrode families' ``evaluate``: what one study trial costs.

Run: ``python tests/benchmarks/bench_families.py [REPEATS]`` (prints one table; under a
minute). Designs: the two demo configs in configs/ (spindle run-out probe, 30 kV test cell),
each at requested accuracies 1e-3 and 1e-4; the guarded disk with its default 5-standoff
linearity sweep and with the sweep skipped (``linearity_points = 0``). Median of REPEATS
runs after one warm-up (the compiled ring sums load on first use).
"""

from __future__ import annotations

import statistics
import sys
import time
from pathlib import Path

from elopt.optimizer.config.solve_config import read_solve_config
from elopt.physics.electrodes.guarded_disk import GuardedDiskOptions
from elopt.physics.electrodes.registry import get_family
from elopt.physics.threads import limit_blas_threads

ROOT = Path(__file__).resolve().parents[2]


def median_seconds(fn, repeats: int) -> float:
    fn()
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def main() -> None:
    limit_blas_threads()  # as the elopt command does; children inherit it
    repeats = int(sys.argv[1]) if len(sys.argv) > 1 else 7
    rows = []
    for name in ("spindle_runout_probe", "hv_test_cell"):
        spec = read_solve_config(ROOT / "configs" / f"{name}.toml")
        family = get_family(spec.family)
        variants = [("default options", None)]
        if spec.family == "guarded_disk":
            variants.append(("linearity skipped", GuardedDiskOptions(linearity_points=0)))
        for accuracy in (1e-3, 1e-4):
            for label, options in variants:
                kwargs = {} if options is None else {"options": options}

                def run(acc=accuracy, kw=kwargs, fam=family, sp=spec):
                    return fam.evaluate(sp.params, rel_accuracy=acc, **kw)

                ev = run()
                seconds = median_seconds(run, repeats)
                rows.append((name, label, accuracy, ev.solution.n_unknowns, seconds))
    print(f"{'design':<22}{'variant':<20}{'accuracy':>9}{'unknowns':>10}{'median s':>10}")
    for name, label, acc, n, s in rows:
        print(f"{name:<22}{label:<20}{acc:>9.0e}{n:>10}{s:>10.3f}")
    base = {(r[0], r[2]): r[4] for r in rows if r[1] == "default options"}
    for name, label, acc, _, s in rows:
        if label == "linearity skipped":
            print(f"linearity sweep costs x{base[(name, acc)] / s:.1f} at {acc:.0e} ({name})")


if __name__ == "__main__":
    main()

"""Two workers: the machine's own speed-up beside the study pool's, measured in one run.

    python tests/benchmarks/bench_workers.py [--trials 40]

Three speed-ups of 2 over 1, all on this machine in this run:
- bare: the parameter sets of a 1-worker demo study (configs/study_spindle_runout.toml, real
  guarded_disk solves) evaluated in 1 and in 2 plain multiprocessing processes side by side
  (nothing of elopt's coordinator, store or pool): the machine's ceiling for two solves;
- pool: the same parameter sets through elopt's local process pool with 1 and 2 workers;
- study: the demo study itself with 1 and with 2 workers (its own sampler and store).
pool / bare is the share of the machine's speed-up the pool keeps; what is lost between them
is the pool's own overhead, apart from the machine's (shared caches, memory bandwidth, other
load). The figures are as measured; on a loaded machine all three fall together.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
from pathlib import Path

from elopt.physics.threads import limit_blas_threads

sys.path.insert(0, str(Path(__file__).parent))

from bench_study import bare_speedup, measure, replay_speedup  # noqa: E402


def main() -> None:
    limit_blas_threads()  # as the elopt command does; children inherit it
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--trials", type=int, default=40)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        one = measure(args.trials, 1, Path(tmp))
        two = measure(args.trials, 2, Path(tmp))
        study = two["trials_per_hour"] / one["trials_per_hour"]
        pool = replay_speedup(one["path"])
        bare, median_alone, median_pair = bare_speedup(one["path"])
    print(f"{args.trials} trials of the demo study; speed-up = rate with 2 / rate with 1")
    print(f"{'what':44s} {'speed-up':>9s}")
    print(f"{'bare processes, same parameter sets':44s} {bare:8.2f}x")
    print(f"{'local pool, same parameter sets':44s} {pool:8.2f}x")
    print(f"{'study (own sampler and store)':44s} {study:8.2f}x")
    print(
        f"pool keeps {100 * pool / bare:.0f}% of the machine's speed-up; median evaluation "
        f"{median_alone:.3f} s alone, {median_pair:.3f} s with two running; study wall "
        f"{one['wall_s']:.1f} s on 1 worker, {two['wall_s']:.1f} s on 2"
    )


if __name__ == "__main__":
    main()

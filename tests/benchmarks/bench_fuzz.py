"""Fuzz the command line with careless and damaged inputs; print the tally by class.

    python tests/benchmarks/bench_fuzz.py [CASES] [--seed S] [--time-bound SECONDS]
                                          [--workers N] [--show K]

Cases come from ``tests/fuzz_support/cases.py`` (mutated demo configs, configs damaged on
disk or in a foreign encoding, damaged STL files, valid designs at their limits, mutated
studies run for one trial). Each runs in a worker process (address space capped at 6 GB) with
a time bound; a worker that overruns it is killed with its children and counted
"unbounded". Classes are those of ``fuzz_support.contract``: ``ok`` and ``refused`` keep the
contract, every other class breaks it. The same seed gives the same cases.
"""

from __future__ import annotations

import argparse
import collections
import multiprocessing as mp
import os
import random
import resource
import signal
import sys
import tempfile
import time
from pathlib import Path

TESTS = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(TESTS))

from fuzz_support.cases import GENERATORS  # noqa: E402
from fuzz_support.contract import CLASSES, Outcome, classify  # noqa: E402

#: Share of each generator in the mix (studies start a process pool: fewer of them).
MIX = {
    "solve-mutation": 45,
    "damaged-bytes": 20,
    "damaged-mesh": 8,
    "valid-design": 17,
    "study-mutation": 10,
}
ADDRESS_SPACE_BYTES = 6 * 1024**3


class RandomChooser:
    def __init__(self, seed: int) -> None:
        self.rng = random.Random(seed)

    def choice(self, options):
        return options[self.rng.randrange(len(options))]

    def integer(self, low: int, high: int) -> int:
        return self.rng.randint(low, high)

    def real(self, low: float, high: float) -> float:
        return self.rng.uniform(low, high)


def _worker(conn) -> None:
    os.setsid()  # one process group: a timeout kills the worker and its pool
    resource.setrlimit(resource.RLIMIT_AS, (ADDRESS_SPACE_BYTES, ADDRESS_SPACE_BYTES))
    from fuzz_support.contract import run_in_process

    from elopt.physics.threads import limit_blas_threads

    limit_blas_threads()
    while True:
        argv = conn.recv()
        if argv is None:
            return
        conn.send(run_in_process(argv))


class Worker:
    def __init__(self) -> None:
        ctx = mp.get_context("spawn")
        self.conn, child = ctx.Pipe()
        self.proc = ctx.Process(target=_worker, args=(child,))
        self.proc.start()

    def run(self, argv: list[str], bound_s: float) -> Outcome:
        t0 = time.perf_counter()
        self.conn.send(argv)
        try:
            if self.conn.poll(bound_s):
                return self.conn.recv()
        except (EOFError, ConnectionError):
            return Outcome(None, "", "worker died", time.perf_counter() - t0, crashed=True)
        self.kill()
        return Outcome(None, "", "", time.perf_counter() - t0, timed_out=True)

    def kill(self) -> None:
        try:
            os.killpg(self.proc.pid, signal.SIGKILL)
        except ProcessLookupError:
            pass
        self.proc.join()

    def alive(self) -> bool:
        return self.proc.is_alive()


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("cases", nargs="?", type=int, default=2000)
    ap.add_argument("--seed", type=int, default=14)
    ap.add_argument("--time-bound", type=float, default=30.0)
    ap.add_argument("--show", type=int, default=3, help="examples listed per broken class")
    args = ap.parse_args()

    kinds = [k for k, n in MIX.items() for _ in range(n)]
    tally: collections.Counter = collections.Counter()
    by_kind: dict[str, collections.Counter] = collections.defaultdict(collections.Counter)
    examples: dict[str, list[str]] = collections.defaultdict(list)
    worker = Worker()
    t_start = time.time()
    for i in range(args.cases):
        chooser = RandomChooser(args.seed * 1_000_003 + i)
        kind = chooser.choice(kinds)
        case = GENERATORS[kind](chooser)
        with tempfile.TemporaryDirectory(prefix="elopt-fuzz-") as tmp:
            where = Path(tmp)
            argv = case.materialise(where)
            outcome = worker.run(argv, args.time_bound)
            cls, detail = classify(case, where, outcome, args.time_bound)
        if not worker.alive():
            worker = Worker()
        tally[cls] += 1
        by_kind[kind][cls] += 1
        if cls not in ("ok", "refused") and len(examples[cls]) < args.show:
            examples[cls].append(f"#{i} {kind}: {case.description} -> {detail}")
        if (i + 1) % 100 == 0:
            print(f"  {i + 1} cases, {time.time() - t_start:.0f} s", file=sys.stderr, flush=True)
    worker.conn.send(None)
    worker.proc.join(10)

    shown = [c for c in CLASSES if tally[c]]
    print(
        f"\nelopt fuzz: {args.cases} cases, seed {args.seed}, time bound {args.time_bound:g} s, "
        f"{time.time() - t_start:.0f} s wall"
    )
    head = f"{'generator':<16}" + "".join(f"{c:>15}" for c in shown)
    print(head)
    print("-" * len(head))
    for kind in MIX:
        print(f"{kind:<16}" + "".join(f"{by_kind[kind][c]:>15}" for c in shown))
    print("-" * len(head))
    print(f"{'total':<16}" + "".join(f"{tally[c]:>15}" for c in shown))
    broken = sum(n for c, n in tally.items() if c not in ("ok", "refused"))
    print(f"\ncontract kept: {args.cases - broken} of {args.cases}; broken: {broken}")
    for cls in CLASSES:
        for line in examples.get(cls, []):
            print(f"  [{cls}] {line}")


if __name__ == "__main__":
    main()

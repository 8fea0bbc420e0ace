"""100 SIGKILLs of a real `elopt run` / `elopt resume` at random moments; prints the tally.

    python tests/benchmarks/bench_crash.py [KILLS]

Each kill is followed by a reopen (elopt's reader and plain h5py) and a check that every trial
the run reported as stored complete is in the file; at the end one resume must reach its
budget. Uses the real guarded_disk family at a coarse requested accuracy, one worker.
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

TESTS = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(TESTS))

from study_support.configs import guarded_disk_study  # noqa: E402
from study_support.kill_loop import kill_cycles, run_to_completion  # noqa: E402

from elopt.optimizer.store import read_study  # noqa: E402


def main() -> None:
    kills = int(sys.argv[1]) if len(sys.argv) > 1 else 100
    with tempfile.TemporaryDirectory() as tmp:
        d = Path(tmp)
        cfg = guarded_disk_study(d, trials=100_000, workers=1)
        out = d / "crash.h5"
        t0 = time.time()
        tally = kill_cycles(cfg, out, cycles=kills, seed=2024)
        snap = read_study(out)
        finished = int((snap.state_names() != "interrupted").sum())
        proc = run_to_completion("resume", out, "--trials", "5", cwd=d)
        after = read_study(out)
        reached = int((after.state_names() != "interrupted").sum()) == finished + 5
        rows = [
            ("processes started", kills),
            ("killed by SIGKILL", tally.kills),
            ("ended on their own before the kill", tally.finished_early),
            ("kills before the study file existed", tally.no_file_yet),
            ("kills aimed at the append phase", tally.during_appends),
            (
                "reopens after a kill that succeeded",
                f"{tally.opened} of {kills - tally.no_file_yet}",
            ),
            ("trials reported complete", len(tally.reported)),
            ("reported trials missing after a kill", len(tally.lost_reported)),
            ("trials stored at the end", after.n_trials),
            (
                "resume --trials 5 reached its budget",
                "yes" if reached and proc.returncode == 0 else "NO",
            ),
            ("wall time", f"{time.time() - t0:.0f} s"),
        ]
        width = max(len(r[0]) for r in rows)
        print(f"{'check':<{width}}  result")
        for name, value in rows:
            print(f"{name:<{width}}  {value}")
        sys.exit(0 if not tally.lost_reported and reached else 1)


if __name__ == "__main__":
    main()

"""SIGKILL `elopt run`/`elopt resume` at random moments and check the study file each time.

Shared by the crash test (30 kills) and tests/benchmarks/bench_crash.py (100 kills).
"""

from __future__ import annotations

import random
import subprocess
import time
from dataclasses import dataclass, field
from pathlib import Path

import h5py

from elopt.optimizer.store import read_study
from study_support.cli import reported_complete, start_elopt


@dataclass
class KillTally:
    kills: int = 0
    finished_early: int = 0
    no_file_yet: int = 0
    opened: int = 0
    during_appends: int = 0
    lost_reported: list[int] = field(default_factory=list)
    reported: set[int] = field(default_factory=set)
    stored: int = 0


def kill_cycles(
    config: Path, out: Path, cycles: int, seed: int, max_delay_s: float = 3.0
) -> KillTally:
    """Start the study (run, then resume once the file exists) and kill it ``cycles`` times."""
    rng = random.Random(seed)
    tally = KillTally()
    for _ in range(cycles):
        verb = ["resume", out] if out.exists() else ["run", config, "--out", out]
        proc = start_elopt(*verb, "--workers", "1", "--log-every", "0", cwd=out.parent)
        early = []
        if rng.random() < 0.5:
            # Somewhere in start-up: imports, creating or reopening (truncating) the file.
            time.sleep(rng.uniform(0.1, max_delay_s))
        else:
            # While trials are being stored: after k reported trials, a little later.
            wanted = rng.randint(1, 2)
            while len(reported_complete("".join(early))) < wanted:
                line = proc.stdout.readline()
                if not line:
                    break
                early.append(line)
            time.sleep(rng.uniform(0.0, 0.4))
            tally.during_appends += 1
        proc.kill()
        stdout, _ = proc.communicate()
        stdout = "".join(early) + stdout
        if proc.returncode == -9:
            tally.kills += 1
        else:
            tally.finished_early += 1
        tally.reported |= reported_complete(stdout)
        if not out.exists():
            tally.no_file_yet += 1
            continue
        snap = read_study(out)  # must open, every time
        with h5py.File(out, "r") as f:  # and with plain h5py
            n_plain = int(f["commit"][0])
        assert n_plain == snap.n_trials
        tally.opened += 1
        complete = {i for i, s in enumerate(snap.state_names()) if s == "complete"}
        tally.lost_reported += sorted(tally.reported - complete)
        tally.stored = snap.n_trials
    return tally


def run_to_completion(*args: str, cwd: Path, timeout: float = 300) -> subprocess.CompletedProcess:
    proc = start_elopt(*args, cwd=cwd)
    stdout, stderr = proc.communicate(timeout=timeout)
    return subprocess.CompletedProcess(proc.args, proc.returncode, stdout, stderr)

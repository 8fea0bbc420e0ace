"""kill -9 of a real `elopt run` (real guarded_disk family, coarse accuracy) at random moments:
the file always opens, every trial reported complete is in it, and resume reaches its budget."""

from __future__ import annotations

import threading

import numpy as np
import pytest
from study_support.cli import reported_complete, run_elopt, start_elopt
from study_support.configs import guarded_disk_study
from study_support.kill_loop import kill_cycles, run_to_completion

from elopt.optimizer.store import read_study


@pytest.mark.slow
def test_thirty_random_sigkills_never_lose_a_reported_trial(tmp_path):
    # Two studies killed side by side (one worker each) keep the test near half a minute.
    tallies = {}

    def sequence(name: str, seed: int) -> None:
        d = tmp_path / name
        d.mkdir()
        cfg = guarded_disk_study(d, trials=1000, workers=1)
        tallies[name] = (d, kill_cycles(cfg, d / "s.h5", cycles=15, seed=seed))

    threads = [threading.Thread(target=sequence, args=(n, s)) for n, s in (("a", 11), ("b", 12))]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert set(tallies) == {"a", "b"}, "a kill sequence raised"
    kills = sum(t.kills for _, t in tallies.values())
    assert kills >= 30
    for d, tally in tallies.values():
        assert tally.lost_reported == []
        assert tally.reported, "no kill landed after a reported trial; the test proves nothing"
        path = d / "s.h5"
        before = read_study(path)
        finished = int((before.state_names() != "interrupted").sum())
        proc = run_to_completion("resume", path, "--trials", "3", cwd=d)
        assert proc.returncode == 0, proc.stderr
        after = read_study(path)
        assert int((after.state_names() != "interrupted").sum()) == finished + 3
        complete = set(np.flatnonzero(after.state_names() == "complete").tolist())
        assert tally.reported <= complete


def test_sigkill_then_resume_without_options_reaches_the_budget(tmp_path):
    cfg = guarded_disk_study(tmp_path, trials=10)
    out = tmp_path / "s.h5"
    proc = start_elopt("run", cfg, "--out", out, "--log-every", "0", cwd=tmp_path)
    lines = []
    while len(reported_complete("".join(lines))) < 3:
        line = proc.stdout.readline()
        assert line, proc.stderr.read()
        lines.append(line)
    proc.kill()
    rest, _ = proc.communicate()
    reported = reported_complete("".join(lines) + rest)
    assert proc.returncode == -9
    resumed = run_elopt("resume", out, cwd=tmp_path, timeout=300)
    assert resumed.returncode == 0, resumed.stderr
    snap = read_study(out)
    names = snap.state_names()
    assert int((names != "interrupted").sum()) == 10
    assert reported <= set(np.flatnonzero(names == "complete").tolist())

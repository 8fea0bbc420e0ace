"""The local process pool honours the Executor contract."""

from __future__ import annotations

import os
import signal
import time

import numpy as np
from study_support.configs import FIXTURE_FAMILY

from elopt.optimizer.run.local_pool import Executor, LocalProcessPool
from elopt.optimizer.study.trial_eval import TrialTask, evaluate_task

METRICS = ("score_fF", "size_mm", "peak_surface_field_V_per_m")


def _task(key: int, width: float, family: str = FIXTURE_FAMILY, delay_s: float = 0.0) -> TrialTask:
    return TrialTask(
        key=key,
        family_ref=family,
        params={"width_mm": width, "gap_mm": 0.5, "drive_V": 10.0, "delay_s": delay_s},
        metric_names=METRICS,
        rel_accuracy=1e-3,
        eps_r=1.0,
    )


def _collect(pool: Executor, n: int, timeout_s: float = 60.0) -> dict:
    out = {}
    t_end = time.time() + timeout_s
    while len(out) < n and time.time() < t_end:
        for o in pool.poll(0.2):
            assert o.key not in out, "an outcome came back twice"
            out[o.key] = o
    return out


def test_every_task_comes_back_once_with_plain_data():
    with LocalProcessPool(2) as pool:
        for k in range(9):
            pool.submit(_task(k, 1.0 + k * 0.5))
        assert pool.in_flight == 9
        out = _collect(pool, 9)
        assert pool.in_flight == 0
    assert sorted(out) == list(range(9))
    for k, o in out.items():
        w = 1.0 + k * 0.5
        if 4.0 < w < 4.2:
            assert not o.ok and "fixture solve fails" in o.failure
            continue
        assert o.ok, o.failure
        assert o.metrics["size_mm"] == w + 0.5
        assert o.design.capacitance_matrix_F.shape == (2, 2)
        assert [s.conductor for s in o.design.surface] == ["sensor", "guard"]
        assert o.worker in (0, 1) and o.worker_pid != os.getpid()
        assert o.finished_unix >= o.started_unix


def test_worker_death_becomes_a_failed_outcome_and_the_pool_goes_on():
    dying = "study_support.dying_family:FAMILY"
    with LocalProcessPool(2) as pool:
        pool.submit(_task(0, 6.0, dying))
        for k in range(1, 6):
            pool.submit(_task(k, 1.0 + k * 0.1, dying))
        out = _collect(pool, 6)
    assert sorted(out) == list(range(6))
    assert not out[0].ok and "worker process died while solving (exit code -9)" in out[0].failure
    assert all(out[k].ok for k in range(1, 6))


def test_cancel_all_returns_unfinished_tasks_at_once():
    with LocalProcessPool(2) as pool:
        for k in range(6):
            pool.submit(_task(k, 1.0, delay_s=5.0))
        time.sleep(0.5)
        t0 = time.time()
        cancelled = pool.cancel_all()
        assert time.time() - t0 < 4.0
        assert sorted(t.key for t in cancelled) == list(range(6))
        assert pool.in_flight == 0
        pool.submit(_task(10, 2.0))  # replaced workers take new work
        out = _collect(pool, 1)
    assert out[10].ok


def test_workers_ignore_sigint():
    with LocalProcessPool(1) as pool:
        pool.submit(_task(0, 2.0, delay_s=0.5))
        time.sleep(0.01)  # the worker may still be starting up: it must ignore SIGINT already
        pid = pool._workers[0].process.pid
        os.kill(pid, signal.SIGINT)
        out = _collect(pool, 1)
    assert out[0].ok


def test_rule_break_and_unknown_family_are_failures_not_exceptions():
    bad = evaluate_task(_task(0, 8.9))
    assert not bad.ok and "ElectrodeError: width_mm + gap_mm <= 9 must hold" in bad.failure
    gone = evaluate_task(_task(1, 1.0, family="no_such_family"))
    assert not gone.ok and "unknown electrode family" in gone.failure
    good = evaluate_task(_task(2, 3.0))
    assert good.ok and np.isclose(good.metrics["score_fF"], 10.0)

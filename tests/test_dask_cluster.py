"""Studies on a real Dask cluster on loopback: scheduler and workers are separate processes
started as CLUSTER.md tells a user, and `elopt run/resume --cluster` is run as a user would.

What is checked: the Executor contract through Dask (one outcome per task, prompt poll and
cancel), a worker SIGKILLed mid-study (nothing reported is lost, the budget is reached), a trial
that kills every worker it lands on (retried once, then failed with the reason), the scheduler
lost mid-study (clean stop, intact file, resume works), and the bad inputs: an unreachable
scheduler, workers with other versions or without elopt, Dask not installed.
"""

from __future__ import annotations

import os
import signal
import sys
import time

import numpy as np
import pytest
from study_support.cli import reported_complete, run_elopt, start_elopt
from study_support.configs import FIXTURE_FAMILY, fixture_study, guarded_disk_study
from study_support.dask_cluster import LoopbackCluster, free_port

from elopt.optimizer import __version__
from elopt.optimizer.cli.main import main
from elopt.optimizer.run.dask_pool import ClusterError, connect_cluster, parse_cluster_address
from elopt.optimizer.store import read_study
from elopt.optimizer.study.trial_eval import TrialTask

METRICS = ("score_fF", "size_mm", "peak_surface_field_V_per_m")
DYING_FAMILY = "study_support.dying_family:FAMILY"


def _task(
    key: int, width: float, *, delay_s: float = 0.0, family: str = FIXTURE_FAMILY
) -> TrialTask:
    return TrialTask(
        key=key,
        family_ref=family,
        params={"width_mm": width, "gap_mm": 0.5, "drive_V": 10.0, "delay_s": delay_s},
        metric_names=METRICS,
        rel_accuracy=1e-3,
        eps_r=1.0,
    )


def _collect(executor, n: int, timeout_s: float = 60.0) -> dict:
    out: dict = {}
    t_end = time.monotonic() + timeout_s
    while len(out) < n and time.monotonic() < t_end:
        for o in executor.poll(0.2):
            assert o.key not in out, "an outcome came back twice"
            out[o.key] = o
    return out


def _one_error_line(text: str) -> str:
    err = text.strip()
    assert "\n" not in err and "Traceback" not in err, err
    assert err.startswith("elopt: error: "), err
    return err


def _wait_stored(proc, path, n: int, timeout_s: float = 90.0) -> None:
    t_end = time.monotonic() + timeout_s
    while time.monotonic() < t_end:
        assert proc.poll() is None, proc.communicate()
        if path.exists():
            try:
                if read_study(path).n_trials >= n:
                    return
            except Exception:  # the writer is creating the file right now
                pass
        time.sleep(0.1)
    raise AssertionError(f"fewer than {n} trials stored in {timeout_s} s")


@pytest.fixture(scope="module")
def cluster(tmp_path_factory):
    """A scheduler and two nanny-managed single-threaded workers, shared by several tests."""
    with LoopbackCluster(tmp_path_factory.mktemp("dask"), 2) as c:
        yield c


# ------------------------------------------------------------------------------- bad input


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ("local:0", "--cluster local:0: N = 0 is outside the allowed range [1, 256]"),
        ("local:300", "N = 300 is outside the allowed range [1, 256]"),
        ("10.0.0.1:8786", "--cluster '10.0.0.1:8786': not a cluster address; give tcp://HOST:PORT"),
        ("http://127.0.0.1:8786", "not a cluster address"),
        ("tcp://127.0.0.1:99999", "not a cluster address"),
        ("tcp://127.0.0.1", "not a cluster address"),
    ],
)
def test_bad_cluster_address_is_one_line_naming_the_rule(text, message):
    with pytest.raises(ClusterError) as info:
        parse_cluster_address(text)
    assert message in str(info.value)
    assert "\n" not in str(info.value)


def test_good_cluster_addresses_parse():
    assert parse_cluster_address("local:3").n_local == 3
    assert parse_cluster_address("tcp://127.0.0.1:8786").n_local is None
    assert parse_cluster_address("tls://head-node.lab:8786").n_local is None


def test_unreachable_scheduler_one_line_within_seconds_nothing_written(tmp_path):
    cfg = guarded_disk_study(tmp_path, trials=4)
    out = tmp_path / "x.h5"
    port = free_port()  # nobody listens there
    t0 = time.monotonic()
    proc = run_elopt("run", cfg, "--out", out, "--cluster", f"tcp://127.0.0.1:{port}", cwd=tmp_path)
    elapsed = time.monotonic() - t0
    assert proc.returncode == 2
    err = _one_error_line(proc.stderr)
    assert f"--cluster tcp://127.0.0.1:{port}: no Dask scheduler answered within 5 s" in err
    assert elapsed < 25.0  # Dask's own default would wait 30 s before giving up
    assert not out.exists() and not list(tmp_path.glob(".x.h5*"))


def test_workers_option_with_cluster_is_refused(tmp_path, capsys):
    cfg = guarded_disk_study(tmp_path, trials=4)
    out = tmp_path / "x.h5"
    assert main(["run", str(cfg), "--out", str(out), "--cluster", "local:2", "--workers", "2"]) == 2
    err = _one_error_line(capsys.readouterr().err)
    assert "--workers 2: sets the local process pool, not a cluster" in err
    assert not out.exists()


def test_without_dask_the_flag_says_how_to_install(tmp_path, capsys, monkeypatch):
    monkeypatch.setitem(sys.modules, "distributed", None)  # as if it was never installed
    cfg = guarded_disk_study(tmp_path, trials=4)
    out = tmp_path / "x.h5"
    assert main(["run", str(cfg), "--out", str(out), "--cluster", "local:2"]) == 2
    err = _one_error_line(capsys.readouterr().err)
    assert (
        "--cluster needs Dask distributed, which is not installed: pip install 'elopt[cluster]'"
        in err
    )
    assert not out.exists()


def _submit_until_lost(ex, key: int) -> str:
    lost: list[str] = []
    ex.on_lost = lost.append
    ex.submit(_task(key, 2.0))
    t_end = time.monotonic() + 30
    while not lost and time.monotonic() < t_end:
        assert ex.poll(0.2) == []  # the refused trial never comes back as an outcome
    assert lost, "the executor did not report the bad worker"
    assert [t.key for t in ex.cancel_all()] == [key]  # the coordinator stores it interrupted
    return lost[0]


def test_version_mismatch_and_missing_elopt_are_refused(tmp_path):
    """Every worker is checked at connect time; a worker that joins later with other versions
    or without elopt stops the study cleanly instead of solving with another numerical stack."""
    with LoopbackCluster(tmp_path, 1, nanny=False) as c:
        good = c.workers[0]
        ex_numpy = connect_cluster(c.address, family_ref=FIXTURE_FAMILY)
        ex_missing = connect_cluster(c.address, family_ref=FIXTURE_FAMILY)
        ex_idle = connect_cluster(c.address, family_ref=FIXTURE_FAMILY)
        old_numpy = c.add_worker(preload="study_support.dask_old_numpy")
        c.wait_for_workers(2)
        good.kill()
        c.wait_for_exactly(1)
        reason = _submit_until_lost(ex_numpy, 0)
        assert "has numpy 1.0.0 (coordinator: " in reason, reason
        ex_numpy.close()

        no_elopt = c.add_worker(preload="study_support.dask_without_elopt")
        c.wait_for_workers(2)
        old_numpy.kill()
        c.wait_for_exactly(1)
        reason = _submit_until_lost(ex_missing, 1)
        assert (
            "Dask worker tcp://127.0.0.1:" in reason
            and "cannot run elopt (ModuleNotFoundError" in reason
        ), reason
        assert "No module named 'elopt" in reason
        ex_missing.close()

        c.add_worker(preload="study_support.dask_old_numpy")
        c.wait_for_workers(2)
        cfg = fixture_study(tmp_path, trials=4)
        out = tmp_path / "x.h5"
        proc = run_elopt("run", cfg, "--out", out, "--cluster", c.address, cwd=tmp_path)
        assert no_elopt.poll() is None

        for w in c.workers:  # a cluster that had workers and has none left counts as lost
            w.kill()
        c.wait_for_exactly(0)
        ex_idle._no_worker_limit_s = 1.0
        reason = _submit_until_lost(ex_idle, 2)
        assert f"the Dask cluster at {c.address} has had no worker for 1 s" in reason
        ex_idle.close()
        lines: list[str] = []
        connect_cluster(c.address, log=lines.append).close()  # e.g. batch jobs still queued
        assert (
            "0 worker threads (none yet: trials wait until `dask worker` processes join)"
            in lines[0]
        )
    assert proc.returncode == 2
    err = _one_error_line(proc.stderr)
    assert f"--cluster {c.address}: worker tcp://127.0.0.1:" in err
    assert "has numpy 1.0.0 (coordinator: " in err
    assert "cannot run elopt (" in err and "No module named 'elopt" in err
    assert f"install elopt {__version__} with the same numpy, scipy, numba and distributed" in err
    assert not out.exists()


def test_local_cluster_workers_ignore_sigint():
    """``local:N`` workers share the terminal's process group: Ctrl-C is the coordinator's."""
    with connect_cluster("local:1", family_ref=FIXTURE_FAMILY) as ex:
        (pid,) = ex._client.run(os.getpid).values()
        os.kill(pid, signal.SIGINT)
        ex.submit(_task(0, 2.0, delay_s=0.2))
        out = _collect(ex, 1)
        assert out[0].ok and out[0].worker_pid == pid


# --------------------------------------------------------------------- executor contract


def test_dask_executor_honours_the_executor_contract(cluster):
    lines: list[str] = []
    with connect_cluster(cluster.address, family_ref=FIXTURE_FAMILY, log=lines.append) as ex:
        assert ex.n_workers == 2
        assert "2 worker threads" in lines[0]
        for k in range(8):
            ex.submit(_task(k, 1.0 + k * 0.45, delay_s=0.05))
        assert ex.in_flight == 8
        out = _collect(ex, 8)
        assert ex.in_flight == 0
        assert sorted(out) == list(range(8))
        for k, o in out.items():
            w = 1.0 + k * 0.45
            if 4.0 < w < 4.2:  # the fixture's failing solve comes back failed, with the reason
                assert not o.ok and "fixture solve fails" in o.failure
                continue
            assert o.ok, o.failure
            assert o.metrics["size_mm"] == pytest.approx(w + 0.5)
            assert o.design.capacitance_matrix_F.shape == (2, 2) and o.design.surface
            assert o.worker in (0, 1) and o.worker_pid != os.getpid()
        assert len({o.worker_pid for o in out.values()}) == 2, "both workers were used"

        t0 = time.monotonic()
        assert ex.poll(0.3) == []  # nothing in flight: returns at once
        for k in range(10, 16):
            ex.submit(_task(k, 2.0, delay_s=0.3))
        assert ex.poll(0.01) == []  # promptly, though nothing is done yet
        assert time.monotonic() - t0 < 2.0
        cancelled = ex.cancel_all()
        assert sorted(t.key for t in cancelled) == list(range(10, 16))
        assert ex.in_flight == 0
        time.sleep(0.5)
        assert ex.poll(0.1) == []  # a cancelled task never comes back
        ex.submit(_task(20, 3.0))
        assert _collect(ex, 1)[20].metrics["size_mm"] == 3.5
        ex.submit(_task(20, 2.0))  # the same task key again (a later session): a fresh solve
        assert _collect(ex, 1)[20].metrics["size_mm"] == 2.5


def test_trial_that_kills_its_worker_is_retried_once_then_failed(cluster):
    with connect_cluster(cluster.address, family_ref=DYING_FAMILY) as ex:
        ex.submit(_task(0, 6.0, family=DYING_FAMILY))  # width > 5 kills the process solving it
        out = _collect(ex, 1, timeout_s=90)
        assert not out[0].ok
        assert "lost its Dask worker 2 times while solving" in out[0].failure
        assert "KilledWorker" in out[0].failure
        cluster.wait_for_workers(2)  # the nannies started new worker processes
        for k in range(1, 5):
            ex.submit(_task(k, 1.0 + k * 0.2, family=DYING_FAMILY))
        out = _collect(ex, 4)
        assert sorted(out) == [1, 2, 3, 4] and all(o.ok for o in out.values())


def test_worker_killed_under_a_trial_gives_one_outcome_per_key(cluster):
    pids = cluster.worker_pids()
    with connect_cluster(cluster.address, family_ref=FIXTURE_FAMILY) as ex, cluster.client() as c:
        for k in range(4):
            ex.submit(_task(k, 1.0 + k * 0.3, delay_s=1.5))
        time.sleep(0.3)
        held = {a: ks for a, ks in c.processing().items() if ks}
        victim = sorted(held)[0]
        os.kill(pids[victim], signal.SIGKILL)  # mid-trial: it holds at least one
        out = _collect(ex, 4)  # asserts that no key comes back twice
        assert sorted(out) == list(range(4))
        assert all(o.ok for o in out.values()), [o.failure for o in out.values()]
        for key in held[victim]:  # its trials were solved again, by another process
            assert out[int(key.rsplit("-", 1)[1])].worker_pid != pids[victim]
        cluster.wait_for_workers(2)


# ------------------------------------------------------------------------- whole studies


def test_real_study_on_cluster_reaches_budget_and_resumes(cluster, tmp_path):
    cfg = guarded_disk_study(tmp_path, trials=8)
    out = tmp_path / "probe.h5"
    proc = run_elopt(
        "run", cfg, "--out", out, "--cluster", cluster.address, "--log-every", "0", cwd=tmp_path
    )
    assert proc.returncode == 0, proc.stderr
    assert f"elopt: Dask cluster: scheduler {cluster.address}, 2 worker threads" in proc.stdout
    assert "trial budget reached; 8 finished trials" in proc.stdout
    snap = read_study(out)
    assert snap.n_trials == 8
    assert reported_complete(proc.stdout) == set(np.flatnonzero(snap.state_names() == "complete"))
    assert set(snap.columns["worker"].tolist()) == {0, 1}
    assert len(set(snap.columns["worker_pid"].tolist())) == 2
    proc = run_elopt("resume", out, "--trials", "4", "--cluster", cluster.address, cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    assert "trial budget reached; 12 finished trials" in proc.stdout
    assert read_study(out).n_trials == 12


@pytest.mark.slow
def test_worker_killed_mid_study_loses_nothing_and_budget_is_reached(tmp_path):
    total = 16
    cfg = fixture_study(tmp_path, trials=total, delay_s=0.4)
    out = tmp_path / "s.h5"
    with LoopbackCluster(tmp_path, 2, nanny=False) as c:
        proc = start_elopt(
            "run", cfg, "--out", out, "--cluster", c.address, "--log-every", "0", cwd=tmp_path
        )
        try:
            _wait_stored(proc, out, 3)
            with c.client() as client:
                held = {a: ks for a, ks in client.processing().items() if ks}
            address = sorted(held)[0]  # a worker that holds a trial at this moment
            victim_pid = c.worker_pids()[address]  # without a nanny: a process started here
            os.kill(victim_pid, signal.SIGKILL)
            stdout, stderr = proc.communicate(timeout=120)
        finally:
            if proc.poll() is None:
                proc.kill()
    assert proc.returncode == 0, stderr
    assert "left, 1 remain; the trials it held run again elsewhere (once)" in stdout
    assert f"trial budget reached; {total} finished trials" in stdout
    snap = read_study(out)
    names = snap.state_names()
    assert snap.n_trials == total and not (names == "interrupted").any()
    complete = set(np.flatnonzero(names == "complete").tolist())
    assert reported_complete(stdout) == complete, "a reported trial went missing"
    assert victim_pid in snap.columns["worker_pid"], "the killed worker had done trials"
    for i in np.flatnonzero(names == "failed"):  # only the fixture's own failures, no losses
        assert (
            "fixture solve fails" in snap.info(int(i))["failure"]
            or "must hold" in snap.info(int(i))["failure"]
        )


@pytest.mark.slow
def test_scheduler_lost_stops_cleanly_and_resume_finishes(cluster, tmp_path):
    total = 24
    cfg = fixture_study(tmp_path, trials=total, delay_s=0.3)
    out = tmp_path / "s.h5"
    with LoopbackCluster(tmp_path, 2) as doomed:
        proc = start_elopt(
            "run", cfg, "--out", out, "--cluster", doomed.address, "--log-every", "0", cwd=tmp_path
        )
        try:
            _wait_stored(proc, out, 3)
            doomed.kill_scheduler()
            t0 = time.monotonic()
            stdout, stderr = proc.communicate(timeout=60)
            stop_s = time.monotonic() - t0
        finally:
            if proc.poll() is None:
                proc.kill()
    assert proc.returncode == 2, stderr
    err = _one_error_line(stderr)
    assert f"lost the connection to the Dask scheduler at {doomed.address}; stopped: " in err
    assert f"Continue with: elopt resume {out} --cluster {doomed.address}" in err
    assert stop_s < 20.0
    snap = read_study(out)  # intact, and every reported trial is in it
    names = snap.state_names()
    complete = set(np.flatnonzero(names == "complete").tolist())
    assert reported_complete(stdout) <= complete
    interrupted = set(np.flatnonzero(names == "interrupted").tolist())
    assert interrupted, "the trials in flight are stored as interrupted"
    assert f"({len(interrupted)} interrupted, re-run on resume)" in err

    proc = run_elopt("resume", out, "--cluster", cluster.address, cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    assert f"trial budget reached; {total} finished trials" in proc.stdout
    snap = read_study(out)
    assert int((snap.state_names() != "interrupted").sum()) == total
    rerun = {snap.info(i).get("rerun_of") for i in range(snap.n_trials)} - {None}
    assert rerun == interrupted

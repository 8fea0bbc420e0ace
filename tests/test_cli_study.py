"""The study verbs as a user runs them: run, resume, front, show — on the real guarded_disk
family (coarse requested accuracy keeps each trial cheap)."""

from __future__ import annotations

import csv
import json
import os
import re
import signal
import time
from pathlib import Path

import h5py
import numpy as np
import pytest
from study_support.cli import reported_complete, run_elopt, start_elopt
from study_support.configs import guarded_disk_study

from elopt.optimizer.cli.main import main
from elopt.optimizer.store import read_study


def _one_error_line(capsys) -> str:
    err = capsys.readouterr().err.strip()
    assert "\n" not in err and "Traceback" not in err, err
    assert err.startswith("elopt: error: "), err
    return err


def _edit(path, old, new):
    text = path.read_text()
    assert old in text
    path.write_text(text.replace(old, new, 1))
    return path


@pytest.mark.parametrize(
    ("old", "new", "message"),
    [
        (
            'outer_radius_mm = "minimize"',
            'outer_size_mm = "minimize"',
            "objectives.outer_size_mm: the family has no metric 'outer_size_mm'",
        ),
        (
            "low = 0.5, high = 2.0",
            "low = 2.0, high = 0.5",
            "search.sensor_radius_mm: low < high must hold",
        ),
        (
            "[budget]",
            '[sampler]\nkind = "annealing"\n[budget]',
            "sampler.kind: 'annealing' is not one of tpe, nsga2",
        ),
        ("trials = 6", "trials = 0", "budget.trials: 0 is outside the allowed range"),
        (
            "max = 5.0e4",
            "maximum = 5.0e4",
            "constraints.peak_surface_field_V_per_m.maximum: unknown key; did you mean 'max'?",
        ),
    ],
)
def test_run_bad_config_is_one_line_and_leaves_no_file(tmp_path, capsys, old, new, message):
    cfg = _edit(guarded_disk_study(tmp_path, trials=6), old, new)
    out = tmp_path / "x.h5"
    assert main(["run", str(cfg), "--out", str(out)]) == 2
    assert message in _one_error_line(capsys)
    assert not out.exists()
    assert not list(tmp_path.glob(".x.h5*"))


def test_run_bad_options_and_existing_output(tmp_path, capsys):
    cfg = guarded_disk_study(tmp_path, trials=6)
    out = tmp_path / "x.h5"
    assert main(["run", str(cfg), "--out", str(out), "--trials", "0"]) == 2
    assert "--trials: 0 is outside the allowed range [1, inf]" in _one_error_line(capsys)
    assert main(["run", str(cfg), "--out", str(out), "--workers", "0"]) == 2
    assert "--workers: 0 is outside the allowed range" in _one_error_line(capsys)
    assert not out.exists()
    out.write_text("my notes")
    assert main(["run", str(cfg), "--out", str(out)]) == 2
    assert (
        "exists and is not an elopt study; choose another --out or pass --overwrite"
        in _one_error_line(capsys)
    )
    assert out.read_text() == "my notes"
    assert main(["run", str(cfg), "--out", str(tmp_path / "no_dir" / "x.h5")]) == 2
    assert "does not exist; create it" in _one_error_line(capsys)


def test_verbs_refuse_a_file_that_is_not_a_study(tmp_path, capsys):
    notes = tmp_path / "notes.h5"
    notes.write_text("hello")
    plain = tmp_path / "plain.h5"
    with h5py.File(plain, "w") as f:
        f["x"] = np.arange(3)
    for verb in (["front"], ["show"], ["resume"]):
        extra = ["0"] if verb == ["show"] else []
        assert main([*verb, str(notes), *extra]) == 2
        assert "not an HDF5 file, so not an elopt study" in _one_error_line(capsys)
        assert main([*verb, str(plain), *extra]) == 2
        assert "so not an elopt study" in _one_error_line(capsys)
    assert main(["front", str(tmp_path / "missing.h5")]) == 2
    assert "no such file" in _one_error_line(capsys)


@pytest.fixture(scope="module")
def finished_study(tmp_path_factory):
    """A small real study, run once as a user would (8 trials, 2 workers)."""
    tmp = tmp_path_factory.mktemp("study")
    cfg = guarded_disk_study(tmp, trials=8)
    out = tmp / "probe.h5"
    proc = run_elopt("run", cfg, "--out", out, cwd=tmp)
    assert proc.returncode == 0, proc.stderr
    assert "trial budget reached; 8 finished trials" in proc.stdout
    assert f"elopt front {out}" in proc.stdout
    return tmp, cfg, out


def test_front_table_scatter_and_exports(finished_study, capsys):
    tmp, _, out = finished_study
    assert main(["front", str(out), "--csv", str(tmp / "front.csv")]) == 0
    text = capsys.readouterr().out
    snap = read_study(out)
    from elopt.optimizer.report.study_view import front_numbers

    front = front_numbers(snap)
    assert len(front) >= 1
    assert f"Pareto front: {len(front)} feasible non-dominated trials" in text
    assert "O Pareto front" in text and "x infeasible" in text
    assert "sensitivity_fF_per_um (max)" in text
    rows = list(csv.DictReader(open(tmp / "front.csv")))
    assert [int(r["trial"]) for r in rows] == front.tolist()
    sens = [float(r["sensitivity_fF_per_um"]) for r in rows]
    assert sens == sorted(sens, reverse=True), "front is sorted by the first objective, best first"
    i = int(rows[0]["trial"])
    col = snap.header.metric_names.index("outer_radius_mm")
    assert float(rows[0]["outer_radius_mm"]) == snap.columns["metrics"][i, col]
    assert (
        main(
            [
                "front",
                str(out),
                "--json",
                str(tmp / "front.json"),
                "--x",
                "sensor_radius_mm",
                "--y",
                "peak_surface_field_V_per_m",
            ]
        )
        == 0
    )
    doc = json.loads((tmp / "front.json").read_text())
    assert [r["trial"] for r in doc["front"]] == front.tolist()
    assert doc["objectives"][0] == {
        "name": "sensitivity_fF_per_um",
        "direction": "maximize",
        "unit": "fF/um",
    }
    assert doc["units"]["sensor_radius_mm"] == "mm"
    assert main(["front", str(out), "--x", "nonsense"]) == 2
    assert "--x nonsense: not in this study; choose from" in capsys.readouterr().err


def test_show_one_trial(finished_study, capsys):
    _, _, out = finished_study
    snap = read_study(out)
    i = int(np.flatnonzero(snap.state_names() == "complete")[0])
    assert main(["show", str(out), str(i)]) == 0
    text = capsys.readouterr().out
    assert f"trial {i} of study probe (guarded_disk)" in text
    for needle in (
        "parameters",
        "metrics",
        "capacitance matrix (fF)",
        "peak surface field",
        "sigma [uC/m^2]",
        "s sensor",
        "g guard",
    ):
        assert needle in text, needle
    cap = read_trial_arrays_fF(out, i)
    assert f"{cap[0, 0]:.5g}" in text
    assert main(["show", str(out), "99"]) == 2
    assert "TRIAL 99: " in capsys.readouterr().err


def read_trial_arrays_fF(path, i):
    from elopt.optimizer.store import read_trial_arrays

    return read_trial_arrays(path, i).capacitance_F * 1e15


def test_resume_refusals(finished_study, capsys):
    tmp, cfg, out = finished_study
    changed = cfg.with_name("changed.toml")
    changed.write_text(
        cfg.read_text().replace("max = 5.0e4", "max = 4.0e4").replace("trials = 8", "trials = 50")
    )
    assert main(["resume", str(out), "--config", str(changed)]) == 2
    err = _one_error_line(capsys)
    assert "differs from the config stored" in err
    assert "constraints.peak_surface_field_V_per_m.max: stored 50000.0, given 40000.0" in err
    assert "budget" not in err.split("differs")[1].split(".")[0]
    assert main(["resume", str(out)]) == 0
    assert "already reached its budget (8 finished trials)" in capsys.readouterr().out
    assert main(["resume", str(out), "--trials", "0"]) == 2
    assert "--trials: 0 is outside" in _one_error_line(capsys)


def test_stop_by_signal_records_in_flight_and_resume_finishes(tmp_path):
    cfg = guarded_disk_study(tmp_path, trials=30)
    out = tmp_path / "s.h5"
    for sig in (signal.SIGTERM, signal.SIGINT):
        verb = ["run", cfg, "--out", out] if sig == signal.SIGTERM else ["resume", out]
        # A session of its own, so SIGINT reaches the whole group as Ctrl-C in a terminal does.
        proc = start_elopt(*verb, "--log-every", "0", cwd=tmp_path, start_new_session=True)
        seen = 0
        while seen < 2:
            line = proc.stdout.readline()
            assert line, proc.stderr.read()
            seen += " stored (" in line
        os.killpg(proc.pid, sig)
        out_text, err = proc.communicate(timeout=60)
        # A run stopped by a signal says so in its exit status: 128 + the signal's number, as
        # shells report a process ended by that signal (common practice, no source).
        assert proc.returncode == 128 + sig, err
        assert f"Continue with: elopt resume {out}" in out_text
        assert f"{sig.name}: stopping" in out_text
    snap = read_study(out)
    names = snap.state_names()
    n_interrupted = int((names == "interrupted").sum())
    assert n_interrupted >= 2  # two stops with up to 2 per worker in flight
    proc = run_elopt("resume", out, cwd=tmp_path, timeout=300)
    assert proc.returncode == 0, proc.stderr
    snap = read_study(out)
    assert int((snap.state_names() != "interrupted").sum()) == 30
    rerun = {snap.info(i).get("rerun_of") for i in range(snap.n_trials)} - {None}
    assert rerun == set(np.flatnonzero(names == "interrupted").tolist())
    # Once re-run, an interrupted trial no longer counts as interrupted.
    front = run_elopt("front", out, cwd=tmp_path)
    assert f"0 interrupted ({len(rerun)} re-run)" in front.stdout, front.stdout
    first = min(rerun)
    shown = run_elopt("show", out, str(first), cwd=tmp_path)
    assert f"trial {first} of study" in shown.stdout
    assert "interrupted, then re-run as trial" in shown.stdout


def test_live_front_and_show_while_running_and_second_writer_refused(tmp_path, capsys):
    """front/show from another process while `elopt run` writes: they work, and the run goes
    on undisturbed to its budget with every reported trial stored."""
    # Long enough that the second writer starts while the run still writes: with 45 the
    # quicker solves of 3 Dec 2026 let the run finish first once, on a loaded machine.
    total = 90
    cfg = guarded_disk_study(tmp_path, trials=total)
    out = tmp_path / "live.h5"
    proc = start_elopt("run", cfg, "--out", out, "--log-every", "0", cwd=tmp_path)
    counts = []
    refused = None
    try:
        while not out.exists() or read_study(out).n_trials < 1:
            assert proc.poll() is None, proc.stderr.read()
            time.sleep(0.05)
        # Started at once and in the background, as soon as the run has stored a trial: the
        # second writer's start-up (imports) must not outlast the run's budget, even when the
        # trials are quick and the machine is busy; nor may it hold up the reads below.
        refused = start_elopt("resume", out, cwd=tmp_path)
        while proc.poll() is None:
            assert main(["front", str(out)]) == 0
            text = capsys.readouterr().out
            n = int(re.search(r"^(\d+) trials: ", text, re.M).group(1))
            # The writer lets go of the file (and its lock) once its last trial is stored.
            assert "this is a live read" in text or n == total
            counts.append(n)
            assert main(["show", str(out), str(n - 1)]) == 0
            assert f"trial {n - 1} of study probe" in capsys.readouterr().out
            time.sleep(0.2)  # a person re-reading, not a busy loop competing for the cores
        stdout, stderr = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == 0, stderr
    _, refused_err = refused.communicate(timeout=120)
    assert refused.returncode == 2
    assert "another elopt process is writing this study" in refused_err
    assert counts == sorted(counts) and len(set(counts)) >= 3, counts
    snap = read_study(out)
    assert snap.n_trials == total
    assert reported_complete(stdout) == set(
        np.flatnonzero(snap.state_names() == "complete").tolist()
    )


def test_resume_refused_when_the_family_changed(tmp_path, capsys):
    """A study whose stored metric list no longer matches the family's is not resumed."""
    import shutil

    path = tmp_path / "old.h5"
    shutil.copy(Path(__file__).parent / "data" / "study_v1.h5", path)
    with h5py.File(path, "r+") as f:
        names = list(f.attrs["metric_names"])
        f.attrs["metric_names"] = [n.replace("outer_radius_mm", "outer_size_mm") for n in names]
    assert main(["resume", str(path), "--trials", "1"]) == 2
    err = _one_error_line(capsys)
    assert "family guarded_disk changed since the study was written: " in err
    assert "; metrics now [" in err
    assert "'outer_size_mm'" in err

"""Front selection, exports and the progress displays (fixture records, then a real run)."""

from __future__ import annotations

import io
import itertools

import numpy as np
from rich.console import Console
from study_support.configs import fixture_study

from elopt.optimizer.config.study_config import load_study_config
from elopt.optimizer.report.progress import PlainProgress, RichProgress, summary_line
from elopt.optimizer.store import StudyWriter, read_study
from elopt.optimizer.study.objectives import pareto_front_mask
from elopt.optimizer.study.search import RunLimits, state_from_snapshot


def _brute_front(values: np.ndarray, directions) -> set[int]:
    """Straight from the definition of Pareto dominance (Deb, Multi-Objective Optimization
    Using Evolutionary Algorithms, 2001, def. 2.4)."""
    sign = np.array([-1 if d == "maximize" else 1 for d in directions])
    c = values * sign
    out = set()
    for i in range(len(c)):
        dominated = any(
            np.all(c[j] <= c[i]) and np.any(c[j] < c[i]) for j in range(len(c)) if j != i
        )
        if not dominated:
            out.add(i)
    return out


def test_pareto_mask_matches_the_definition():
    rng = np.random.default_rng(7)
    for k, directions in itertools.product(
        (2, 3), (("maximize", "minimize"), ("minimize", "minimize"))
    ):
        dirs = (directions * 2)[:k]
        v = np.round(rng.normal(size=(120, k)), 1)  # rounding makes ties
        assert set(np.flatnonzero(pareto_front_mask(v, dirs))) == _brute_front(v, dirs)


def _state(tmp_path, trials=5):
    spec = load_study_config(fixture_study(tmp_path, trials=trials))
    from elopt.optimizer.study.search import study_header

    path = tmp_path / "p.h5"
    with StudyWriter.create(path, study_header(spec)):
        pass
    return state_from_snapshot(spec, read_study(path), RunLimits(trials, None), workers=2)


def test_plain_progress_lines(tmp_path):
    state = _state(tmp_path)
    buf = io.StringIO()
    per_trial = PlainProgress(buf, every_s=0)
    per_trial.started(state)
    state.n_finished, state.n_feasible, state.last_number, state.last_state = 1, 1, 0, "complete"
    state.best = [9.5, 1.2]
    state.best_trial = [0, 0]
    per_trial.trial_stored(state)
    lines = buf.getvalue().splitlines()
    assert lines[0].startswith("elopt: study fixture: 0 trials stored, target 5, 2 workers")
    assert lines[1].startswith("trial 0 stored (complete) | ")
    assert "1/5 trials" in lines[1] and "1 feasible" in lines[1]
    assert "best score_fF 9.5 (max, #0), size_mm 1.2 (min, #0)" in lines[1]
    quiet = io.StringIO()
    periodic = PlainProgress(quiet, every_s=3600)
    periodic.started(state)
    periodic.trial_stored(state)
    periodic.tick(state)
    assert len(quiet.getvalue().splitlines()) == 1  # nothing until the period passes
    periodic.finished(state, "budget")
    assert quiet.getvalue().splitlines()[-1] == summary_line(state)
    state.workers = 1
    one = io.StringIO()
    PlainProgress(one, every_s=0).started(state)
    assert ", 1 worker, sampler " in one.getvalue()


def test_rich_progress_renders_budget_and_best(tmp_path):
    state = _state(tmp_path)
    buf = io.StringIO()
    console = Console(file=buf, record=True, width=100, force_terminal=True)
    progress = RichProgress(console)
    progress.started(state)
    state.n_finished, state.n_feasible, state.n_failed = 3, 2, 1
    state.best, state.best_trial = [8.25, 2.5], [1, 2]
    progress.trial_stored(state)
    progress.finished(state, "budget")
    text = console.export_text()
    assert "study fixture" in text
    assert "3/5" in text and "feasible" in text and "failed 1" in text
    assert "best score_fF" in text and "8.25 (max, trial 1)" in text
    assert "ETA" in text and "elapsed" in text


def test_high_voltage_caution_on_the_front(tmp_path):
    from study_support.records import record_for, small_header

    from elopt.optimizer.report.front_table import render_front

    path = tmp_path / "hv.h5"
    with StudyWriter.create(path, small_header()) as w:
        for i in range(3):
            w.append(record_for(i))  # drive_V = 100 V in these records
    console = Console(file=io.StringIO(), record=True, width=120)
    render_front(console, read_study(path))
    text = " ".join(console.export_text().split())
    assert "Caution: this design is driven at 100 V, above 50 V." in text

    low = tmp_path / "lv.h5"
    with StudyWriter.create(low, small_header()) as w:
        rec = record_for(0)
        rec.params[2] = 10.0
        w.append(rec)
    console = Console(file=io.StringIO(), record=True, width=120)
    render_front(console, read_study(low))
    assert "Caution:" not in console.export_text()

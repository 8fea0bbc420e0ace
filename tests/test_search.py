"""The coordinator on the test-only analytic family: budgets, failures, stop, resume, samplers.

The fixture family has closed-form metrics (see study_support/analytic_family.py), so stored
values can be checked exactly; it is no physical model.
"""

from __future__ import annotations

import threading
import time

import numpy as np
import optuna
import pytest
from optuna.trial import TrialState
from study_support.configs import fixture_study

from elopt.optimizer.config.study_config import load_study_config
from elopt.optimizer.report.study_view import front_numbers
from elopt.optimizer.run.local_pool import LocalProcessPool
from elopt.optimizer.store import StudyWriter, read_study
from elopt.optimizer.study.search import (
    NSGA2_GENERATION_KEY,
    RunLimits,
    build_optuna_study,
    make_sampler,
    run_search,
    study_header,
)


@pytest.fixture(scope="module")
def pool():
    with LocalProcessPool(2) as ex:
        yield ex


def _run(spec, path, pool, limits, **kw):
    writer = (
        StudyWriter.open(path) if path.exists() else StudyWriter.create(path, study_header(spec))
    )
    try:
        return run_search(spec, writer, pool, limits, **kw)
    finally:
        writer.close()


def test_budget_reached_and_every_value_stored(tmp_path, pool):
    spec = load_study_config(fixture_study(tmp_path, trials=30))
    path = tmp_path / "s.h5"
    result = _run(spec, path, pool, RunLimits(30, None))
    assert result.reason == "budget"
    snap = read_study(path)
    assert snap.n_trials == 30
    names = snap.state_names()
    c = snap.columns
    h = snap.header
    w = c["params"][:, h.parameter_names.index("width_mm")]
    g = c["params"][:, h.parameter_names.index("gap_mm")]
    assert np.all(c["params"][:, h.parameter_names.index("drive_V")] == 10.0)
    for i in range(30):
        reason = snap.info(i).get("failure", "")
        if w[i] + g[i] > 9:
            assert names[i] == "failed" and "width_mm + gap_mm <= 9 must hold" in reason
        elif 4.0 < w[i] < 4.2:
            assert names[i] == "failed" and "SolverError: fixture solve fails" in reason
        else:
            assert names[i] == "complete", reason
            score = 10.0 - (w[i] - 3.0) ** 2 - 4.0 * (np.log(g[i]) - np.log(0.5)) ** 2
            assert c["objectives"][i, 0] == pytest.approx(score, rel=1e-12)
            assert c["objectives"][i, 1] == pytest.approx(w[i] + g[i], rel=1e-12)
            peak = 10.0 / (g[i] * 1e-3)
            assert c["peak_surface_field_V_per_m"][i] == pytest.approx(peak, rel=1e-12)
            assert c["feasible"][i] == (peak <= 5e4)
            assert c["constraints"][i, 0] == pytest.approx(peak - 5e4, rel=1e-9, abs=1e-6)
            assert snap.info(i)["conductors"] == ["sensor", "guard"]
    assert result.state.n_finished == 30
    assert result.state.n_failed == int(np.count_nonzero(names == "failed"))


def test_front_agrees_with_optunas_own_feasible_front(tmp_path, pool):
    """optuna's ``best_trials`` (constraint-aware non-dominated set) is the reference."""
    spec = load_study_config(fixture_study(tmp_path, trials=40))
    path = tmp_path / "s.h5"
    _run(spec, path, pool, RunLimits(40, None))
    snap = read_study(path)
    study = build_optuna_study(spec, snap, "tpe")
    reference = sorted(t.number for t in study.best_trials)
    assert reference, "no feasible trial: the comparison means nothing"
    assert sorted(front_numbers(snap).tolist()) == reference


class SpySampler(optuna.samplers.BaseSampler):
    """Delegates to a real sampler and records what the study held at each relative sample."""

    seen: list[tuple[int, int]] = []

    def __init__(self, inner: optuna.samplers.BaseSampler) -> None:
        self.inner = inner

    def infer_relative_search_space(self, study, trial):
        return self.inner.infer_relative_search_space(study, trial)

    def sample_relative(self, study, trial, search_space):
        complete = study.get_trials(deepcopy=False, states=(TrialState.COMPLETE,))
        failed = study.get_trials(deepcopy=False, states=(TrialState.FAIL,))
        SpySampler.seen.append((len(complete), len(failed)))
        return self.inner.sample_relative(study, trial, search_space)

    def sample_independent(self, study, trial, name, dist):
        return self.inner.sample_independent(study, trial, name, dist)

    def before_trial(self, study, trial):
        self.inner.before_trial(study, trial)

    def after_trial(self, study, trial, state, values):
        self.inner.after_trial(study, trial, state, values)


def test_resumed_sampler_is_informed_by_every_stored_trial(tmp_path, pool):
    spec = load_study_config(fixture_study(tmp_path, trials=25))
    path = tmp_path / "s.h5"
    _run(spec, path, pool, RunLimits(25, None))
    snap = read_study(path)
    names = snap.state_names()
    SpySampler.seen = []

    def spy_factory(spec_, kind, seed):
        return SpySampler(make_sampler(spec_, kind, seed))

    _run(spec, path, pool, RunLimits(30, None), sampler_factory=spy_factory)
    first_complete, first_failed = SpySampler.seen[0]
    assert first_complete == int(np.count_nonzero(names == "complete"))
    assert first_failed == int(np.count_nonzero(names != "complete"))
    # And the restored trials carry the stored values, constraints and parameters.
    study = build_optuna_study(spec, snap, "tpe")
    for t in study.get_trials(states=(TrialState.COMPLETE,)):
        np.testing.assert_array_equal(t.values, snap.columns["objectives"][t.number])
        assert t.params["width_mm"] == snap.columns["params"][t.number, 0]
        stored = snap.columns["constraints"][t.number, 0] / 5e4
        assert t.constraints[spec.constraints[0].name] == pytest.approx(stored, rel=1e-12)
    assert read_study(path).n_trials == 30


def test_nsga2_resume_continues_its_generations(tmp_path, pool):
    spec = load_study_config(fixture_study(tmp_path, trials=30, sampler="nsga2"))
    path = tmp_path / "s.h5"
    _run(spec, path, pool, RunLimits(30, None))
    gens_before = read_study(path).columns["sampler_generation"].copy()
    assert gens_before.min() == 0 and gens_before.max() >= 2
    _run(spec, path, pool, RunLimits(46, None))
    gens = read_study(path).columns["sampler_generation"]
    new = gens[len(gens_before) :]
    # A sampler that ignored the restored trials would start again at generation 0.
    assert new.min() >= gens_before.max()
    snap = read_study(path)
    study = build_optuna_study(spec, snap, "nsga2")
    sampler = study.sampler
    assert len(sampler.get_parent_population(study, int(new.max()))) > 0


def test_tpe_hands_over_to_nsga2_seeded_by_all_tpe_trials(tmp_path, pool):
    spec = load_study_config(fixture_study(tmp_path, trials=30, handover=12))
    path = tmp_path / "s.h5"
    result = _run(spec, path, pool, RunLimits(30, None))
    assert result.state.sampler_kind == "nsga2"
    gens = read_study(path).columns["sampler_generation"]
    tpe_rows = np.flatnonzero(gens == -1)
    assert 12 <= len(tpe_rows) <= 12 + 4  # plus those in flight at the hand-over
    assert gens[gens >= 0].min() >= 1, (
        "NSGA-II trials must start after generation 0 (the TPE trials)"
    )
    snap = read_study(path)
    study = build_optuna_study(spec, snap, "nsga2")
    restored = study.get_trials(states=(TrialState.COMPLETE,))
    assert all(NSGA2_GENERATION_KEY in t.system_attrs for t in restored)


class _StopAfter:
    def __init__(self, n: int, stop: threading.Event) -> None:
        self.n, self.stop = n, stop

    def started(self, state):
        pass

    def trial_stored(self, state):
        if state.finished_this_run >= self.n:
            self.stop.set()

    def tick(self, state):
        pass

    def finished(self, state, reason):
        pass


def test_stop_records_in_flight_trials_and_resume_reruns_them(tmp_path, pool):
    spec = load_study_config(fixture_study(tmp_path, trials=40, delay_s=0.3))
    path = tmp_path / "s.h5"
    stop = threading.Event()
    result = _run(spec, path, pool, RunLimits(40, None), progress=_StopAfter(3, stop), stop=stop)
    assert result.reason == "stopped"
    snap = read_study(path)
    names = snap.state_names()
    interrupted = np.flatnonzero(names == "interrupted")
    assert len(interrupted) >= 1
    assert result.state.n_interrupted == len(interrupted)
    for i in interrupted:
        assert "interrupted" in snap.info(int(i))["failure"]
    _run(spec, path, pool, RunLimits(int((names != "interrupted").sum()) + len(interrupted), None))
    after = read_study(path)
    reruns = {after.info(i).get("rerun_of"): i for i in range(snap.n_trials, after.n_trials)}
    for i in interrupted:
        j = reruns[int(i)]
        np.testing.assert_array_equal(after.columns["params"][j], snap.columns["params"][i])


def test_time_budget_stops_starting_trials_in_time(tmp_path, pool):
    spec = load_study_config(fixture_study(tmp_path, trials=1000, delay_s=0.25))
    path = tmp_path / "s.h5"
    t0 = time.time()
    deadline = t0 + 2.0
    result = _run(spec, path, pool, RunLimits(None, deadline, hours=2.0 / 3600))
    assert result.reason == "time"
    c = read_study(path).columns
    assert len(c["number"]) >= 4
    # Trials are started only when a typical trial still fits; allow one trial's spread.
    assert c["finished_unix"].max() <= deadline + 0.25

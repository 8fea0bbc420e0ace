"""The coordinator of a study: optuna ask/tell, evaluations on an executor, the store as truth.

One process owns the study. It asks optuna for parameter sets (about two per worker in
flight), hands them to an :class:`~elopt.optimizer.run.local_pool.Executor`, and for each outcome first
commits the trial to the study file and only then tells optuna and the progress display — so
whatever was reported is on disk. The optuna study lives in memory and is rebuilt from the
stored trials on resume (and when TPE hands over to NSGA-II), so the sampler is always informed
by every stored trial.

Stopping: a set ``stop`` event cancels the running evaluations and stores them as
"interrupted" (their parameters are re-run first on resume). A time budget stops *starting*
trials once a typical trial would no longer finish before the deadline.
"""

from __future__ import annotations

import dataclasses
import math
import threading
import time
import warnings
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any, Protocol

import numpy as np
import optuna
from optuna.distributions import BaseDistribution, FloatDistribution, IntDistribution
from optuna.trial import TrialState

from elopt.optimizer.config import StudySpec
from elopt.optimizer.run.local_pool import Executor
from elopt.optimizer.store import StudyHeader, StudySnapshot, StudyWriter, TrialRecord
from elopt.optimizer.study.objectives import (
    constraint_violations,
    objective_values,
    sampler_constraints,
)
from elopt.optimizer.study.trial_eval import TrialOutcome, TrialTask

NSGA2_GENERATION_KEY = "NSGAIISampler:generation"
SamplerFactory = Callable[[StudySpec, str, int], optuna.samplers.BaseSampler]


def make_sampler(spec: StudySpec, kind: str, seed: int) -> optuna.samplers.BaseSampler:
    """Multivariate multi-objective TPE (constant liar for parallel trials) or NSGA-II."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", optuna.exceptions.ExperimentalWarning)
        if kind == "tpe":
            return optuna.samplers.TPESampler(
                seed=seed,
                multivariate=True,
                constant_liar=True,
                n_startup_trials=spec.sampler.startup_trials,
            )
        return optuna.samplers.NSGAIISampler(
            seed=seed, population_size=spec.sampler.population_size
        )


def distributions(spec: StudySpec) -> dict[str, BaseDistribution]:
    out: dict[str, BaseDistribution] = {}
    for s in spec.search:
        if s.integer:
            out[s.name] = IntDistribution(int(s.low), int(s.high), log=s.log, step=int(s.step or 1))
        else:
            out[s.name] = FloatDistribution(s.low, s.high, log=s.log, step=s.step)
    return out


def build_optuna_study(
    spec: StudySpec,
    snapshot: StudySnapshot,
    kind: str,
    sampler_factory: SamplerFactory = make_sampler,
) -> optuna.Study:
    """An in-memory optuna study holding every stored trial (complete ones with values and
    constraints, failed and interrupted ones as FAIL). Trials from before an NSGA-II phase join
    NSGA-II's first generation, so its first parents are chosen from all of them."""
    n = snapshot.n_trials
    # A fresh stream per session: a resumed study must not replay the first session's draws.
    sampler = sampler_factory(spec, kind, spec.seed + n)
    study = optuna.create_study(directions=[o.direction for o in spec.objectives], sampler=sampler)
    dists = distributions(spec)
    names = list(snapshot.header.parameter_names)
    cols = snapshot.columns
    states = snapshot.state_names()
    trials = []
    for i in range(n):
        params = {
            s.name: _param_value(cols["params"][i, names.index(s.name)], s.integer)
            for s in spec.search
        }
        if states[i] == "complete":
            gen = int(cols["sampler_generation"][i])
            trials.append(
                optuna.trial.create_trial(
                    params=params,
                    distributions=dists,
                    values=[float(v) for v in cols["objectives"][i]],
                    constraints=sampler_constraints(spec, cols["constraints"][i]),
                    system_attrs={NSGA2_GENERATION_KEY: max(gen, 0)},
                )
            )
        else:
            trials.append(
                optuna.trial.create_trial(params=params, distributions=dists, state=TrialState.FAIL)
            )
    study.add_trials(trials)
    return study


def _param_value(v: float, integer: bool) -> float | int:
    return int(round(v)) if integer else float(v)


@dataclass(frozen=True)
class RunLimits:
    """``target_trials``: stop once the file holds this many finished (complete or failed)
    trials; ``deadline_unix``: start no trial that would end after it."""

    target_trials: int | None
    deadline_unix: float | None
    hours: float | None = None


@dataclass
class RunState:
    """Live figures of a run, read by the progress display (cheap to keep current)."""

    spec: StudySpec
    limits: RunLimits
    workers: int
    n_stored: int = 0
    n_finished: int = 0
    n_finished_at_start: int = 0
    n_feasible: int = 0
    n_failed: int = 0
    n_interrupted: int = 0
    in_flight: int = 0
    best: list[float | None] = field(default_factory=list)
    best_trial: list[int] = field(default_factory=list)
    sampler_kind: str = "tpe"
    started_unix: float = field(default_factory=time.time)
    solve_s_total: float = 0.0
    trial_wall_s: list[float] = field(default_factory=list)
    last_number: int = -1
    last_state: str = ""
    ask_s_total: float = 0.0
    tell_s_total: float = 0.0
    store_s_total: float = 0.0

    @property
    def finished_this_run(self) -> int:
        return self.n_finished - self.n_finished_at_start

    def elapsed_s(self) -> float:
        return time.time() - self.started_unix

    def eta_s(self) -> float | None:
        """Seconds to the end of the budget, from this run's pace (None if unknown)."""
        candidates = []
        if self.limits.deadline_unix is not None:
            candidates.append(max(0.0, self.limits.deadline_unix - time.time()))
        done = self.finished_this_run
        if self.limits.target_trials is not None and done > 0:
            left = max(0, self.limits.target_trials - self.n_finished)
            candidates.append(left * self.elapsed_s() / done)
        return min(candidates) if candidates else None

    def note(self, number: int, record: TrialRecord) -> None:
        self.n_stored += 1
        self.last_number = number
        self.last_state = record.state
        if record.state == "interrupted":
            self.n_interrupted += 1
            return
        if record.info.get("rerun_of") is not None:
            self.n_interrupted -= 1
        self.n_finished += 1
        if record.state == "failed":
            self.n_failed += 1
        if math.isfinite(record.solve_s):
            self.solve_s_total += record.solve_s
        if math.isfinite(record.finished_unix - record.started_unix):
            self.trial_wall_s.append(record.finished_unix - record.started_unix)
        if record.state == "complete" and record.feasible:
            self.n_feasible += 1
            self._update_best(number, record.objectives)

    def _update_best(self, number: int, values: np.ndarray) -> None:
        for k, (o, v) in enumerate(zip(self.spec.objectives, values, strict=True)):
            b = self.best[k]
            if b is None or (v > b if o.direction == "maximize" else v < b):
                self.best[k] = float(v)
                self.best_trial[k] = number

    def typical_trial_s(self) -> float:
        """A pessimistic trial wall time (90th percentile of the last 50), 0 before any."""
        if not self.trial_wall_s:
            return 0.0
        return float(np.percentile(self.trial_wall_s[-50:], 90))


class Progress(Protocol):
    def started(self, state: RunState) -> None: ...
    def trial_stored(self, state: RunState) -> None: ...
    def tick(self, state: RunState) -> None: ...
    def finished(self, state: RunState, reason: str) -> None: ...


class _Silent:
    def started(self, state: RunState) -> None:
        pass

    def trial_stored(self, state: RunState) -> None:
        pass

    def tick(self, state: RunState) -> None:
        pass

    def finished(self, state: RunState, reason: str) -> None:
        pass


@dataclass
class _Pending:
    trial: optuna.trial.Trial
    study: optuna.Study
    searched: dict[str, Any]
    generation: int
    rerun_of: int | None


@dataclass(frozen=True)
class RunResult:
    reason: str  # "budget" | "time" | "stopped"
    state: RunState


def state_from_snapshot(
    spec: StudySpec, snap: StudySnapshot, limits: RunLimits, workers: int
) -> RunState:
    state = RunState(spec=spec, limits=limits, workers=workers)
    state.best = [None] * len(spec.objectives)
    state.best_trial = [-1] * len(spec.objectives)
    names = snap.state_names()
    c = snap.columns
    state.n_stored = snap.n_trials
    state.n_finished = int(np.count_nonzero(names != "interrupted"))
    state.n_finished_at_start = state.n_finished
    state.n_failed = int(np.count_nonzero(names == "failed"))
    state.n_interrupted = len(interrupted_to_rerun(snap))  # a re-run one no longer counts
    ok = (names == "complete") & (c["feasible"] == 1)
    state.n_feasible = int(np.count_nonzero(ok))
    for i in np.flatnonzero(ok):
        state._update_best(int(i), c["objectives"][i])
    state.sampler_kind = spec.sampler.kind_at(snap.n_trials)
    return state


def interrupted_to_rerun(snap: StudySnapshot) -> list[int]:
    """Interrupted trials not yet re-run (a re-run stores ``rerun_of`` in its info)."""
    names = snap.state_names()
    done = {snap.info(i).get("rerun_of") for i in range(snap.n_trials) if names[i] != "interrupted"}
    return [i for i in range(snap.n_trials) if names[i] == "interrupted" and i not in done]


def _enqueue_reruns(spec: StudySpec, study: optuna.Study, snap: StudySnapshot, skip: set) -> None:
    """Queue the stored interrupted trials (not in ``skip``) to be asked first, same params."""
    names = list(snap.header.parameter_names)
    for number in interrupted_to_rerun(snap):
        if number in skip:
            continue
        searched = {
            s.name: _param_value(snap.columns["params"][number, names.index(s.name)], s.integer)
            for s in spec.search
        }
        study.enqueue_trial(searched, user_attrs={"rerun_of": number})


def run_search(
    spec: StudySpec,
    writer: StudyWriter,
    executor: Executor,
    limits: RunLimits,
    *,
    progress: Progress | None = None,
    stop: threading.Event | None = None,
    sampler_factory: SamplerFactory = make_sampler,
    poll_s: float = 0.2,
) -> RunResult:
    """Run trials until the budget, the deadline or ``stop``; every outcome is committed first."""
    progress = progress or _Silent()
    stop = stop or threading.Event()
    snap = writer.snapshot()
    state = state_from_snapshot(spec, snap, limits, executor.n_workers)
    session = writer.begin_session(
        target_trials=limits.target_trials, hours=limits.hours, workers=executor.n_workers
    )
    study = build_optuna_study(spec, snap, state.sampler_kind, sampler_factory)
    _enqueue_reruns(spec, study, snap, skip=set())
    dists = distributions(spec)
    pending: dict[int, _Pending] = {}
    next_key = 0
    reason = "budget"
    progress.started(state)

    def can_start() -> bool:
        if stop.is_set() or len(pending) >= 2 * executor.n_workers:
            return False
        if (
            limits.target_trials is not None
            and state.n_finished + len(pending) >= limits.target_trials
        ):
            return False
        if limits.deadline_unix is not None:
            rounds = 1 + len(pending) // executor.n_workers
            if time.time() + rounds * state.typical_trial_s() > limits.deadline_unix:
                return False
        return True

    while True:
        while can_start():
            t_ask = time.perf_counter()
            wanted = spec.sampler.kind_at(state.n_stored)
            if wanted != state.sampler_kind:
                fresh = writer.snapshot()
                study = build_optuna_study(spec, fresh, wanted, sampler_factory)
                _enqueue_reruns(spec, study, fresh, skip={p.rerun_of for p in pending.values()})
                state.sampler_kind = wanted
            trial = study.ask(dists)
            state.ask_s_total += time.perf_counter() - t_ask
            attrs = trial.storage.get_trial_system_attrs(trial._trial_id)
            pend = _Pending(
                trial=trial,
                study=study,
                searched=dict(trial.params),
                generation=int(attrs.get(NSGA2_GENERATION_KEY, -1)),
                rerun_of=trial.user_attrs.get("rerun_of"),
            )
            task = trial_task(spec, next_key, pend.searched)
            pending[next_key] = pend
            next_key += 1
            executor.submit(task)
        state.in_flight = len(pending)
        if not pending:
            if stop.is_set():
                reason = "stopped"
            elif limits.target_trials is not None and state.n_finished >= limits.target_trials:
                reason = "budget"
            else:
                reason = "time"
            break
        for outcome in executor.poll(poll_s):
            pend = pending.pop(outcome.key, None)
            if pend is None:
                continue  # a duplicate from a distributed executor: the first one counted
            record = _record(spec, outcome, pend, session)
            t_store = time.perf_counter()
            number = writer.append(record)
            t_tell = time.perf_counter()
            _tell(spec, study, pend, record)
            state.store_s_total += t_tell - t_store
            state.tell_s_total += time.perf_counter() - t_tell
            state.note(number, record)
            state.in_flight = len(pending)
            progress.trial_stored(state)
        progress.tick(state)
        if stop.is_set() and pending:
            for task in executor.cancel_all():
                pend = pending.pop(task.key)
                record = _interrupted_record(spec, pend, session)
                number = writer.append(record)
                _tell(spec, study, pend, record)
                state.note(number, record)
            state.in_flight = 0
    progress.finished(state, reason)
    return RunResult(reason=reason, state=state)


def _params_row(spec: StudySpec, searched: dict[str, Any]) -> np.ndarray:
    values = spec.params_of(searched)
    row = []
    for name in spec.parameter_names:
        v = values.get(name, getattr(spec.family.Params, name, math.nan))
        row.append(float(v) if isinstance(v, (int, float)) else math.nan)
    return np.array(row, dtype=float)


def _record(spec: StudySpec, outcome: TrialOutcome, pend: _Pending, session: int) -> TrialRecord:
    n_metrics = len(spec.metrics)
    rec = TrialRecord(
        state="complete" if outcome.ok else "failed",
        params=_params_row(spec, pend.searched),
        metrics=np.full(n_metrics, np.nan),
        objectives=np.full(len(spec.objectives), np.nan),
        constraints=np.full(len(spec.constraints), np.nan),
        session=session,
        started_unix=outcome.started_unix,
        finished_unix=outcome.finished_unix,
        solve_s=outcome.solve_s,
        worker=outcome.worker,
        worker_pid=outcome.worker_pid,
        sampler_generation=pend.generation,
    )
    info: dict[str, Any] = {}
    if pend.rerun_of is not None:
        info["rerun_of"] = pend.rerun_of
    if not outcome.ok:
        info["failure"] = outcome.failure or "unknown failure"
        rec.info = info
        return rec
    # Objectives and constraints judge the toleranced value where the study asks for one.
    judged = {**outcome.metrics, **outcome.toleranced}
    for name in dict.fromkeys(
        [o.metric for o in spec.objectives] + [c.metric for c in spec.constraints]
    ):
        value = judged.get(name, math.nan)
        if not math.isfinite(value):
            rec.state = "failed"
            info["failure"] = (
                f"metric {name} is not finite ({value}); it is an objective or constraint"
            )
            rec.info = info
            return rec
    rec.metrics = np.array([outcome.metrics.get(m.name, np.nan) for m in spec.metrics])
    rec.objectives = objective_values(spec, judged)
    rec.constraints = constraint_violations(spec, judged)
    rec.feasible = bool(np.all(rec.constraints <= 0))
    rec.design = outcome.design
    if outcome.toleranced:
        info["tolerance"] = {"values": outcome.toleranced, **outcome.tolerance_info}
    rec.info = info
    return rec


def _interrupted_record(spec: StudySpec, pend: _Pending, session: int) -> TrialRecord:
    info: dict[str, Any] = {"failure": "interrupted before it finished; re-run on resume"}
    if pend.rerun_of is not None:
        info["rerun_of"] = pend.rerun_of
    return TrialRecord(
        state="interrupted",
        params=_params_row(spec, pend.searched),
        metrics=np.full(len(spec.metrics), np.nan),
        objectives=np.full(len(spec.objectives), np.nan),
        constraints=np.full(len(spec.constraints), np.nan),
        session=session,
        sampler_generation=pend.generation,
        info=info,
    )


def _tell(spec: StudySpec, study: optuna.Study, pend: _Pending, record: TrialRecord) -> None:
    complete = record.state == "complete"
    if pend.study is study:
        if complete:
            for name, v in sampler_constraints(spec, record.constraints).items():
                pend.trial.set_constraint(name, v)
            study.tell(pend.trial, [float(v) for v in record.objectives])
        else:
            study.tell(pend.trial, state=TrialState.FAIL)
        return
    # Asked before a sampler hand-over: the old study is gone, so add the result to the new.
    pend.study.tell(pend.trial, state=TrialState.FAIL)
    dists = distributions(spec)
    if complete:
        frozen = optuna.trial.create_trial(
            params=pend.searched,
            distributions=dists,
            values=[float(v) for v in record.objectives],
            constraints=sampler_constraints(spec, record.constraints),
            system_attrs={NSGA2_GENERATION_KEY: 0},
        )
    else:
        frozen = optuna.trial.create_trial(
            params=pend.searched, distributions=dists, state=TrialState.FAIL
        )
    study.add_trial(frozen)


def trial_task(spec: StudySpec, key: int, searched: dict[str, Any]) -> TrialTask:
    """The task that evaluates the design ``searched`` (plus the fixed parameters) with the
    study's accuracy, medium and evaluation options."""
    return TrialTask(
        key=key,
        family_ref=spec.family_ref,
        params=spec.params_of(searched),
        metric_names=tuple(m.name for m in spec.metrics),
        rel_accuracy=spec.rel_accuracy,
        eps_r=spec.eps_r,
        options=dataclasses.asdict(spec.options),
        peak_rel_accuracy=spec.peak_rel_accuracy,
        tolerance=spec.tolerance,
    )


def study_header(spec: StudySpec) -> StudyHeader:
    """The self-description a new study file gets, read from the spec and the family."""
    ranges = {s.name: s for s in spec.search}
    names = spec.parameter_names
    units = {p.name: p.unit for p in spec.family.parameters()}
    nan = math.nan
    return StudyHeader(
        study_name=spec.name,
        family=spec.family_ref,
        config_toml=spec.config_text,
        parameter_names=names,
        parameter_units=tuple(units[n] for n in names),
        parameter_searched=tuple(n in ranges for n in names),
        search_low=tuple(ranges[n].low if n in ranges else nan for n in names),
        search_high=tuple(ranges[n].high if n in ranges else nan for n in names),
        search_log=tuple(bool(ranges[n].log) if n in ranges else False for n in names),
        search_step=tuple(
            float(ranges[n].step) if n in ranges and ranges[n].step else nan for n in names
        ),
        metric_names=tuple(m.name for m in spec.metrics),
        metric_units=tuple(m.unit for m in spec.metrics),
        objective_names=tuple(o.metric for o in spec.objectives),
        objective_directions=tuple(o.direction for o in spec.objectives),
        objective_units=tuple(o.unit for o in spec.objectives),
        constraint_names=tuple(c.name for c in spec.constraints),
        constraint_metrics=tuple(c.metric for c in spec.constraints),
        constraint_kinds=tuple(c.kind for c in spec.constraints),
        constraint_limits=tuple(c.limit for c in spec.constraints),
        constraint_units=tuple(c.unit for c in spec.constraints),
    )

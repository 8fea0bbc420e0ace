"""One trial's evaluation, as a worker runs it: a task in, plain numbers and arrays out.

Stateless by design: a :class:`TrialTask` carries everything (family reference, every
parameter value, solver settings), and a :class:`TrialOutcome` carries only picklable plain
data (floats, lists, numpy arrays) — never a solution object — so any executor (a local
process, a Dask worker on another machine) can run it. A design that breaks the family's rules
or a solve that fails becomes an outcome with ``ok = False`` and the reason; nothing raises.
"""

from __future__ import annotations

import math
import os
import time
import traceback
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from elopt.physics.electrodes.base import ElectrodeFamily
from elopt.physics.errors import ElOptError

_FAMILIES: dict[str, ElectrodeFamily] = {}


@dataclass(frozen=True)
class TrialTask:
    """``key`` is the coordinator's handle; ``params`` holds every parameter (unit-suffixed
    names); ``metric_names`` are the metrics the outcome must carry (values may be NaN)."""

    key: int
    family_ref: str
    params: dict[str, Any]
    metric_names: tuple[str, ...]
    rel_accuracy: float
    eps_r: float


@dataclass
class TrialOutcome:
    """Result of one task. Arrays: ``capacitance_F`` (n, n); ``profile`` columns (S,)."""

    key: int
    ok: bool
    failure: str | None = None
    metrics: dict[str, float] = field(default_factory=dict)
    conductor_names: list[str] = field(default_factory=list)
    capacitance_F: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)))
    profile: dict[str, np.ndarray] | None = None
    peak_field_V_per_m: float = math.nan
    peak_conductor: int = -1
    peak_r_m: float = math.nan
    peak_z_m: float = math.nan
    peak_singular: bool = False
    rel_error_estimate: float = math.nan
    accuracy_met: bool = False
    solve_s: float = math.nan
    started_unix: float = math.nan
    finished_unix: float = math.nan
    worker: int = -1
    worker_pid: int = -1
    extra: dict[str, Any] = field(default_factory=dict)


def evaluate_task(task: TrialTask) -> TrialOutcome:
    """Run one trial; never raises (failures come back with their reason)."""
    started = time.time()
    out = TrialOutcome(key=task.key, ok=False, started_unix=started, worker_pid=os.getpid())
    try:
        family = _family(task.family_ref)
        params = family.Params(**task.params)
        family.validate(params)
        t0 = time.perf_counter()
        evaluation = family.evaluate(params, rel_accuracy=task.rel_accuracy, eps_r=task.eps_r)
        out.solve_s = time.perf_counter() - t0
        _fill(out, evaluation, task.metric_names)
    except ElOptError as exc:
        out.failure = f"{type(exc).__name__}: {exc}"
    except Exception as exc:  # a bug in a family must not end an overnight study
        tb = traceback.extract_tb(exc.__traceback__)[-1]
        out.failure = f"unexpected {type(exc).__name__}: {exc} (at {tb.filename}:{tb.lineno})"
    out.finished_unix = time.time()
    return out


def _family(ref: str) -> ElectrodeFamily:
    if ref not in _FAMILIES:
        from elopt.optimizer.config.study_config import resolve_family

        _FAMILIES[ref] = resolve_family(ref)
    return _FAMILIES[ref]


def _fill(out: TrialOutcome, evaluation: Any, metric_names: tuple[str, ...]) -> None:
    sol = evaluation.solution
    names = list(sol.layout.names)
    peak = sol.peak_field
    metrics = {k: float(v) for k, v in evaluation.metrics.items()}
    metrics.setdefault("peak_surface_field_V_per_m", float(peak.field_V_per_m))
    for name in metric_names:
        if name not in metrics:
            out.failure = f"the family returned no metric '{name}'"
            return
    columns: dict[str, list[np.ndarray]] = {
        k: [] for k in ("conductor", "arc_length_m", "r_m", "z_m", "sigma_C_per_m2")
    }
    for i, name in enumerate(names):
        s = sol.surface_samples(name)
        pts = np.asarray(s.points_m, dtype=float)
        k = len(pts)
        arc = np.zeros(k) if s.arc_length_m is None else s.arc_length_m
        columns["conductor"].append(np.full(k, i, dtype=np.int16))
        columns["arc_length_m"].append(np.asarray(arc, dtype=float))
        columns["r_m"].append(pts[:, 0])
        columns["z_m"].append(pts[:, -1])
        columns["sigma_C_per_m2"].append(np.asarray(s.sigma_C_per_m2, dtype=float))
    out.profile = {k: np.concatenate(v) if v else np.zeros(0) for k, v in columns.items()}
    out.metrics = metrics
    out.conductor_names = names
    out.capacitance_F = np.asarray(sol.capacitance_matrix_F, dtype=float)
    out.peak_field_V_per_m = float(peak.field_V_per_m)
    out.peak_conductor = names.index(peak.conductor) if peak.conductor in names else -1
    loc = tuple(peak.location_m)
    out.peak_r_m = float(loc[0])
    out.peak_z_m = float(loc[-1])
    out.peak_singular = bool(peak.singular)
    out.rel_error_estimate = float(sol.rel_error_estimate)
    out.accuracy_met = bool(sol.accuracy_met)
    out.extra = {
        k: v for k, v in dict(evaluation.extra).items() if isinstance(v, (str, int, float, bool))
    }
    out.ok = True

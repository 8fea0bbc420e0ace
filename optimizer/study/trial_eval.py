"""One trial's evaluation, as a worker runs it: a task in, plain numbers and arrays out.

Stateless by design: a :class:`TrialTask` carries everything (family reference, every
parameter value, solver settings, medium and evaluation options), and a :class:`TrialOutcome`
carries only picklable plain data (floats and the design record, numpy arrays inside) — never
a solution object — so any executor (a local process, a Dask worker on another machine) can
run it. The design is evaluated by the same
pipeline as ``elopt solve`` (:func:`elopt.physics.electrodes.pipeline.evaluate_design`). A design that breaks the family's rules
or a solve that fails becomes an outcome with ``ok = False`` and the reason; nothing raises.
"""

from __future__ import annotations

import math
import os
import time
import traceback
from dataclasses import dataclass, field
from typing import Any

from elopt.optimizer.record import DesignRecord, design_record
from elopt.optimizer.study.tolerances import ToleranceSpec, evaluate_toleranced
from elopt.physics.electrodes.base import ElectrodeFamily
from elopt.physics.electrodes.pipeline import evaluate_design
from elopt.physics.errors import ElOptError

_FAMILIES: dict[str, ElectrodeFamily] = {}


@dataclass(frozen=True)
class TrialTask:
    """``key`` is the coordinator's handle; ``params`` holds every parameter (unit-suffixed
    names); ``metric_names`` are the metrics the outcome must carry (values may be NaN);
    ``options`` the family's evaluation options by name (missing ones take their defaults);
    ``peak_rel_accuracy`` a separate accuracy request on the peak surface field."""

    key: int
    family_ref: str
    params: dict[str, Any]
    metric_names: tuple[str, ...]
    rel_accuracy: float
    eps_r: float
    options: dict[str, Any] = field(default_factory=dict)
    peak_rel_accuracy: float | None = None
    tolerance: ToleranceSpec | None = None


@dataclass
class TrialOutcome:
    """Result of one task: the study's metrics by name and, when it solved, the design record
    (:class:`~elopt.optimizer.record.DesignRecord`: capacitance, peak field, surface samples);
    ``toleranced`` the toleranced values of the treated metrics, ``tolerance_info`` how."""

    key: int
    ok: bool
    failure: str | None = None
    metrics: dict[str, float] = field(default_factory=dict)
    design: DesignRecord | None = None
    solve_s: float = math.nan
    started_unix: float = math.nan
    finished_unix: float = math.nan
    worker: int = -1
    worker_pid: int = -1
    toleranced: dict[str, float] = field(default_factory=dict)
    tolerance_info: dict[str, Any] = field(default_factory=dict)


def evaluate_task(task: TrialTask) -> TrialOutcome:
    """Run one trial; never raises (failures come back with their reason)."""
    started = time.time()
    out = TrialOutcome(key=task.key, ok=False, started_unix=started, worker_pid=os.getpid())
    try:
        family = _family(task.family_ref)
        params = family.Params(**task.params)
        t0 = time.perf_counter()
        evaluation = _evaluate(family, params, task)
        _fill(out, family, params, evaluation, task)
        if out.ok and task.tolerance is not None:
            _tolerance(out, task, family)
        out.solve_s = time.perf_counter() - t0
    except ElOptError as exc:
        out.ok = False  # also when the nominal design solved but a toleranced one did not
        out.failure = f"{type(exc).__name__}: {exc}"
    except Exception as exc:  # a bug in a family must not end an overnight study
        out.ok = False
        tb = traceback.extract_tb(exc.__traceback__)[-1]
        out.failure = f"unexpected {type(exc).__name__}: {exc} (at {tb.filename}:{tb.lineno})"
    out.finished_unix = time.time()
    return out


def _evaluate(family: ElectrodeFamily, params: Any, task: TrialTask) -> Any:
    """The pipeline with the task's accuracy, medium and evaluation options."""
    return evaluate_design(
        family,
        params,
        rel_accuracy=task.rel_accuracy,
        peak_rel_accuracy=task.peak_rel_accuracy,
        eps_r=task.eps_r,
        options=family.Options(**task.options),
    )


def _tolerance(out: TrialOutcome, task: TrialTask, family: ElectrodeFamily) -> None:
    """Toleranced values of the treated metrics; every deviation runs the same pipeline."""

    def evaluate(values: dict[str, float]) -> dict[str, float]:
        try:
            evaluation = _evaluate(family, family.Params(**values), task)
        except ElOptError as exc:
            moved = {k: v for k, v in values.items() if v != task.params.get(k)}
            shown = ", ".join(f"{k} = {v:.6g}" for k, v in moved.items())
            raise type(exc)(f"within tolerance ({shown}): {exc}") from None
        return {k: float(v) for k, v in evaluation.metrics.items()}

    result = evaluate_toleranced(
        task.tolerance, task.params, evaluate, nominal=out.metrics, rel_floor=task.rel_accuracy
    )
    out.toleranced = dict(result.value)
    out.tolerance_info = {
        "method": result.method,
        "reason": result.reason,
        "evaluations": result.evaluations,
        "seconds": result.seconds,
        "driver": dict(result.driver),
        "error": {k: (v if math.isfinite(v) else None) for k, v in result.error.items()},
    }


def _family(ref: str) -> ElectrodeFamily:
    if ref not in _FAMILIES:
        from elopt.optimizer.config import resolve_family

        _FAMILIES[ref] = resolve_family(ref)
    return _FAMILIES[ref]


def _fill(
    out: TrialOutcome, family: ElectrodeFamily, params: Any, evaluation: Any, task: TrialTask
) -> None:
    metrics = {k: float(v) for k, v in evaluation.metrics.items()}
    for name in task.metric_names:
        if name not in metrics:
            out.failure = f"the family returned no metric '{name}'"
            return
    out.design = design_record(family, params, evaluation, family_name=task.family_ref)
    out.metrics = metrics
    out.ok = True

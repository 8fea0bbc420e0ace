"""Studies: the search (optuna ask/tell, budgets, stops), one trial's evaluation, the
objectives, constraints and Pareto front, and values taken across manufacturing tolerances.

Import from here; the modules behind it (``search``, ``trial_eval``, ``objectives``,
``tolerances``) are implementation. The search names load on first use, so a worker process that only evaluates
trials never imports optuna.
"""

from __future__ import annotations

import importlib
from typing import Any

from elopt.optimizer.study.objectives import (
    constraint_violations,
    objective_values,
    pareto_front_mask,
    sampler_constraints,
)
from elopt.optimizer.study.tolerances import (
    Tolerance,
    TolerancedValues,
    ToleranceSpec,
    Treatment,
    evaluate_toleranced,
)
from elopt.optimizer.study.trial_eval import TrialOutcome, TrialTask, evaluate_task

_SEARCH_NAMES = (
    "Progress",
    "RunLimits",
    "RunResult",
    "RunState",
    "build_optuna_study",
    "distributions",
    "interrupted_to_rerun",
    "make_sampler",
    "run_search",
    "state_from_snapshot",
    "study_header",
    "trial_task",
)

__all__ = [
    "Tolerance",
    "ToleranceSpec",
    "TolerancedValues",
    "Treatment",
    "TrialOutcome",
    "TrialTask",
    "constraint_violations",
    "evaluate_task",
    "evaluate_toleranced",
    "objective_values",
    "pareto_front_mask",
    "sampler_constraints",
    *_SEARCH_NAMES,
]


def __getattr__(name: str) -> Any:
    if name in _SEARCH_NAMES:
        return getattr(importlib.import_module("elopt.optimizer.study.search"), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")

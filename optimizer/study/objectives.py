"""Objective values, constraint violations and the feasible Pareto front of a study.

A study's metrics are its family's metric catalogue
(:meth:`~elopt.physics.electrodes.base.ElectrodeFamily.metric_catalog`), which always holds
the peak surface field the solve yields, so every family gets the standard constraint
``peak_surface_field_V_per_m <= limit`` without declaring it. A field limit is a design aid,
not a safety rating.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    from elopt.optimizer.config.study_config import StudySpec


def objective_values(spec: StudySpec, metrics: dict[str, float]) -> np.ndarray:
    """(K,) objective values in the metric units, config order."""
    return np.array([metrics[o.metric] for o in spec.objectives], dtype=float)


def constraint_violations(spec: StudySpec, metrics: dict[str, float]) -> np.ndarray:
    """(L,) violations in the metric units; <= 0 is satisfied."""
    return np.array([c.violation(metrics[c.metric]) for c in spec.constraints], dtype=float)


def sampler_constraints(spec: StudySpec, violations: np.ndarray) -> dict[str, float]:
    """Violations scaled by |limit| (so unlike units weigh alike in NSGA-II's ranking)."""
    out = {}
    for c, v in zip(spec.constraints, violations, strict=True):
        scale = abs(c.limit) if c.limit != 0 else 1.0
        out[c.name] = float(v) / scale
    return out


def pareto_front_mask(values: np.ndarray, directions: Sequence[str]) -> np.ndarray:
    """Non-dominated rows of ``values`` (N, K); ``directions`` "maximize"/"minimize" per column.

    Row a dominates b when a is no worse in every objective and better in one. Returns (N,)
    bool. O(N^2 K) memory-blocked, fine for the tens of thousands of trials a study holds.
    """
    values = np.asarray(values, dtype=float)
    n = len(values)
    if n == 0:
        return np.zeros(0, dtype=bool)
    sign = np.array([-1.0 if d == "maximize" else 1.0 for d in directions])
    cost = values * sign  # minimise every column
    dominated = np.zeros(n, dtype=bool)
    block = max(1, 4_000_000 // max(n, 1))
    for start in range(0, n, block):
        b = cost[start : start + block]
        no_worse = np.all(cost[None, :, :] <= b[:, None, :], axis=2)
        better = np.any(cost[None, :, :] < b[:, None, :], axis=2)
        dominated[start : start + block] = np.any(no_worse & better, axis=1)
    return ~dominated

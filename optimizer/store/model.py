"""In-memory forms of what a study file holds: one trial going in, the committed trials
coming out, and one trial's arrays."""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from elopt.optimizer.record import DesignRecord, SurfaceSamples
from elopt.optimizer.store.layout import STATES, StudyHeader


@dataclass
class TrialRecord:
    """One finished (or interrupted) trial as it goes into the file; SI units.

    ``params`` (P,), ``metrics`` (M,), ``objectives`` (K,), ``constraints`` (L,) follow the
    header's name lists (NaN where a trial has no value; a metric that is not finite is stored
    as NaN, "undefined"). ``design`` is the solved design (None for failed and interrupted
    trials); ``info`` is a small JSON-able dict (failure reason, rerun_of).
    """

    state: str
    params: np.ndarray
    metrics: np.ndarray
    objectives: np.ndarray
    constraints: np.ndarray
    feasible: bool = False
    session: int = -1
    started_unix: float = float("nan")
    finished_unix: float = float("nan")
    solve_s: float = float("nan")
    worker: int = -1
    worker_pid: int = -1
    sampler_generation: int = -1
    design: DesignRecord | None = None
    info: dict[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class StudySnapshot:
    """The committed trials of a study read into memory: ``columns[name]`` is (N,) or (N, X),
    named as in format_version 2 whatever version the file has."""

    path: Path
    header: StudyHeader
    columns: dict[str, np.ndarray]
    sessions: dict[str, np.ndarray]
    texts: tuple[str, ...]
    format_version: int = 2

    @property
    def n_trials(self) -> int:
        return len(self.columns["number"])

    def state_names(self) -> np.ndarray:
        return np.asarray(STATES, dtype=object)[self.columns["state"]]

    def info(self, number: int) -> dict[str, Any]:
        text = self.texts[number]
        return json.loads(text) if text else {}

    def conductor_names(self, number: int) -> list[str]:
        """The trial's conductor names (layout order); c0, c1 ... when none were stored."""
        names = self.info(number).get("conductors")
        n = int(self.columns["n_conductors"][number])
        return list(names) if names and len(names) == n else [f"c{i}" for i in range(n)]


@dataclass(frozen=True)
class TrialArrays:
    """Per-trial arrays: capacitance (n, n) F and the surface samples, one per conductor."""

    capacitance_F: np.ndarray
    surface: tuple[SurfaceSamples, ...]

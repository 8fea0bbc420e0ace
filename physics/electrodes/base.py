"""Contract of an electrode family: parameters in, a layout and named metrics out.

A family module defines a frozen parameter dataclass whose field names carry units
(``sensor_radius_mm``, ``drive_V``), a ``validate`` that raises :class:`ElectrodeError` naming
the parameters, values and rule it breaks, a ``build`` that returns a :class:`Layout` in SI
units, and an ``evaluate`` that solves and returns the family's metrics. The metric registry
(:class:`MetricSpec` tuple) is the one source of truth for metric names, units and the sense
in which a designer usually wants them; config checks, the study file and the terminal tables
read it from there.
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from dataclasses import dataclass, fields
from typing import Any, ClassVar, Literal

from elopt.physics.layout import Layout
from elopt.physics.solution import ChargeSolution


@dataclass(frozen=True)
class MetricSpec:
    """One named metric: ``name`` carries the unit suffix; ``unit`` repeats it for tables."""

    name: str
    unit: str
    description: str
    sense: Literal["maximize", "minimize", "either"] = "either"


@dataclass(frozen=True)
class Evaluation:
    """Metrics of one design (name -> float, units in the names) and the solve behind them."""

    metrics: dict[str, float]
    solution: ChargeSolution
    extra: dict[str, Any]


class ElectrodeFamily(ABC):
    """One parameterised electrode geometry."""

    name: ClassVar[str]
    Params: ClassVar[type]
    metrics: ClassVar[tuple[MetricSpec, ...]]

    @classmethod
    def parameter_names(cls) -> tuple[str, ...]:
        return tuple(f.name for f in fields(cls.Params))

    @abstractmethod
    def validate(self, params: Any) -> None:
        """Raise ElectrodeError if ``params`` break a rule of the family (before any solve)."""

    @abstractmethod
    def build(self, params: Any) -> Layout:
        """The layout for ``params`` (SI units); calls :meth:`validate` first."""

    @abstractmethod
    def evaluate(
        self,
        params: Any,
        *,
        rel_accuracy: float = 1e-4,
        peak_rel_accuracy: float | None = None,
        eps_r: float = 1.0,
    ) -> Evaluation:
        """Solve and return every metric of :attr:`metrics`; ``peak_rel_accuracy`` is a
        separate accuracy request on the peak surface field (None: none)."""

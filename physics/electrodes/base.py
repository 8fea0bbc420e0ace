"""Contract of an electrode family: parameters in, a layout, one solve, named metrics out.

A family is one module: a frozen parameter dataclass whose fields are declared with
:func:`parameter` (unit, meaning, allowed range: the one place these facts live), an optional
frozen options dataclass declared the same way, the metrics it measures (declared once each in
:mod:`elopt.physics.electrodes.metrics`), and the stages the pipeline
(:func:`elopt.physics.electrodes.pipeline.evaluate_design`) runs in this order:

1. ``validate(params)`` / ``validate_options(options)``: every broken rule in one
   :class:`ElectrodeError` line, before anything is built;
2. ``build(params, eps_r=, options=)``: the :class:`Layout` in SI units;
3. ``solve(layout, solve_options=, options=)``: the discretisation that solves it (the mixins
   of :mod:`elopt.physics.electrodes.solvers` supply it for the existing solvers);
4. ``companion_designs(params, options)``: further designs whose solves the metrics need
   (e.g. the standoffs of a linearity sweep); the pipeline solves them, never the family;
5. ``measure(params, options, solution, companions)``: the metrics and report data.

Config checks, the study file, terminal tables and JSON read units, ranges and metric
meanings from these declarations; nothing parses a unit out of a name.
"""

from __future__ import annotations

import dataclasses
import math
from abc import ABC, abstractmethod
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any, ClassVar, Literal

from elopt.physics.layout import Layout
from elopt.physics.refinement import SolveOptions
from elopt.physics.solution import ChargeSolution

#: Key of a parameter's :class:`ParameterInfo` in its dataclass field metadata.
PARAMETER_INFO = "elopt.parameter"


@dataclass(frozen=True)
class ParameterInfo:
    """What a parameter means: unit ("" for pure numbers), meaning, allowed range.

    ``low``/``high`` bound the value (None: unbounded), ``*_open`` excludes the bound itself;
    ``nonzero`` refuses 0; ``whole`` asks for an integer; ``abs_low``/``abs_high`` bound the
    magnitude (None: unbounded). Relations between parameters are the
    family's ``validate``; this is what holds for one parameter alone. ``mounting`` marks a
    quantity of how the part is mounted (standoff, tilt) rather than how it is made.
    """

    unit: str
    meaning: str
    low: float | None = None
    high: float | None = None
    low_open: bool = False
    high_open: bool = False
    nonzero: bool = False
    whole: bool = False
    mounting: bool = False
    abs_low: float | None = None
    abs_high: float | None = None

    def range_text(self) -> str:
        """The allowed range as text: ``(0, inf)``, ``[-10, 10]``, ``!= 0``, ``any``."""
        if self.low is None and self.high is None:
            text = "any"
        else:
            lo = "-inf" if self.low is None else f"{self.low:g}"
            hi = "inf" if self.high is None else f"{self.high:g}"
            left = "(" if self.low_open or self.low is None else "["
            right = ")" if self.high_open or self.high is None else "]"
            text = f"{left}{lo}, {hi}{right}"
        if self.abs_low is not None or self.abs_high is not None:
            lo = "0" if self.abs_low is None else f"{self.abs_low:g}"
            hi = "inf" if self.abs_high is None else f"{self.abs_high:g}"
            magnitude = f"|value| in [{lo}, {hi}]"
            text = magnitude if text == "any" else f"{text}, {magnitude}"
        if self.nonzero:
            text = "!= 0" if text == "any" else f"{text}, != 0"
        if self.whole:
            text = f"whole number in {text}" if text != "any" else "whole number"
        return text

    def broken_rule(self, name: str, value: Any) -> str | None:
        """The rule ``value`` breaks as one phrase naming ``name``, or None when it holds."""
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            return None
        if self.whole and isinstance(value, float):
            return f"{name} = {value!r} must be a {self.range_text()}"
        if not math.isfinite(value):
            return None
        shown = f"{value:.6g}"
        below = self.low is not None and (value <= self.low if self.low_open else value < self.low)
        above = self.high is not None and (
            value >= self.high if self.high_open else value > self.high
        )
        if below or above:
            if self.whole:
                return f"{name} = {shown} must be a {self.range_text()}"
            if self.high is None:
                return f"{name} = {shown} must be {'>' if self.low_open else '>='} {self.low:g}"
            if self.low is None:
                return f"{name} = {shown} must be {'<' if self.high_open else '<='} {self.high:g}"
            return f"{name} = {shown} must lie in {self.range_text()}"
        if self.nonzero and value == 0:
            return f"{name} = {shown} must be nonzero"
        small = self.abs_low is not None and abs(value) < self.abs_low
        large = self.abs_high is not None and abs(value) > self.abs_high
        if small or large:
            rule = self.range_text().replace("|value|", f"|{name}|")
            return f"{name} = {value:.6g} must have {rule}"
        return None


def parameter(
    unit: str,
    meaning: str,
    *,
    default: Any = dataclasses.MISSING,
    low: float | None = None,
    high: float | None = None,
    low_open: bool = False,
    high_open: bool = False,
    nonzero: bool = False,
    whole: bool = False,
    mounting: bool = False,
    abs_low: float | None = None,
    abs_high: float | None = None,
) -> Any:
    """A dataclass field carrying its :class:`ParameterInfo` (use in Params and Options)."""
    info = ParameterInfo(
        unit, meaning, low, high, low_open, high_open, nonzero, whole, mounting, abs_low, abs_high
    )
    return dataclasses.field(default=default, metadata={PARAMETER_INFO: info})


#: Allowed magnitude of a drive voltage (V): below 1 uV the charges underflow toward
#: subnormal numbers and ratios divide by zero; above 10 MV no bench design is meant
#: (common practice, no source).
DRIVE_V_MIN = 1e-6
DRIVE_V_MAX = 1e7


def drive_parameter(meaning: str, **kwargs: Any) -> Any:
    """The ``drive_V`` field every driven family declares: volts, nonzero, 1 uV..10 MV."""
    return parameter(
        "V", meaning, nonzero=True, abs_low=DRIVE_V_MIN, abs_high=DRIVE_V_MAX, **kwargs
    )


@dataclass(frozen=True)
class ParameterSpec:
    """One declared parameter or option, as listings and tables show it."""

    name: str
    type_name: str
    unit: str
    meaning: str
    allowed: str
    default: Any
    info: ParameterInfo

    @property
    def required(self) -> bool:
        return self.default is dataclasses.MISSING


def parameter_specs(cls: type) -> tuple[ParameterSpec, ...]:
    """The declared fields of a Params or Options dataclass, in declaration order."""
    out = []
    for f in dataclasses.fields(cls):
        info = f.metadata.get(PARAMETER_INFO, ParameterInfo("", ""))
        type_name = f.type if isinstance(f.type, str) else getattr(f.type, "__name__", str(f.type))
        default = f.default
        if default is dataclasses.MISSING and f.default_factory is not dataclasses.MISSING:
            default = f.default_factory()
        out.append(
            ParameterSpec(
                f.name, type_name, info.unit, info.meaning, info.range_text(), default, info
            )
        )
    return tuple(out)


def parameter_units(params: Any) -> dict[str, str]:
    """Unit of every field of a Params/Options instance or class (name -> unit, "" if none)."""
    cls = params if isinstance(params, type) else type(params)
    return {s.name: s.unit for s in parameter_specs(cls)}


@dataclass(frozen=True)
class MetricSpec:
    """One named metric: ``name`` carries the unit suffix; ``unit`` repeats it for tables;
    ``description`` says what it means; ``sense`` is the direction a designer usually wants."""

    name: str
    unit: str
    description: str
    sense: Literal["maximize", "minimize", "either"] = "either"


@dataclass(frozen=True)
class NoOptions:
    """Options of a family that has none."""


@dataclass(frozen=True)
class Evaluation:
    """Metrics of one design (name -> float, units in the names) and the solve behind them.

    ``extra`` always holds ``layout``, ``peak_conductor`` and ``peak_singular`` (set by the
    pipeline) and ``sense_capacitance_F`` with ``sense_capacitance_meaning`` (the family's)."""

    metrics: dict[str, float]
    solution: ChargeSolution
    extra: dict[str, Any]


@dataclass(frozen=True)
class Measured:
    """What :meth:`ElectrodeFamily.measure` returns: metric values and report data."""

    metrics: dict[str, float]
    extra: dict[str, Any]


class ElectrodeFamily(ABC):
    """One parameterised electrode geometry (the stages are in the module docstring).

    Class attributes: ``name`` (registry key), ``Params`` and ``Options`` (frozen dataclasses
    declared with :func:`parameter`), ``metrics`` (what :meth:`measure` returns, plus any of
    :data:`elopt.physics.electrodes.metrics.STANDARD` it lists: the pipeline fills those),
    ``mirror_pair`` (the layout is one electrode above the mid-plane of a symmetric pair),
    ``per_unit_length`` (the layout is a cross-section: its capacitances are per metre; listed
    in :mod:`elopt.physics.electrodes.cross_section` too).
    """

    name: ClassVar[str]
    Params: ClassVar[type]
    Options: ClassVar[type] = NoOptions
    metrics: ClassVar[tuple[MetricSpec, ...]]
    mirror_pair: ClassVar[bool] = False
    per_unit_length: ClassVar[bool] = False

    # ------------------------------------------------------------------ declarations

    @classmethod
    def parameters(cls) -> tuple[ParameterSpec, ...]:
        return parameter_specs(cls.Params)

    @classmethod
    def parameter_names(cls) -> tuple[str, ...]:
        return tuple(s.name for s in cls.parameters())

    @classmethod
    def mounting_parameters(cls) -> tuple[str, ...]:
        """Parameters that describe how the part is mounted (declared ``mounting=True``)."""
        return tuple(s.name for s in cls.parameters() if s.info.mounting)

    @classmethod
    def options(cls) -> tuple[ParameterSpec, ...]:
        return parameter_specs(cls.Options)

    @classmethod
    def metric_catalog(cls) -> tuple[MetricSpec, ...]:
        """Every metric an evaluation returns: the family's, then the standard ones it lacks."""
        from elopt.physics.electrodes.metrics import STANDARD

        own = tuple(cls.metrics)
        names = {m.name for m in own}
        return own + tuple(m for m in STANDARD if m.name not in names)

    def params_from_table(self, table: Mapping[str, Any], where: str, base_dir: Path) -> Any:
        """Params read by the family itself from a config table, or None (the default) when
        the generic reader of flat, typed fields does it. Raise ElectrodeError on a problem."""
        return None

    def drive_V(self, params: Any) -> float:
        """The design's drive voltage (V), for safety cautions: its ``drive_V`` parameter."""
        return float(getattr(params, "drive_V", 0.0))

    # ------------------------------------------------------------------ checks

    @abstractmethod
    def validate(self, params: Any) -> None:
        """Raise ElectrodeError if ``params`` break a rule of the family (before any solve)."""

    def validate_design(self, params: Any, options: Any) -> None:
        """Raise ElectrodeError if ``params`` or a design the evaluation under ``options``
        (resolved) also solves (its companion designs) break a rule: before any solve."""
        self.validate(params)

    def validate_options(self, options: Any) -> None:
        """Raise ElectrodeError if ``options`` break their declared ranges."""
        from elopt.physics.electrodes.rules import RuleBook

        rules = RuleBook(self.name, options)
        if rules.finite():
            rules.declared()
        rules.raise_if_broken()

    # ------------------------------------------------------------------ stages

    @abstractmethod
    def build(self, params: Any, *, eps_r: float = 1.0, options: Any = None) -> Layout:
        """The layout for ``params`` (SI units); calls :meth:`validate` first."""

    @abstractmethod
    def solve(self, layout: Layout, *, solve_options: SolveOptions, options: Any) -> ChargeSolution:
        """Solve a layout this family built (the family picks the discretisation; the
        requested accuracy and refinement limits are in ``solve_options``)."""

    def companion_designs(self, params: Any, options: Any) -> dict[str, Any]:
        """Further designs (key -> Params) whose solutions :meth:`measure` needs; none here."""
        return {}

    @abstractmethod
    def measure(
        self,
        params: Any,
        options: Any,
        solution: ChargeSolution,
        companions: Mapping[str, ChargeSolution],
    ) -> Measured:
        """Metrics of :attr:`metrics` (the standard ones may be left to the pipeline)."""

    # ------------------------------------------------------------------ convenience

    def evaluate(
        self,
        params: Any,
        *,
        rel_accuracy: float = 1e-4,
        peak_rel_accuracy: float | None = None,
        eps_r: float = 1.0,
        options: Any = None,
    ) -> Evaluation:
        """Shorthand for :func:`elopt.physics.electrodes.pipeline.evaluate_design`."""
        from elopt.physics.electrodes.pipeline import evaluate_design

        return evaluate_design(
            self,
            params,
            rel_accuracy=rel_accuracy,
            peak_rel_accuracy=peak_rel_accuracy,
            eps_r=eps_r,
            options=options,
        )

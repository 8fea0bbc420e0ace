"""The study config (TOML): what to search, what to want, what to respect, for how long.

::

    [study]
    name = "spindle-runout"        # default study file: studies/<name>.h5
    family = "guarded_disk"        # a registry name, or "package.module:attribute"
    seed = 7

    [solver]
    rel_accuracy = 1e-3            # requested accuracy of every trial's solve
    peak_rel_accuracy = 1e-2       # optional: a request on the peak surface field

    [medium]                       # as in a solve config: eps_r, breakdown_field_V_per_m
    eps_r = 1.0

    [evaluation]                   # as in a solve config: the family's evaluation options

    [fixed]                        # parameters held at one value
    drive_V = 10.0

    [search]                       # free parameters: low < high, optional log and step
    sensor_radius_mm = { low = 1.0, high = 4.0 }
    guard_gap_mm = { low = 0.05, high = 0.5, log = true }

    [objectives]                   # metric = "maximize" | "minimize", first one sorts tables
    sensitivity_fF_per_um = "maximize"

    [constraints]                  # metric = { max = ... } and/or { min = ... }
    peak_surface_field_V_per_m = { max = 3.0e6 }

    [sampler]
    kind = "tpe"                   # multi-objective TPE, or "nsga2"
    nsga2_from_trial = 600         # TPE hands over to NSGA-II at this many stored trials
    population_size = 40           # NSGA-II generation size
    startup_trials = 16            # TPE's random start

    [budget]                       # trials and/or hours; the first reached ends the run
    trials = 200
    hours = 8.0

    [run]
    workers = 2                    # default: one per core

    [tolerance.parameters]         # optional: judge designs across manufacturing and
    guard_gap_mm = 0.010           # mounting deviations (see tolerance_config for the table)
    [tolerance.apply]
    sensitivity_fF_per_um = "worst"

Every key is checked; unknown keys get the nearest valid key suggested. ``[budget]`` and
``[run]`` may change between run and resume; everything else is the study's identity.
``[medium]``, ``[evaluation]`` and ``solver.peak_rel_accuracy`` are read exactly as
``elopt solve`` reads them
(:mod:`elopt.optimizer.config.shared_tables`), so a trial evaluates a design as ``solve``
does. Studies written before ``[medium]`` existed gave ``eps_r`` in ``[solver]``; that
spelling is still read.
"""

from __future__ import annotations

import dataclasses
import hashlib
import importlib
import math
import os
import typing
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Literal

import numpy as np

from elopt.optimizer.config.shared_tables import (
    MediumSpec,
    parse_medium,
    parse_options,
    parse_peak_accuracy,
)
from elopt.optimizer.config.tolerance_config import parse_tolerances
from elopt.optimizer.config.toml_tools import (
    as_choice,
    as_float,
    as_int,
    as_table,
    check_keys,
    load_toml,
    require,
)
from elopt.optimizer.errors import ConfigError
from elopt.optimizer.study.tolerances import ToleranceSpec
from elopt.physics.electrodes.base import ElectrodeFamily, MetricSpec
from elopt.physics.errors import ElOptError

SAMPLERS = ("tpe", "nsga2")
DIRECTIONS = ("maximize", "minimize")
_TOP_KEYS = (
    "study",
    "solver",
    "medium",
    "evaluation",
    "fixed",
    "search",
    "objectives",
    "constraints",
    "sampler",
    "budget",
    "run",
    "tolerance",
)
_RUNTIME_TABLES = ("budget", "run")
_RANGE_PROBES = 256
#: Finest grid a search range's ``step`` may make: finer is a continuous range in all but
#: name, and optuna's exact decimal grid arithmetic fails on ratios near 1e28.
MAX_GRID_STEPS = 1e6


@dataclass(frozen=True)
class SearchRange:
    """One free parameter: ``low < high``; ``log`` samples in log space; ``step`` a grid."""

    name: str
    low: float
    high: float
    log: bool = False
    step: float | None = None
    integer: bool = False


@dataclass(frozen=True)
class Objective:
    metric: str
    direction: Literal["maximize", "minimize"]
    unit: str


@dataclass(frozen=True)
class Constraint:
    """``metric <= limit`` (kind "max") or ``metric >= limit`` (kind "min")."""

    metric: str
    kind: Literal["max", "min"]
    limit: float
    unit: str

    @property
    def name(self) -> str:
        return f"{self.metric} {'<=' if self.kind == 'max' else '>='} {self.limit:g}"

    def violation(self, value: float) -> float:
        """In the metric's unit; <= 0 when satisfied."""
        return value - self.limit if self.kind == "max" else self.limit - value


@dataclass(frozen=True)
class SamplerSpec:
    kind: Literal["tpe", "nsga2"] = "tpe"
    nsga2_from_trial: int | None = 600
    population_size: int = 40
    startup_trials: int = 16

    def kind_at(self, n_stored: int) -> str:
        """The sampler that asks for trials once ``n_stored`` trials are stored."""
        if self.kind == "tpe" and self.nsga2_from_trial is not None:
            return "nsga2" if n_stored >= self.nsga2_from_trial else "tpe"
        return self.kind


@dataclass(frozen=True)
class Budget:
    trials: int | None = None
    hours: float | None = None


@dataclass(frozen=True)
class StudySpec:
    """A validated study config. ``fixed`` holds every non-searched parameter value."""

    name: str
    family_ref: str
    family: ElectrodeFamily
    fixed: dict[str, Any]
    search: tuple[SearchRange, ...]
    objectives: tuple[Objective, ...]
    constraints: tuple[Constraint, ...]
    sampler: SamplerSpec
    seed: int
    budget: Budget
    workers: int
    rel_accuracy: float
    peak_rel_accuracy: float | None
    medium: MediumSpec
    options: Any
    metrics: tuple[MetricSpec, ...]
    config_text: str
    identity: dict[str, Any]
    tolerance: ToleranceSpec | None = None

    @property
    def eps_r(self) -> float:
        return self.medium.eps_r

    @property
    def parameter_names(self) -> tuple[str, ...]:
        return self.family.parameter_names()

    @property
    def config_sha256(self) -> str:
        return hashlib.sha256(self.config_text.encode("utf-8")).hexdigest()

    def params_of(self, searched: dict[str, Any]) -> dict[str, Any]:
        """Every parameter value: the fixed ones plus ``searched``."""
        return {**self.fixed, **searched}


def load_study_config(path: str | Path) -> StudySpec:
    """Load and validate a study config; every problem is one ConfigError line that starts
    with the file's path, as the solve config's do."""
    table, text = load_toml(path)
    try:
        return parse_study_config(table, text, source=str(path))
    except ConfigError as exc:
        msg = str(exc)
        raise ConfigError(msg if msg.startswith(str(path)) else f"{path}: {msg}") from None


def parse_study_config(table: dict[str, Any], text: str, *, source: str = "") -> StudySpec:
    check_keys(table, _TOP_KEYS, "")
    study = as_table(require(table, "study", ""), "study")
    check_keys(study, ("name", "family", "seed"), "study")
    family_ref = require(study, "family", "study")
    if not isinstance(family_ref, str):
        raise ConfigError(f"study.family: expected a family name, got {family_ref!r}")
    family = resolve_family(family_ref, key="study.family")
    default_name = Path(source).stem if source else "study"
    name = study.get("name", default_name)
    if not isinstance(name, str) or not name or "/" in name:
        raise ConfigError(f"study.name: expected a file-name-safe text, got {name!r}")
    seed = as_int(study.get("seed", 0), "study.seed", low=0, high=2**31 - 1)

    solver = as_table(table.get("solver", {}), "solver")
    check_keys(solver, ("rel_accuracy", "peak_rel_accuracy", "eps_r"), "solver")
    rel_accuracy = as_float(
        solver.get("rel_accuracy", 1e-3), "solver.rel_accuracy", low=1e-8, high=0.5
    )
    peak_rel_accuracy = parse_peak_accuracy(solver)
    medium = parse_medium(_medium_table(table, solver))
    options = parse_options(family, as_table(table.get("evaluation", {}), "evaluation"))

    types = _parameter_types(family)
    fixed = _parse_fixed(as_table(table.get("fixed", {}), "fixed"), types)
    search = _parse_search(as_table(require(table, "search", ""), "search"), types, fixed)
    _check_all_parameters_given(family, fixed, search)

    metrics = family.metric_catalog()
    objectives = _parse_objectives(
        as_table(require(table, "objectives", ""), "objectives"), metrics
    )
    constraints = _parse_constraints(as_table(table.get("constraints", {}), "constraints"), metrics)
    sampler = _parse_sampler(as_table(table.get("sampler", {}), "sampler"), len(objectives))
    budget = parse_budget(as_table(table.get("budget", {}), "budget"))
    run = as_table(table.get("run", {}), "run")
    check_keys(run, ("workers",), "run")
    workers = as_int(run.get("workers", default_workers()), "run.workers", low=1, high=256)

    tolerance = _parse_tolerance(table, family, objectives, constraints)

    spec = StudySpec(
        name=name,
        family_ref=family_ref,
        family=family,
        fixed=fixed,
        search=search,
        objectives=objectives,
        constraints=constraints,
        sampler=sampler,
        seed=seed,
        budget=budget,
        workers=workers,
        rel_accuracy=rel_accuracy,
        peak_rel_accuracy=peak_rel_accuracy,
        medium=medium,
        options=options,
        metrics=metrics,
        config_text=text,
        identity=study_identity(table),
        tolerance=tolerance,
    )
    _check_ranges_against_family(spec)
    return spec


def _parse_tolerance(
    table: dict[str, Any],
    family: ElectrodeFamily,
    objectives: tuple[Objective, ...],
    constraints: tuple[Constraint, ...],
) -> ToleranceSpec | None:
    """``[tolerance]`` with each treated metric's worse side from its objective/constraint."""
    if "tolerance" not in table:
        return None
    sides: dict[str, set[str]] = {}
    for o in objectives:
        sides.setdefault(o.metric, set()).add("low" if o.direction == "maximize" else "high")
    for c in constraints:
        sides.setdefault(c.metric, set()).add("high" if c.kind == "max" else "low")
    directions = {m: s.pop() if len(s) == 1 else "both" for m, s in sides.items()}
    return parse_tolerances(
        as_table(table["tolerance"], "tolerance"),
        parameter_names=family.parameter_names(),
        mounting_names=family.mounting_parameters(),
        directions=directions,
    )


def _medium_table(table: dict[str, Any], solver: dict[str, Any]) -> dict[str, Any]:
    """``[medium]``, with the older ``solver.eps_r`` folded in (never both)."""
    medium = as_table(table.get("medium", {}), "medium")
    if "eps_r" not in solver:
        return medium
    if "eps_r" in medium:
        raise ConfigError("solver.eps_r: also given as medium.eps_r; give it in [medium] only")
    return {**medium, "eps_r": as_float(solver["eps_r"], "solver.eps_r", low=1.0)}


def default_workers() -> int:
    return max(
        1, len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count() or 1
    )


def resolve_family(ref: str, *, key: str = "family") -> ElectrodeFamily:
    """A family by registry name, or by ``"package.module:attribute"`` (instance or class)."""
    if ":" in ref:
        module_name, _, attr = ref.partition(":")
        try:
            obj = getattr(importlib.import_module(module_name), attr)
        except (ImportError, AttributeError, ValueError) as exc:
            raise ConfigError(f"{key}: cannot load {ref!r} ({exc})") from None
        if isinstance(obj, type):
            if not issubclass(obj, ElectrodeFamily):
                raise ConfigError(
                    f"{key}: {ref!r} is the class {obj.__name__}, not an ElectrodeFamily"
                )
            try:
                obj = obj()
            except Exception as exc:  # a family class must build without arguments
                raise ConfigError(
                    f"{key}: {ref!r} cannot be created without arguments ({exc})"
                ) from None
        if not isinstance(obj, ElectrodeFamily):
            raise ConfigError(f"{key}: {ref!r} is a {type(obj).__name__}, not an ElectrodeFamily")
        return obj
    try:
        registry = importlib.import_module("elopt.physics.electrodes.registry")
    except ImportError:
        raise ConfigError(f"{key}: {ref!r} is unknown (no electrode families installed)") from None
    try:
        return registry.get_family(ref)
    except ElOptError as exc:
        raise ConfigError(f"{key}: {exc}") from None


def parse_budget(table: dict[str, Any], *, where: str = "budget") -> Budget:
    check_keys(table, ("trials", "hours"), where)
    trials = table.get("trials")
    hours = table.get("hours")
    if trials is not None:
        trials = as_int(trials, f"{where}.trials", low=1)
    if hours is not None:
        hours = as_float(hours, f"{where}.hours", low=0.0, low_open=True)
    if trials is None and hours is None:
        raise ConfigError(f"{where}: give trials = N and/or hours = H (the run needs an end)")
    return Budget(trials=trials, hours=hours)


def study_identity(table: dict[str, Any]) -> dict[str, Any]:
    """Flattened dotted keys of everything that defines the study (not budget, not workers)."""
    flat: dict[str, Any] = {}

    def walk(prefix: str, value: Any) -> None:
        if isinstance(value, dict):
            for k, v in value.items():
                walk(f"{prefix}.{k}" if prefix else k, v)
        else:
            flat[prefix] = value

    for key, value in table.items():
        if key not in _RUNTIME_TABLES:
            walk(key, value)
    return flat


def identity_differences(stored: dict[str, Any], given: dict[str, Any]) -> list[str]:
    """Human-readable differences between two study identities."""
    out = []
    for key in sorted(set(stored) | set(given)):
        if key not in given:
            out.append(f"{key} = {stored[key]!r} only in the stored config")
        elif key not in stored:
            out.append(f"{key} = {given[key]!r} only in the given config")
        elif stored[key] != given[key]:
            out.append(f"{key}: stored {stored[key]!r}, given {given[key]!r}")
    return out


# ----------------------------------------------------------------------------- parts


def _parameter_types(family: ElectrodeFamily) -> dict[str, str]:
    try:
        hints = typing.get_type_hints(family.Params)
    except Exception:
        hints = {}
    out = {}
    for f in dataclasses.fields(family.Params):
        t = hints.get(f.name, f.type)
        out[f.name] = t.__name__ if isinstance(t, type) else str(t)
    return out


def _parse_fixed(table: dict[str, Any], types: dict[str, str]) -> dict[str, Any]:
    check_keys(table, types, "fixed")
    out = {}
    for name, value in table.items():
        if types[name] in ("float", "int") and (
            isinstance(value, bool) or not isinstance(value, (int, float))
        ):
            raise ConfigError(f"fixed.{name}: expected a number, got {value!r}")
        out[name] = float(value) if types[name] == "float" else value
    return out


def _parse_search(
    table: dict[str, Any], types: dict[str, str], fixed: dict[str, Any]
) -> tuple[SearchRange, ...]:
    if not table:
        raise ConfigError(
            "search: give at least one free parameter, e.g. NAME = { low = 1, high = 2 }"
        )
    check_keys(table, types, "search")
    out = []
    for name, value in table.items():
        key = f"search.{name}"
        if name in fixed:
            raise ConfigError(f"{key}: also given in [fixed]; a parameter is fixed or searched")
        if types[name] not in ("float", "int"):
            raise ConfigError(f"{key}: parameter of type {types[name]} cannot be searched")
        rng = as_table(value, key)
        check_keys(rng, ("low", "high", "log", "step"), key)
        integer = types[name] == "int"
        conv = (lambda v, k: as_int(v, k)) if integer else (lambda v, k: as_float(v, k))
        low = conv(require(rng, "low", key), f"{key}.low")
        high = conv(require(rng, "high", key), f"{key}.high")
        if not low < high:
            raise ConfigError(f"{key}: low < high must hold, got low={low:g}, high={high:g}")
        log = rng.get("log", False)
        if not isinstance(log, bool):
            raise ConfigError(f"{key}.log: expected true or false, got {log!r}")
        if log and low <= 0:
            raise ConfigError(f"{key}.low: a log-scale range needs low > 0, got {low:g}")
        step = rng.get("step")
        if step is not None:
            step = conv(step, f"{key}.step")
            if log:
                raise ConfigError(f"{key}: give either log = true or a step, not both")
            if not 0 < step <= high - low:
                raise ConfigError(
                    f"{key}.step: must lie in (0, high - low] = (0, {high - low:g}], got {step:g}"
                )
            if (high - low) / step > MAX_GRID_STEPS:
                raise ConfigError(
                    f"{key}.step: {step:g} cuts high - low = {high - low:g} into "
                    f"{(high - low) / step:.3g} steps; at most {MAX_GRID_STEPS:g} (leave step out "
                    "for a continuous range)"
                )
        out.append(SearchRange(name, float(low), float(high), log, step, integer))
    return tuple(out)


def _check_all_parameters_given(
    family: ElectrodeFamily, fixed: dict[str, Any], search: tuple[SearchRange, ...]
) -> None:
    given = set(fixed) | {s.name for s in search}
    missing = [
        f.name
        for f in dataclasses.fields(family.Params)
        if f.name not in given
        and f.default is dataclasses.MISSING
        and f.default_factory is dataclasses.MISSING
    ]
    if missing:
        raise ConfigError(
            f"fixed: parameter {missing[0]} of family {family.name} has no value; give it in "
            "[fixed] or [search]"
            + (f" (also missing: {', '.join(missing[1:])})" if missing[1:] else "")
        )


def _metric_names_hint(metrics: tuple[MetricSpec, ...]) -> str:
    return ", ".join(m.name for m in metrics)


def _find_metric(name: str, metrics: tuple[MetricSpec, ...], key: str) -> MetricSpec:
    for m in metrics:
        if m.name == name:
            return m
    import difflib

    near = difflib.get_close_matches(name, [m.name for m in metrics], n=1, cutoff=0.5)
    hint = f"did you mean '{near[0]}'? " if near else ""
    raise ConfigError(
        f"{key}: the family has no metric '{name}'; {hint}metrics: {_metric_names_hint(metrics)}"
    )


def _parse_objectives(
    table: dict[str, Any], metrics: tuple[MetricSpec, ...]
) -> tuple[Objective, ...]:
    if not table:
        raise ConfigError('objectives: give at least one, e.g. METRIC = "maximize"')
    out = []
    for name, direction in table.items():
        key = f"objectives.{name}"
        spec = _find_metric(name, metrics, key)
        out.append(Objective(name, as_choice(direction, key, DIRECTIONS), spec.unit))  # type: ignore[arg-type]
    return tuple(out)


def _parse_constraints(
    table: dict[str, Any], metrics: tuple[MetricSpec, ...]
) -> tuple[Constraint, ...]:
    out = []
    for name, bounds in table.items():
        key = f"constraints.{name}"
        spec = _find_metric(name, metrics, key)
        bounds = as_table(bounds, key)
        check_keys(bounds, ("max", "min"), key)
        if not bounds:
            raise ConfigError(f"{key}: give max = LIMIT and/or min = LIMIT")
        for kind in ("max", "min"):
            if kind in bounds:
                limit = as_float(bounds[kind], f"{key}.{kind}")
                out.append(Constraint(name, kind, limit, spec.unit))  # type: ignore[arg-type]
        if "max" in bounds and "min" in bounds and not bounds["min"] < bounds["max"]:
            raise ConfigError(
                f"{key}: min < max must hold, got min={bounds['min']}, max={bounds['max']}"
            )
    return tuple(out)


def _parse_sampler(table: dict[str, Any], n_objectives: int) -> SamplerSpec:
    check_keys(table, ("kind", "nsga2_from_trial", "population_size", "startup_trials"), "sampler")
    kind = as_choice(table.get("kind", "tpe"), "sampler.kind", SAMPLERS)
    handover = table.get("nsga2_from_trial", SamplerSpec.nsga2_from_trial)
    if handover is not None and handover is not False:
        handover = as_int(handover, "sampler.nsga2_from_trial", low=1)
    else:
        handover = None
    population = as_int(
        table.get("population_size", 40), "sampler.population_size", low=4, high=10_000
    )
    startup = as_int(table.get("startup_trials", 16), "sampler.startup_trials", low=1, high=100_000)
    return SamplerSpec(kind, handover, population, startup)  # type: ignore[arg-type]


def _check_ranges_against_family(spec: StudySpec) -> None:
    """Each end of each range must admit some design the family accepts (sampled probes)."""
    rng = np.random.default_rng(0)
    searched = spec.search
    probes = []
    for _ in range(_RANGE_PROBES):
        probes.append({s.name: _draw(s, rng) for s in searched})
    first_error = ""
    any_ok = False
    for p in probes:
        err = _family_error(spec, p)
        any_ok |= err is None
        first_error = first_error or (err or "")
        if any_ok:
            break
    if not any_ok:
        raise ConfigError(
            f"search: no design in the search box satisfies family {spec.family.name}'s rules "
            f"(e.g. {first_error}); widen or move the ranges, or change [fixed]"
        )
    for s in searched:
        for end_name, end in (("low", s.low), ("high", s.high)):
            message = ""
            for p in probes:
                err = _family_error(spec, {**p, s.name: int(end) if s.integer else end})
                if err is None:
                    message = ""
                    break
                message = message or err
            if message:
                raise ConfigError(
                    f"search.{s.name}.{end_name} = {end:g} is outside family {spec.family.name}'s "
                    f"rules: {message}"
                )


def _draw(s: SearchRange, rng: np.random.Generator) -> float | int:
    if s.log:
        v = math.exp(rng.uniform(math.log(s.low), math.log(s.high)))
    else:
        v = rng.uniform(s.low, s.high)
    return int(round(v)) if s.integer else float(v)


def _family_error(spec: StudySpec, searched: dict[str, Any]) -> str | None:
    try:
        spec.family.validate(spec.family.Params(**spec.params_of(searched)))
    except (ElOptError, ValueError, TypeError) as exc:
        return str(exc)
    return None

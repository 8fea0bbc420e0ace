"""Reader of the TOML config of ``elopt solve``: one design of one electrode family.

    title = "..."                      # optional
    [geometry]                         # family + that family's parameters (units in names)
    family = "guarded_disk"
    sensor_radius_mm = 4.0 ...
    [solver]                           # optional
    rel_accuracy = 1e-4
    peak_rel_accuracy = 1e-3           # optional: a request on the peak surface field
    [medium]                           # optional
    eps_r = 1.0
    breakdown_field_V_per_m = 3e6
    [evaluation]                       # optional: the family's evaluation options

Parameter and option names, their types and defaults are read from the family's dataclasses
(the one source of truth); every relation between them is checked by the family's
``validate`` before any solve. Every problem is one :class:`ConfigError` line.
"""

from __future__ import annotations

import dataclasses
import difflib
import typing
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from elopt.optimizer.config.toml_tools import (
    as_float,
    as_int,
    as_table,
    check_keys,
    load_toml,
    require,
)
from elopt.optimizer.errors import ConfigError
from elopt.physics.electrodes.base import ElectrodeFamily
from elopt.physics.electrodes.registry import FAMILIES
from elopt.physics.errors import ElectrodeError

#: Peak field taken as the breakdown limit of air when the config names no medium limit:
#: about 3 kV/mm for centimetre gaps at 1 atm (common practice, no source).
AIR_BREAKDOWN_V_PER_M = 3.0e6
DEFAULT_REL_ACCURACY = 1e-4
TOP_KEYS = ("title", "geometry", "solver", "medium", "evaluation")


@dataclass(frozen=True)
class SolveSpec:
    """A validated solve config. ``params``/``options`` are the family's dataclasses."""

    path: str
    title: str
    family: str
    params: Any
    options: Any
    rel_accuracy: float
    eps_r: float
    breakdown_field_V_per_m: float | None
    breakdown_source: str
    peak_rel_accuracy: float | None = None


def read_dataclass(cls: type, table: dict[str, Any], where: str, skip: tuple[str, ...] = ()):
    """An instance of the dataclass ``cls`` from ``table``: keys checked, numbers typed."""
    hints = typing.get_type_hints(cls)
    names = [f.name for f in dataclasses.fields(cls)]
    check_keys({k: v for k, v in table.items() if k not in skip}, names, where)
    missing = [
        f.name
        for f in dataclasses.fields(cls)
        if f.name not in table and f.default is dataclasses.MISSING
    ]
    if len(missing) == 1:
        require(table, missing[0], where)
    if missing:
        raise ConfigError(f"{where}: required keys are missing: {', '.join(missing)}")
    values: dict[str, Any] = {}
    for f in dataclasses.fields(cls):
        if f.name in table:
            values[f.name] = _typed(table[f.name], hints[f.name], f"{where}.{f.name}")
    return cls(**values)


def _typed(raw: Any, hint: Any, key: str) -> Any:
    """``raw`` checked against a parameter's annotated type (float, int, str or bool)."""
    if hint is float:
        return as_float(raw, key)
    if hint is int:
        return as_int(raw, key)
    if hint in (str, bool) and not isinstance(raw, hint):
        raise ConfigError(f"{key}: expected a {hint.__name__}, got {raw!r}")
    return raw


def _family(geometry: dict[str, Any], path: str) -> ElectrodeFamily:
    name = require(geometry, "family", "geometry")
    if not isinstance(name, str) or name not in FAMILIES:
        near = difflib.get_close_matches(str(name), list(FAMILIES), n=1, cutoff=0.5)
        hint = f" (did you mean '{near[0]}'?)" if near else ""
        raise ConfigError(
            f"{path}: geometry.family: {name!r} is not one of {', '.join(sorted(FAMILIES))}{hint}"
        )
    return FAMILIES[name]


def parse_solve_config(table: dict[str, Any], path: str = "<config>") -> SolveSpec:
    """Validate a parsed TOML table into a :class:`SolveSpec` (nothing solved yet)."""
    try:
        check_keys(table, TOP_KEYS, "")
        title = table.get("title", "")
        if not isinstance(title, str):
            raise ConfigError(f"title: expected a string, got {title!r}")
        geometry = as_table(require(table, "geometry", ""), "geometry")
        family = _family(geometry, path)
        from_table = getattr(family, "params_from_table", None)
        if from_table is None:
            params = read_dataclass(family.Params, geometry, "geometry", skip=("family",))
        else:
            # A family with structured parameters (tables of conductors) reads them itself.
            try:
                params = from_table(geometry, "geometry", Path(path).parent)
            except ElectrodeError as exc:
                raise ConfigError(str(exc)) from None
        options_cls = getattr(family, "Options", None)
        evaluation = as_table(table.get("evaluation", {}), "evaluation")
        if options_cls is None:
            check_keys(evaluation, (), "evaluation")
            options = None
        else:
            options = read_dataclass(options_cls, evaluation, "evaluation")
        solver = as_table(table.get("solver", {}), "solver")
        check_keys(solver, ("rel_accuracy", "peak_rel_accuracy"), "solver")
        rel_accuracy = as_float(
            solver.get("rel_accuracy", DEFAULT_REL_ACCURACY),
            "solver.rel_accuracy",
            low=1e-8,
            high=0.1,
        )
        peak_rel_accuracy = None
        if "peak_rel_accuracy" in solver:
            peak_rel_accuracy = as_float(
                solver["peak_rel_accuracy"], "solver.peak_rel_accuracy", low=1e-8, high=0.1
            )
        medium = as_table(table.get("medium", {}), "medium")
        check_keys(medium, ("eps_r", "breakdown_field_V_per_m"), "medium")
        eps_r = as_float(medium.get("eps_r", 1.0), "medium.eps_r", low=1.0)
    except ConfigError as exc:
        msg = str(exc)
        raise ConfigError(msg if msg.startswith(path) else f"{path}: {msg}") from None
    if "breakdown_field_V_per_m" in medium:
        breakdown = as_float(
            medium["breakdown_field_V_per_m"],
            f"{path}: medium.breakdown_field_V_per_m",
            low=0,
            low_open=True,
        )
        source = "from [medium]"
    elif eps_r == 1.0:
        breakdown = AIR_BREAKDOWN_V_PER_M
        source = "air at 1 atm, common practice; no [medium] limit given"
    else:
        breakdown, source = None, "no [medium] breakdown_field_V_per_m given"
    try:
        family.validate(params)
        validate_options = getattr(family, "validate_options", None)
        if options is not None and validate_options is not None:
            validate_options(options)
    except ElectrodeError as exc:
        raise ConfigError(f"{path}: {exc}") from None
    return SolveSpec(
        path=path,
        title=title,
        family=family.name,
        params=params,
        options=options,
        rel_accuracy=rel_accuracy,
        eps_r=eps_r,
        breakdown_field_V_per_m=breakdown,
        peak_rel_accuracy=peak_rel_accuracy,
        breakdown_source=source,
    )


def read_solve_config(path: str | Path) -> SolveSpec:
    """Load and validate a solve config file; one-line ConfigError on any problem."""
    table, _ = load_toml(path)
    return parse_solve_config(table, str(path))

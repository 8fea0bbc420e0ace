"""Tables that solve and study configs share, read the same way so that ``elopt solve`` and a
study trial evaluate one design identically.

::

    [solver]
    peak_rel_accuracy = 1e-3           # optional: a request on the peak surface field

    [medium]                           # optional
    eps_r = 1.0                        # relative permittivity around the conductors
    breakdown_field_V_per_m = 3e6      # field limit the reports compare the peak with
    [evaluation]                       # optional: the family's evaluation options

Names, types, defaults, units and allowed ranges of parameters and options are read from the
family's dataclasses (the one source of truth); relations between them are the family's
``validate``. Every problem is one :class:`ConfigError` line naming the key.
"""

from __future__ import annotations

import dataclasses
import typing
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from elopt.optimizer.config.toml_tools import MAX_EPS_R, as_float, as_int, check_keys, require
from elopt.optimizer.errors import ConfigError
from elopt.physics.electrodes.base import ElectrodeFamily
from elopt.physics.errors import ElectrodeError

#: Peak field taken as the breakdown limit of air when the config names no medium limit:
#: about 3 kV/mm for centimetre gaps at 1 atm (common practice, no source).
AIR_BREAKDOWN_V_PER_M = 3.0e6
#: Largest breakdown field a medium may be given (V/m): above any solid or vacuum gap
#: (common practice, no source).
MAX_BREAKDOWN_V_PER_M = 1e10
MEDIUM_KEYS = ("eps_r", "breakdown_field_V_per_m")


@dataclass(frozen=True)
class MediumSpec:
    """The medium: relative permittivity and the field limit reports check (None: none)."""

    eps_r: float = 1.0
    breakdown_field_V_per_m: float | None = AIR_BREAKDOWN_V_PER_M
    breakdown_source: str = "air at 1 atm, common practice; no [medium] limit given"


def parse_medium(table: dict[str, Any], *, where: str = "medium") -> MediumSpec:
    """The ``[medium]`` table; without a limit, air's for eps_r = 1 and none otherwise."""
    check_keys(table, MEDIUM_KEYS, where)
    eps_r = as_float(table.get("eps_r", 1.0), f"{where}.eps_r", low=1.0, high=MAX_EPS_R)
    if "breakdown_field_V_per_m" in table:
        breakdown = as_float(
            table["breakdown_field_V_per_m"],
            f"{where}.breakdown_field_V_per_m",
            low=0,
            low_open=True,
            high=MAX_BREAKDOWN_V_PER_M,
        )
        return MediumSpec(eps_r, breakdown, f"from [{where}]")
    if eps_r == 1.0:
        return MediumSpec(eps_r)
    return MediumSpec(eps_r, None, f"no [{where}] breakdown_field_V_per_m given")


def parse_peak_accuracy(solver: dict[str, Any], *, where: str = "solver") -> float | None:
    """``peak_rel_accuracy`` of the ``[solver]`` table: a separate request on the peak surface
    field (None when not given)."""
    if "peak_rel_accuracy" not in solver:
        return None
    return as_float(solver["peak_rel_accuracy"], f"{where}.peak_rel_accuracy", low=1e-8, high=0.1)


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


def parse_options(family: ElectrodeFamily, table: dict[str, Any], *, where: str = "evaluation"):
    """The family's Options from the ``[evaluation]`` table, checked against its rules."""
    options = read_dataclass(family.Options, table, where)
    try:
        family.validate_options(options)
    except ElectrodeError as exc:
        raise ConfigError(f"{where}: {exc}") from None
    return options


def read_params(family: ElectrodeFamily, table: dict[str, Any], where: str, base_dir: Path):
    """The family's Params from a config table (``family`` key skipped); a family with
    structured parameters (tables of conductors) reads them itself."""
    try:
        params = family.params_from_table(table, where, base_dir)
    except ElectrodeError as exc:
        raise ConfigError(str(exc)) from None
    if params is None:
        params = read_dataclass(family.Params, table, where, skip=("family",))
    return params

"""The ``[tolerance]`` table of a study config: deviations and how each metric takes them.

::

    [tolerance]
    method = "auto"                # "auto" | "first_order" | "corners"
    nonlinearity_limit = 0.2       # trust limit of the first-order model (fraction)

    [tolerance.parameters]         # manufacturing, in the parameter's own unit:
    guard_gap_mm = 0.010           #   +-0.010 mm
    fillet_mm = { minus = 0.010, plus = 0.005 }

    [tolerance.mounting]           # how the part is mounted (standoff, tilt) where the
    standoff_mm = 0.020            # family has that parameter

    [tolerance.apply]              # per objective or constraint metric (default "nominal"):
    sensitivity_fF_per_um = "worst"
    peak_surface_field_V_per_m = { quantile = 0.99, distribution = "normal" }

``worst`` is the worst value over the whole box of deviations; ``quantile = q`` is the value a
fraction q of parts meets or beats, for independent deviations spread uniformly over each range
(``distribution = "uniform"``, the default) or normally with the range as +-3 sigma. The worse
side of a metric follows its objective (maximised: low values are worse) or constraint (a
``max`` limit: high values are worse). See :mod:`elopt.optimizer.study.tolerances`.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

from elopt.optimizer.config.toml_tools import as_choice, as_float, as_table, check_keys
from elopt.optimizer.errors import ConfigError
from elopt.optimizer.study.tolerances import (
    MAX_CORNER_TOLERANCES,
    Tolerance,
    ToleranceSpec,
    Treatment,
)

_TOP_KEYS = ("method", "nonlinearity_limit", "parameters", "mounting", "apply")


def parse_tolerances(
    table: Mapping[str, Any],
    *,
    parameter_names: Sequence[str],
    mounting_names: Sequence[str],
    directions: Mapping[str, str],
    where: str = "tolerance",
) -> ToleranceSpec:
    """A validated :class:`ToleranceSpec`.

    ``parameter_names`` are the family's parameters, ``mounting_names`` those it declares as
    mounting quantities (standoff, tilt, ...); ``directions`` maps each objective or
    constraint metric to its worse side ("low" or "high", or "both" for a two-sided
    constraint, which cannot take a one-sided worst case).
    """
    check_keys(table, _TOP_KEYS, where)
    method = as_choice(
        table.get("method", "auto"), f"{where}.method", ("auto", "first_order", "corners")
    )
    limit = as_float(
        table.get("nonlinearity_limit", 0.2), f"{where}.nonlinearity_limit", low=1e-3, high=1.0
    )
    tolerances: list[Tolerance] = []
    manufacturing = as_table(table.get("parameters", {}), f"{where}.parameters")
    mounting = as_table(table.get("mounting", {}), f"{where}.mounting")
    for group, entries in (("parameters", manufacturing), ("mounting", mounting)):
        for name, value in entries.items():
            key = f"{where}.{group}.{name}"
            if name not in parameter_names:
                raise ConfigError(
                    f"{key}: the family has no parameter '{name}'; its parameters are "
                    f"{', '.join(parameter_names)}"
                )
            if group == "mounting" and name not in mounting_names:
                raise ConfigError(
                    f"{key}: '{name}' is not a mounting quantity of this family; its mounting "
                    f"parameters are {', '.join(mounting_names) or '(none)'} (give "
                    "manufacturing tolerances under [tolerance.parameters])"
                )
            if any(t.name == name for t in tolerances):
                raise ConfigError(f"{key}: '{name}' has a tolerance already")
            tolerances.append(_tolerance(name, value, key))
    active = sum(t.width > 0 for t in tolerances)
    if method == "corners" and active > MAX_CORNER_TOLERANCES:
        raise ConfigError(
            f"{where}.method: 'corners' with {active} tolerances needs 2^{active} solves per "
            f"trial; allowed: at most {MAX_CORNER_TOLERANCES} tolerances (or method = "
            '"first_order")'
        )
    treatments = {}
    for metric, value in as_table(table.get("apply", {}), f"{where}.apply").items():
        key = f"{where}.apply.{metric}"
        if metric not in directions:
            raise ConfigError(
                f"{key}: '{metric}' is not an objective or constraint of this study; those are "
                f"{', '.join(directions)}"
            )
        treatments[metric] = _treatment(value, key, directions[metric])
    if treatments and not tolerances:
        raise ConfigError(
            f"{where}.apply: treatments given but no tolerance; add [{where}.parameters] or "
            f"[{where}.mounting]"
        )
    return ToleranceSpec(tuple(tolerances), treatments, method, limit)


def _tolerance(name: str, value: Any, key: str) -> Tolerance:
    if isinstance(value, dict):
        check_keys(value, ("minus", "plus"), key)
        minus = as_float(value.get("minus", 0.0), f"{key}.minus", low=0.0)
        plus = as_float(value.get("plus", 0.0), f"{key}.plus", low=0.0)
    else:
        minus = plus = as_float(value, key, low=0.0)
    if minus + plus <= 0.0:
        raise ConfigError(
            f"{key}: a tolerance needs a range > 0, got minus = {minus}, plus = {plus}"
        )
    return Tolerance(name, minus, plus)


def _treatment(value: Any, key: str, direction: str) -> Treatment:
    if direction == "both" and value != "nominal":
        raise ConfigError(
            f"{key}: a constraint with both a min and a max has no single worse side; "
            'allowed here: "nominal"'
        )
    if isinstance(value, str):
        kind = as_choice(value, key, ("nominal", "worst"))
        return Treatment(kind, "high" if direction == "high" else "low")
    table = as_table(value, key)
    check_keys(table, ("quantile", "distribution"), key)
    q = as_float(
        table.get("quantile"), f"{key}.quantile", low=0.5, high=1.0, low_open=True, high_open=True
    )
    dist = as_choice(
        table.get("distribution", "uniform"), f"{key}.distribution", ("uniform", "normal")
    )
    return Treatment("quantile", "high" if direction == "high" else "low", q, dist)

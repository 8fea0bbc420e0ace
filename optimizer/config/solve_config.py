"""Reader of the TOML config of ``elopt solve``: one design of one electrode family.

    title = "..."                      # optional
    [geometry]                         # family + that family's parameters
    family = "guarded_disk"
    sensor_radius_mm = 4.0 ...
    [solver]                           # optional
    rel_accuracy = 1e-4
    peak_rel_accuracy = 1e-3           # optional: a request on the peak surface field
    [medium]                           # optional (shared with study configs)
    eps_r = 1.0
    breakdown_field_V_per_m = 3e6
    [evaluation]                       # optional: the family's evaluation options

``[medium]``, ``[evaluation]`` and ``solver.peak_rel_accuracy`` are read exactly as a study
reads them
(:mod:`elopt.optimizer.config.shared_tables`). Every problem is one :class:`ConfigError` line
that starts with the config's path.
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from elopt.optimizer.config.shared_tables import (
    AIR_BREAKDOWN_V_PER_M,
    MediumSpec,
    parse_medium,
    parse_options,
    parse_peak_accuracy,
    read_params,
)
from elopt.optimizer.config.toml_tools import as_float, as_table, check_keys, load_toml, require
from elopt.optimizer.errors import ConfigError
from elopt.physics.electrodes.base import ElectrodeFamily
from elopt.physics.errors import ElectrodeError

DEFAULT_REL_ACCURACY = 1e-4
TOP_KEYS = ("title", "geometry", "solver", "medium", "evaluation")

__all__ = ["AIR_BREAKDOWN_V_PER_M", "SolveSpec", "parse_solve_config", "read_solve_config"]


@dataclass(frozen=True)
class SolveSpec:
    """A validated solve config. ``params``/``options`` are the family's dataclasses."""

    path: str
    title: str
    family: str
    params: Any
    options: Any
    rel_accuracy: float
    medium: MediumSpec
    peak_rel_accuracy: float | None = None

    @property
    def eps_r(self) -> float:
        return self.medium.eps_r

    @property
    def breakdown_field_V_per_m(self) -> float | None:
        return self.medium.breakdown_field_V_per_m

    @property
    def breakdown_source(self) -> str:
        return self.medium.breakdown_source


def _family(geometry: dict[str, Any], path: str) -> ElectrodeFamily:
    # The registry loads every family and its solver (numba kernels): only when a config is
    # read, so that importing the config package stays light for worker processes.
    from elopt.physics.electrodes.registry import FAMILIES

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
        params = read_params(family, geometry, "geometry", Path(path).parent)
        options = parse_options(family, as_table(table.get("evaluation", {}), "evaluation"))
        solver = as_table(table.get("solver", {}), "solver")
        check_keys(solver, ("rel_accuracy", "peak_rel_accuracy"), "solver")
        rel_accuracy = as_float(
            solver.get("rel_accuracy", DEFAULT_REL_ACCURACY),
            "solver.rel_accuracy",
            low=1e-8,
            high=0.1,
        )
        peak_rel_accuracy = parse_peak_accuracy(solver)
        medium = parse_medium(as_table(table.get("medium", {}), "medium"))
        try:
            family.validate(params)
        except ElectrodeError as exc:
            raise ConfigError(str(exc)) from None
    except ConfigError as exc:
        msg = str(exc)
        raise ConfigError(msg if msg.startswith(path) else f"{path}: {msg}") from None
    return SolveSpec(
        path=path,
        title=title,
        family=family.name,
        params=params,
        options=options,
        rel_accuracy=rel_accuracy,
        medium=medium,
        peak_rel_accuracy=peak_rel_accuracy,
    )


def read_solve_config(path: str | Path) -> SolveSpec:
    """Load and validate a solve config file; one-line ConfigError on any problem."""
    table, _ = load_toml(path)
    return parse_solve_config(table, str(path))

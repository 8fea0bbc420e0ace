"""Configs: one design for ``elopt solve``, a study definition for ``elopt run``.

Both are TOML files read into frozen specs; every problem is one :class:`ConfigError` line
naming the key, the value and the rule. ``[medium]`` and ``[evaluation]`` mean the same in
both, so a study trial evaluates a design exactly as ``elopt solve`` does. Import from here;
the modules behind it (``solve_config``, ``study_config``, ``shared_tables``,
``tolerance_config``, ``toml_tools``) are implementation.
"""

from elopt.optimizer.config.shared_tables import AIR_BREAKDOWN_V_PER_M, MediumSpec
from elopt.optimizer.config.solve_config import SolveSpec, parse_solve_config, read_solve_config
from elopt.optimizer.config.study_config import (
    Budget,
    Constraint,
    Objective,
    SamplerSpec,
    SearchRange,
    StudySpec,
    default_workers,
    identity_differences,
    load_study_config,
    parse_budget,
    parse_study_config,
    resolve_family,
    study_identity,
)
from elopt.optimizer.config.tolerance_config import parse_tolerances
from elopt.optimizer.config.toml_tools import as_choice, as_float, as_int, load_toml

__all__ = [
    "AIR_BREAKDOWN_V_PER_M",
    "Budget",
    "Constraint",
    "MediumSpec",
    "Objective",
    "SamplerSpec",
    "SearchRange",
    "SolveSpec",
    "StudySpec",
    "as_choice",
    "as_float",
    "as_int",
    "default_workers",
    "identity_differences",
    "load_study_config",
    "load_toml",
    "parse_budget",
    "parse_solve_config",
    "parse_study_config",
    "parse_tolerances",
    "read_solve_config",
    "resolve_family",
    "study_identity",
]

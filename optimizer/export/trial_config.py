"""A stored trial as the ``elopt solve`` config that reproduces it.

The config names the family, every parameter at the trial's value (written with Python's
shortest round-trip float text, so the solve sees the very same numbers), the study's solver
accuracy, medium and evaluation options, so ``elopt solve`` evaluates the design exactly as
the study did.
"""

from __future__ import annotations

import math
import tomllib
from typing import Any

from elopt.optimizer.errors import StudyFileError
from elopt.optimizer.store import StudySnapshot

#: The study's default requested accuracy when its config gives none (study_config's default).
STUDY_DEFAULT_REL_ACCURACY = 1e-3


def toml_value(v: Any) -> str:
    """One TOML value: bools, whole numbers, floats (round-trip exact), strings, tables."""
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, str):
        return '"' + v.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{toml_key(k)} = {toml_value(x)}" for k, x in v.items()) + " }"
    if isinstance(v, list | tuple):
        return "[" + ", ".join(toml_value(x) for x in v) + "]"
    raise TypeError(f"no TOML form for {v!r}")


def toml_key(k: str) -> str:
    """A bare key when TOML allows one, else a quoted one."""
    return k if k and all(c.isalnum() or c in "_-" for c in k) else toml_value(k)


def _table(name: str, values: dict[str, Any]) -> list[str]:
    return [f"[{name}]", *(f"{k} = {toml_value(v)}" for k, v in values.items()), ""]


def trial_solve_config(
    snap: StudySnapshot, number: int, *, integer_names: set[str] = frozenset()
) -> str:
    """The solve config text of trial ``number``; ``integer_names`` are parameters the family
    types as whole numbers (written without a decimal point)."""
    h = snap.header
    state = snap.state_names()[number]
    if state == "failed":
        reason = snap.info(number).get("failure", "")
        note = f"# This trial failed in the study: {reason}\n"
    else:
        note = ""
    study = tomllib.loads(h.config_toml)
    solver = study.get("solver", {})
    geometry: dict[str, Any] = {"family": h.family}
    for k, name in enumerate(h.parameter_names):
        v = float(snap.columns["params"][number, k])
        if not math.isfinite(v):
            raise StudyFileError(f"TRIAL {number}: parameter {name} has no stored value ({v})")
        geometry[name] = int(round(v)) if name in integer_names else v
    medium = dict(study.get("medium", {}))
    if "eps_r" in solver:
        medium.setdefault("eps_r", solver["eps_r"])
    lines = [
        f"# Trial {number} of study {h.study_name} ({snap.path}), written by `elopt show`.",
        "# It reproduces the trial: elopt solve THIS_FILE.toml",
        *([note.rstrip()] if note else []),
        f'title = "study {h.study_name}, trial {number}"',
        "",
    ]
    lines += _table("geometry", geometry)
    # Every solver setting of the study but the medium's permittivity (in [medium] here).
    settings = {k: v for k, v in solver.items() if k != "eps_r"}
    settings.setdefault("rel_accuracy", STUDY_DEFAULT_REL_ACCURACY)
    lines += _table("solver", settings)
    if medium:
        lines += _table("medium", medium)
    if study.get("evaluation"):
        lines += _table("evaluation", dict(study["evaluation"]))
    return "\n".join(lines).rstrip() + "\n"

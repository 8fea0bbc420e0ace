"""What a reader checks before it trusts a study file: the header, the commit counter, and
every committed value. Each rule failure is one sentence naming the trial, the column, the
value and the rule; :class:`Damaged` carries it."""

from __future__ import annotations

from typing import Any

import numpy as np

from elopt.optimizer.store.layout import (
    COMMIT_FIELDS,
    FORMAT_VERSION,
    HEADER_LIST_ATTRS,
    OFFSET_COLUMNS,
    READABLE_VERSIONS,
    STATES,
    SURFACE_KIND_CODES,
    StudyHeader,
)


class Damaged(Exception):
    """A study file breaks a rule of its layout; the message says which (no path)."""


def format_version_of(value: Any) -> int:
    """The ``format_version`` attribute as an integer a reader knows, or :class:`Damaged`."""
    if value is None:
        raise Damaged("the attribute format_version is missing")
    if isinstance(value, (bytes, str)) or not np.issubdtype(np.asarray(value).dtype, np.integer):
        shown = value.decode(errors="replace") if isinstance(value, bytes) else value
        raise Damaged(
            f"the attribute format_version is {shown!r} ({type(value).__name__}); it must be "
            f"an integer, one of {', '.join(map(str, READABLE_VERSIONS))}"
        )
    version = int(value)
    if version > FORMAT_VERSION:
        raise Damaged(
            f"study format_version {version} is newer than this elopt reads ({FORMAT_VERSION}); "
            "update elopt"
        )
    if version not in READABLE_VERSIONS:
        raise Damaged(
            f"the attribute format_version is {version}; it must be one of "
            f"{', '.join(map(str, READABLE_VERSIONS))}"
        )
    return version


def check_header(h: StudyHeader) -> None:
    """Name lists agree in length with their value lists; directions and kinds are known."""
    pairs = [
        ("parameter_names", h.parameter_names),
        ("parameter_units", h.parameter_units),
        ("parameter_searched", h.parameter_searched),
        ("search_low", h.search_low),
        ("search_high", h.search_high),
        ("search_log", h.search_log),
        ("search_step", h.search_step),
    ]
    _same_length(pairs)
    _same_length([("metric_names", h.metric_names), ("metric_units", h.metric_units)])
    _same_length(
        [
            ("objective_names", h.objective_names),
            ("objective_directions", h.objective_directions),
            ("objective_units", h.objective_units),
        ]
    )
    _same_length(
        [(name, getattr(h, name)) for name in HEADER_LIST_ATTRS if name.startswith("constraint_")]
    )
    for d in h.objective_directions:
        if d not in ("maximize", "minimize"):
            raise Damaged(f"objective_directions holds {d!r}; allowed: 'maximize', 'minimize'")
    for k in h.constraint_kinds:
        if k not in ("max", "min"):
            raise Damaged(f"constraint_kinds holds {k!r}; allowed: 'max', 'min'")
    if not all(np.isfinite(h.constraint_limits)):
        raise Damaged(f"constraint_limits {list(h.constraint_limits)} must be finite")


def _same_length(pairs: list[tuple[str, tuple]]) -> None:
    n = len(pairs[0][1])
    for name, values in pairs[1:]:
        if len(values) != n:
            raise Damaged(f"attribute {name} has {len(values)} values, {pairs[0][0]} has {n}")


def check_counts(raw: np.ndarray) -> list[int]:
    """The commit counter as non-negative integers (one per :data:`COMMIT_FIELDS`)."""
    a = np.asarray(raw)
    if a.shape != (len(COMMIT_FIELDS),) or not np.issubdtype(a.dtype, np.integer):
        raise Damaged(
            f"dataset /commit has shape {a.shape} and dtype {a.dtype}; it must hold "
            f"{len(COMMIT_FIELDS)} integers ({', '.join(COMMIT_FIELDS)})"
        )
    for name, v in zip(COMMIT_FIELDS, a, strict=True):
        if v < 0:
            raise Damaged(f"the commit counter {name} is {int(v)}; counts are >= 0")
    return [int(v) for v in a]


def _first_bad(mask: np.ndarray) -> int:
    return int(np.flatnonzero(mask)[0])


def _codes(
    columns: dict[str, np.ndarray], name: str, allowed: tuple[int, ...], meaning: str
) -> None:
    v = columns[name]
    bad = ~np.isin(v, allowed)
    if bad.any():
        i = _first_bad(bad)
        raise Damaged(f"trial {i}: {name} code {int(v[i])} is unknown; allowed: {meaning}")


def check_columns(columns: dict[str, np.ndarray], header: StudyHeader, counts: list[int]) -> None:
    """Every committed row obeys the layout's rules (see STUDY_FILE.md, "What a reader checks")."""
    n = counts[0]
    if not np.array_equal(columns["number"], np.arange(n)):
        i = _first_bad(columns["number"] != np.arange(n))
        raise Damaged(f"trial {i}: number holds {int(columns['number'][i])}; it must equal its row")
    _codes(columns, "state", (0, 1, 2), ", ".join(f"{k} {s}" for k, s in enumerate(STATES)))
    for name in ("feasible", "accuracy_met", "peak_at_sharp_corner"):
        _codes(columns, name, (0, 1), "0 or 1")
    _codes(
        columns,
        "surface_kind",
        tuple(range(len(SURFACE_KIND_CODES))),
        ", ".join(f"{k} {s}" for k, s in enumerate(SURFACE_KIND_CODES)),
    )
    for name in OFFSET_COLUMNS + ("n_conductors", "n_unknowns"):
        v = columns[name]
        if (v < 0).any():
            i = _first_bad(v < 0)
            raise Damaged(f"trial {i}: {name} is {int(v[i])}; it must be >= 0")
    session = columns["session"]
    if ((session < -1) | (session >= counts[4])).any():
        i = _first_bad((session < -1) | (session >= counts[4]))
        raise Damaged(
            f"trial {i}: session {int(session[i])} is not a stored session (-1..{counts[4] - 1})"
        )
    nc = columns["n_conductors"].astype(np.int64)
    for name, ends, limit in (
        ("capacitance_offset", columns["capacitance_offset"] + nc * nc, counts[1]),
        ("surface_offset", columns["surface_offset"] + columns["surface_length"], counts[2]),
        ("text_offset", columns["text_offset"] + columns["text_length"], counts[3]),
    ):
        if (ends > limit).any():
            i = _first_bad(ends > limit)
            raise Damaged(
                f"trial {i}: {name} {int(columns[name][i])} reaches row {int(ends[i])}, past the "
                f"{limit} committed rows"
            )
    _check_numbers(columns, header)


def _check_numbers(columns: dict[str, np.ndarray], h: StudyHeader) -> None:
    complete = columns["state"] == 0
    for name in ("params", "metrics", "objectives", "constraints", "peak_location_m"):
        v = columns[name]
        bad = np.isinf(v)
        if bad.any():
            i, j = (int(x) for x in np.argwhere(bad)[0])
            raise Damaged(
                f"trial {i}: {_label(name, j, h)} is {v[i, j]}; stored numbers are finite or NaN"
            )
    for name in ("objectives", "constraints"):
        v = columns[name]
        bad = complete[:, None] & ~np.isfinite(v)
        if bad.any():
            i, j = (int(x) for x in np.argwhere(bad)[0])
            raise Damaged(
                f"trial {i}: {_label(name, j, h)} is {v[i, j]}; a complete trial's are finite"
            )
    for name in (
        "relative_error_estimate",
        "requested_accuracy",
        "peak_surface_field_V_per_m",
        "peak_rel_error_estimate",
        "solve_s",
    ):
        v = columns[name]
        bad = np.isinf(v) | (v < 0)
        if bad.any():
            i = _first_bad(bad)
            raise Damaged(f"trial {i}: {name} is {v[i]}; it must be >= 0 and finite (or NaN)")


def judged_metrics(metrics: np.ndarray, h: StudyHeader, infos: list[dict[str, Any]]) -> np.ndarray:
    """The values objectives and constraints judge: each trial's metrics (N, M), where the
    study asked for tolerances replaced by the toleranced values kept in the trial's text."""
    judged = np.array(metrics, dtype=float, copy=True)
    for i, info in enumerate(infos):
        tolerance = info.get("tolerance")
        values = tolerance.get("values") if isinstance(tolerance, dict) else None
        for name, value in (values or {}).items():
            if name in h.metric_names:
                v = value if isinstance(value, (int, float)) else np.nan
                judged[i, h.metric_names.index(name)] = v
    return judged


def check_judged(columns: dict[str, np.ndarray], h: StudyHeader, judged: np.ndarray) -> None:
    """A complete trial's objectives are the judged values of their metrics, its constraints
    their violations, and ``feasible`` is 1 exactly when every constraint holds."""
    complete = columns["state"] == 0
    for k, name in enumerate(h.objective_names):
        if name not in h.metric_names:
            continue  # a header whose family changed: `resume` names that, not this rule
        stored = columns["objectives"][complete, k]
        metric = judged[complete, h.metric_names.index(name)]
        if not np.array_equal(stored, metric):
            i = int(np.flatnonzero(complete)[_first_bad(stored != metric)])
            raise Damaged(f"trial {i}: objective {name} differs from the metric of that name")
    for j, (name, kind, limit) in enumerate(
        zip(h.constraint_metrics, h.constraint_kinds, h.constraint_limits, strict=True)
    ):
        if name not in h.metric_names:
            continue
        value = judged[complete, h.metric_names.index(name)]
        expected = value - limit if kind == "max" else limit - value
        stored = columns["constraints"][complete, j]
        off = ~(np.abs(stored - expected) <= 1e-12 * np.maximum(abs(limit), np.abs(value)))
        if off.any():
            i = int(np.flatnonzero(complete)[_first_bad(off)])
            raise Damaged(
                f"trial {i}: constraint {h.constraint_names[j]} holds {stored[_first_bad(off)]}, "
                f"but metric {name} gives {expected[_first_bad(off)]}"
            )
    feasible = complete & np.all(columns["constraints"] <= 0, axis=1)
    if not np.array_equal(feasible, columns["feasible"] == 1):
        i = _first_bad(feasible != (columns["feasible"] == 1))
        raise Damaged(
            f"trial {i}: feasible is {int(columns['feasible'][i])}, the constraints say otherwise"
        )


def _label(name: str, j: int, h: StudyHeader) -> str:
    names = {
        "params": h.parameter_names,
        "metrics": h.metric_names,
        "objectives": h.objective_names,
        "constraints": h.constraint_names,
    }.get(name)
    return f"{name} {names[j]}" if names and j < len(names) else f"{name}[{j}]"


def check_sessions(sessions: dict[str, np.ndarray]) -> None:
    bad = sessions["workers"] < 0
    if bad.any():
        raise Damaged(
            f"session {_first_bad(bad)}: workers is {int(sessions['workers'][bad][0])}; it must be >= 0"
        )
    bad = sessions["target_trials"] < -1
    if bad.any():
        raise Damaged(f"session {_first_bad(bad)}: target_trials is below -1 (none)")
    h = sessions["hours"]
    if (np.isinf(h) | (h <= 0)).any():
        raise Damaged(
            f"session {_first_bad(np.isinf(h) | (h <= 0))}: hours must be > 0 and finite (or NaN)"
        )


def check_arrays(
    owner: np.ndarray,
    n_conductors: np.ndarray,
    cap_owner: np.ndarray,
    cap: np.ndarray,
    surface: dict[str, np.ndarray],
) -> None:
    """Capacitance and surface rows obey the layout. ``owner`` (S,) and ``cap_owner`` (C,) give
    the trial of each surface / capacitance row, ``n_conductors`` (S,) that trial's count."""
    bad = np.isinf(cap)
    if bad.any():
        raise Damaged(f"trial {int(cap_owner[_first_bad(bad)])}: capacitance_F holds {cap[bad][0]}")
    cond = surface["conductor"]
    bad = (cond < 0) | (cond >= n_conductors)
    if bad.any():
        j = _first_bad(bad)
        raise Damaged(
            f"trial {int(owner[j])}: surface conductor index {int(cond[j])} is outside "
            f"0..{int(n_conductors[j]) - 1}"
        )
    if "face" in surface:
        bad = ~np.isin(surface["face"], (-1, 0, 1))
        if bad.any():
            j = _first_bad(bad)
            raise Damaged(
                f"trial {int(owner[j])}: surface face code {int(surface['face'][j])}; allowed: -1, 0, +1"
            )
    for name, v in surface.items():
        if name in ("conductor", "face"):
            continue
        bad = np.isinf(v) if v.ndim == 1 else np.isinf(v).any(axis=1)
        if bad.any():
            raise Damaged(
                f"trial {int(owner[_first_bad(bad)])}: surface {name} holds an infinite value"
            )

"""What a study file says, read from a snapshot: the feasible front, counts, values by name,
the live-writer status and the high-voltage caution. No optuna, no solver."""

from __future__ import annotations

import os
import socket
import tomllib
from pathlib import Path

import numpy as np

from elopt.optimizer.errors import StudyFileError
from elopt.optimizer.report.numbers import ARROW
from elopt.optimizer.report.safety import high_voltage_caution
from elopt.optimizer.store import StudySnapshot


def nondominated_two(values: np.ndarray, directions: tuple[str, ...]) -> np.ndarray:
    """Non-dominated rows of ``values`` (N, 2) as an (N,) mask, by one sort: O(N log N).

    Minimising both columns, a row survives when its second value is the least among the rows
    with its first value and below every row with a smaller first value (equal rows survive
    together: neither dominates the other).
    """
    sign = np.array([-1.0 if d == "maximize" else 1.0 for d in directions])
    cost = np.asarray(values, dtype=float) * sign
    order = np.lexsort((cost[:, 1], cost[:, 0]))
    a, b = cost[order, 0], cost[order, 1]
    starts = np.flatnonzero(np.r_[True, a[1:] != a[:-1]])
    group = np.cumsum(np.r_[True, a[1:] != a[:-1]]) - 1
    group_min = b[starts]  # sorted by the second column within a group
    before = np.r_[np.inf, np.minimum.accumulate(group_min)[:-1]]
    keep_sorted = (b == group_min[group]) & (b < before[group])
    mask = np.zeros(len(cost), dtype=bool)
    mask[order] = keep_sorted
    return mask


def front_numbers(snap: StudySnapshot) -> np.ndarray:
    """Trial numbers of the feasible non-dominated trials, best first by the first objective."""
    c = snap.columns
    ok = np.flatnonzero((snap.state_names() == "complete") & (c["feasible"] == 1))
    if ok.size == 0:
        return ok
    directions = tuple(snap.header.objective_directions)
    if len(directions) == 2:
        mask = nondominated_two(c["objectives"][ok], directions)
    else:
        from elopt.optimizer.study.objectives import pareto_front_mask

        mask = pareto_front_mask(c["objectives"][ok], directions)
    front = ok[mask]
    first = c["objectives"][front, 0]
    order = np.argsort(
        -first if snap.header.objective_directions[0] == "maximize" else first, kind="stable"
    )
    return front[order]


def value_of(snap: StudySnapshot, name: str) -> np.ndarray | None:
    """(N,) values of an objective, metric or parameter for every trial; None if unknown."""
    h = snap.header
    c = snap.columns
    if name in h.objective_names:
        return c["objectives"][:, h.objective_names.index(name)]
    if name in h.metric_names:
        return c["metrics"][:, h.metric_names.index(name)]
    if name in h.parameter_names:
        return c["params"][:, h.parameter_names.index(name)]
    return None


def plottable_names(snap: StudySnapshot) -> list[str]:
    h = snap.header
    return list(dict.fromkeys(h.objective_names + h.metric_names + h.parameter_names))


def checked_name(snap: StudySnapshot, flag: str, name: str) -> str:
    """``name`` if the study has it, else a StudyFileError listing what it has."""
    allowed = plottable_names(snap)
    if name not in allowed:
        raise StudyFileError(f"{flag} {name}: not in this study; choose from {', '.join(allowed)}")
    return name


def unit_of(snap: StudySnapshot, name: str) -> str:
    h = snap.header
    if name in h.metric_names:
        return h.metric_units[h.metric_names.index(name)]
    if name in h.parameter_names:
        return h.parameter_units[h.parameter_names.index(name)]
    return ""


def is_log_sampled(snap: StudySnapshot, name: str) -> bool:
    h = snap.header
    if name not in h.parameter_names:
        return False
    k = h.parameter_names.index(name)
    return bool(h.parameter_searched[k] and h.search_log[k])


def constraint_limits_of(snap: StudySnapshot, name: str) -> list[tuple[str, float]]:
    """The study's limits on metric ``name`` as (kind 'max'|'min', limit) pairs."""
    h = snap.header
    return [
        (k, lim)
        for m, k, lim in zip(
            h.constraint_metrics, h.constraint_kinds, h.constraint_limits, strict=True
        )
        if m == name
    ]


def axis_label(snap: StudySnapshot, name: str) -> str:
    """An axis title: the name (its unit is in its suffix), and max/min for an objective."""
    h = snap.header
    if name in h.objective_names:
        i = h.objective_names.index(name)
        return f"{name} ({ARROW[h.objective_directions[i]]})"
    return name


def default_axes(snap: StudySnapshot) -> tuple[str, str]:
    h = snap.header
    if len(h.objective_names) >= 2:
        return h.objective_names[0], h.objective_names[1]
    other = [m for m in h.metric_names if m != h.objective_names[0]]
    return h.objective_names[0], (
        "peak_surface_field_V_per_m" if "peak_surface_field_V_per_m" in other else other[0]
    )


def reruns(snap: StudySnapshot) -> dict[int, int]:
    """Interrupted trial -> the later trial that ran it again (its info says ``rerun_of``)."""
    names = snap.state_names()
    out: dict[int, int] = {}
    for i in np.flatnonzero(names != "interrupted"):
        if '"rerun_of"' in snap.texts[int(i)]:  # cheap test before parsing the JSON
            number = snap.info(int(i)).get("rerun_of")
            if number is not None:
                out[int(number)] = int(i)
    return out


def study_counts(snap: StudySnapshot) -> dict[str, int]:
    """Trial counts; ``interrupted`` leaves out the interrupted trials already re-run."""
    names = snap.state_names()
    c = snap.columns
    interrupted = np.flatnonzero(names == "interrupted")
    rerun = reruns(snap) if interrupted.size else {}
    return {
        "trials": snap.n_trials,
        "complete": int(np.count_nonzero(names == "complete")),
        "feasible": int(np.count_nonzero((names == "complete") & (c["feasible"] == 1))),
        "failed": int(np.count_nonzero(names == "failed")),
        "interrupted": int(sum(1 for i in interrupted if int(i) not in rerun)),
        "rerun": len(rerun),
    }


def writer_status(path: Path) -> str | None:
    """'running (pid N)' when a live writer on this host holds the study, else None.

    Reads the lock file's text only: taking the lock, even shared, could make a writer that
    starts at that instant believe the study is busy.
    """
    lock = Path(str(path) + ".lock")
    try:
        text = lock.read_text()
    except OSError:
        return None
    parts = text.split()
    if len(parts) < 4 or parts[0] != "pid" or parts[3] != socket.gethostname():
        return None
    try:
        os.kill(int(parts[1]), 0)
    except (ProcessLookupError, ValueError):
        return None
    except PermissionError:
        pass
    return f"running (pid {parts[1]})"


def study_caution(snap: StudySnapshot) -> str | None:
    """The high-voltage caution when any trial (or the search range) drives above 50 V."""
    h = snap.header
    if "drive_V" not in h.parameter_names:
        return None
    k = h.parameter_names.index("drive_V")
    drives = np.abs(snap.columns["params"][:, k])
    top = float(np.nanmax(drives, initial=0.0))
    if h.parameter_searched[k]:
        top = max(top, abs(h.search_low[k]), abs(h.search_high[k]))
    return high_voltage_caution(top)


def fixed_words(config_toml: str) -> dict[str, str]:
    """The text and yes/no values of a study config's [fixed] table, written as TOML writes
    them (name -> "round", "true"); the study file holds numbers only."""
    try:
        fixed = tomllib.loads(config_toml).get("fixed", {})
    except tomllib.TOMLDecodeError:
        return {}
    words = {k: ("true" if v else "false") for k, v in fixed.items() if isinstance(v, bool)}
    words.update({k: v for k, v in fixed.items() if isinstance(v, str)})
    return words

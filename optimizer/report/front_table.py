"""``elopt front`` in the terminal: trial counts, the Pareto front table (any size, any
terminal width) and a text scatter with the front, the infeasible trials and the limits."""

from __future__ import annotations

import collections
from dataclasses import dataclass

import numpy as np
from rich import box
from rich.console import Console
from rich.table import Table
from rich.text import Text

from elopt.optimizer.report.numbers import ARROW, short_number, shown_unit, wrapped_name
from elopt.optimizer.report.study_view import (
    axis_label,
    checked_name,
    constraint_limits_of,
    default_axes,
    front_numbers,
    is_log_sampled,
    study_caution,
    study_counts,
    value_of,
    writer_status,
)
from elopt.optimizer.report.textplot import Series, scatter
from elopt.optimizer.store import StudySnapshot

#: Rows the table shows when the caller gives no ``top``.
DEFAULT_TOP = 30
#: Header names wrap after underscores at this many characters.
HEADER_WRAP = 12


@dataclass(frozen=True)
class FrontView:
    """How to show the front: at most ``top`` rows (0: all), ordered by ``sort`` (None: the
    first objective best first), ``reverse`` flips that order."""

    top: int = DEFAULT_TOP
    sort: str | None = None
    reverse: bool = False


def sorted_front(snap: StudySnapshot, view: FrontView, front: np.ndarray) -> np.ndarray:
    """The ``front`` trial numbers (best first) in the order ``view`` asks for."""
    if view.sort is not None and front.size:
        h = snap.header
        values = value_of(snap, view.sort)[front]
        # An objective sorts best first; anything else ascending (--reverse flips it).
        descending = view.sort in h.objective_names and (
            h.objective_directions[h.objective_names.index(view.sort)] == "maximize"
        )
        key = -values if descending else values
        front = front[np.argsort(key, kind="stable")]
    return front[::-1] if view.reverse else front


def render_front(
    console: Console,
    snap: StudySnapshot,
    x: str | None = None,
    y: str | None = None,
    view: FrontView | None = None,
) -> None:
    """Counts, the front table (with a note on rows or columns left out), failures, scatter."""
    view = view or FrontView()
    h = snap.header
    counts = study_counts(snap)
    status = writer_status(snap.path)
    console.print(Text(f"study {h.study_name} ({h.family}) — {snap.path}", style="bold"))
    console.print(
        f"{counts['trials']} trials: {counts['complete']} complete ({counts['feasible']} feasible), "
        f"{counts['failed']} failed, {counts['interrupted']} interrupted"
        + (f" ({counts['rerun']} re-run)" if counts["rerun"] else "")
        + (f" — {status}, this is a live read" if status else "")
    )
    if "[tolerance" in h.config_toml:
        console.print(
            "objectives and constraints are judged across the study's tolerances; "
            "`elopt show FILE TRIAL` lists nominal beside toleranced values"
        )
    best_first = front_numbers(snap)
    front = sorted_front(snap, view, best_first)
    if front.size == 0:
        console.print("no feasible trial yet, so no Pareto front")
    else:
        shown = front if view.top == 0 else front[: view.top]
        table, dropped = front_table(snap, shown, len(front), console.width)
        console.print(table)
        order = f"sorted by {view.sort}" if view.sort else f"sorted by {h.objective_names[0]}"
        order += ", reversed" if view.reverse else ""
        if len(shown) < len(front):
            console.print(
                Text(
                    f"showing {len(shown)} of {len(front)} front trials ({order}); "
                    "--top N shows more, --top 0 all; exports hold the whole front",
                    style="yellow",
                )
            )
        if dropped:
            console.print(
                Text(
                    f"not shown, the terminal is {console.width} columns wide: "
                    f"{', '.join(dropped)}; widen it, or read them with --csv/--json or "
                    "elopt show FILE TRIAL",
                    style="yellow",
                )
            )
    _print_failures(console, snap)
    xd, yd = default_axes(snap)
    console.print()
    for line in front_scatter(snap, x or xd, y or yd, best_first):
        console.print(Text(line), no_wrap=True, overflow="crop")
    caution = study_caution(snap)
    if caution:
        console.print(Text(caution, style="yellow"))


def _header(name: str, second: str | None) -> str:
    text = wrapped_name(name, HEADER_WRAP)
    return f"{text}\n{second}" if second else text


def front_table(
    snap: StudySnapshot, rows: np.ndarray, n_front: int, width: int
) -> tuple[Table, list[str]]:
    """The table of ``rows`` fitted to ``width`` columns, and the names left out to fit.

    Headers are never cut: each name wraps after underscores and its unit (and max/min) sits
    on a line of its own; a column that does not fit whole is left out and named instead.
    Constraint metrics go first, then parameters from the right (``elopt show`` has them all).
    """
    h = snap.header
    c = snap.columns
    constrained = [m for m in dict.fromkeys(h.constraint_metrics) if m not in h.objective_names]
    searched = [n for n, s in zip(h.parameter_names, h.parameter_searched, strict=True) if s]
    columns: list[tuple[str, str, list[str]]] = [("trial", "trial", [str(int(i)) for i in rows])]
    for k, (name, d, unit) in enumerate(
        zip(h.objective_names, h.objective_directions, h.objective_units, strict=True)
    ):
        cells = [short_number(v) for v in c["objectives"][rows, k]]
        tag = ARROW[d] if not shown_unit(unit) else f"{ARROW[d]} ({unit})"
        columns.append((name, _header(name, tag), cells))
    optional: list[tuple[str, str, list[str]]] = []
    for m in constrained:
        k = h.metric_names.index(m)
        cells = [short_number(v) for v in c["metrics"][rows, k]]
        unit = h.metric_units[k]
        optional.append((m, _header(m, None if not shown_unit(unit) else f"({unit})"), cells))
    for n in searched:
        k = h.parameter_names.index(n)
        unit = h.parameter_units[k]
        cells = [short_number(v) for v in c["params"][rows, k]]
        optional.append((n, _header(n, None if not shown_unit(unit) else f"({unit})"), cells))

    def needed(col: tuple[str, str, list[str]]) -> int:
        head = max(len(line) for line in col[1].split("\n"))
        return max([head, *(len(x) for x in col[2])]) + 2  # one space of padding each side

    budget = width - 2
    used = sum(needed(col) for col in columns)
    keep = list(optional)
    # Leave out constraint metrics first, then parameters from the right, until all fits.
    drop_order = [col for col in optional if col[0] in constrained] + [
        col for col in reversed(optional) if col[0] not in constrained
    ]
    dropped: list[str] = []
    for col in drop_order:
        if used + sum(needed(k) for k in keep) <= budget:
            break
        keep.remove(col)
        dropped.append(col[0])
    table = Table(
        title=f"Pareto front: {n_front} feasible non-dominated trials",
        title_justify="left",
        box=box.SIMPLE_HEAD,
    )
    for col in columns + keep:
        w = needed(col) - 2
        table.add_column(col[1], justify="right", no_wrap=True, min_width=w)
    for r in range(len(rows)):
        table.add_row(*[col[2][r] for col in columns + keep])
    return table, [col[0] for col in optional if col[0] in dropped]


def _print_failures(console: Console, snap: StudySnapshot) -> None:
    names = snap.state_names()
    failed = np.flatnonzero(names == "failed")
    if failed.size == 0:
        return
    reasons = collections.Counter(
        _short_reason(snap.info(int(i)).get("failure", "")) for i in failed
    )
    top = "; ".join(f"{r} (x{k})" for r, k in reasons.most_common(3))
    console.print(Text(f"failed trials: {failed.size}; most common: {top}"))


def _short_reason(reason: str) -> str:
    # Reasons carry the offending values; drop the numbers so equal rules group together.
    head = reason.split(", got")[0]
    return head[:110]


def trial_groups(snap: StudySnapshot, front: np.ndarray) -> dict[str, np.ndarray]:
    """Boolean masks (N,) of the infeasible, feasible-but-dominated and front trials."""
    names = snap.state_names()
    c = snap.columns
    complete = names == "complete"
    feasible = complete & (c["feasible"] == 1)
    on_front = np.zeros(snap.n_trials, dtype=bool)
    on_front[front] = True
    return {
        "infeasible": complete & ~feasible,
        "dominated": feasible & ~on_front,
        "front": on_front,
    }


def front_scatter(
    snap: StudySnapshot, x: str, y: str, front: np.ndarray | None = None
) -> list[str]:
    """Text scatter of ``y`` against ``x``: ``O`` front, ``.`` dominated, ``x`` infeasible;
    constraint limits on either axis drawn as lines, log-sampled parameters on a log axis."""
    checked_name(snap, "--x", x)
    checked_name(snap, "--y", y)
    xv, yv = value_of(snap, x), value_of(snap, y)
    g = trial_groups(snap, front_numbers(snap) if front is None else front)
    series = [
        Series(
            xv[g["infeasible"]],
            yv[g["infeasible"]],
            "x",
            f"infeasible ({int(g['infeasible'].sum())})",
        ),
        Series(
            xv[g["dominated"]], yv[g["dominated"]], ".", f"feasible ({int(g['dominated'].sum())})"
        ),
        Series(xv[g["front"]], yv[g["front"]], "O", f"Pareto front ({int(g['front'].sum())})"),
    ]
    return scatter(
        series,
        x_label=axis_label(snap, x),
        y_label=axis_label(snap, y),
        x_log=is_log_sampled(snap, x),
        y_log=is_log_sampled(snap, y),
        x_limits=[lim for _, lim in constraint_limits_of(snap, x)],
        y_limits=[lim for _, lim in constraint_limits_of(snap, y)],
    )

"""What a study looks like in the terminal: run progress, the Pareto front, one trial's detail,
and exports of the front (CSV, JSON). Reads only the study file (a snapshot), never optuna."""

from __future__ import annotations

import collections
import csv
import json
import math
import os
import socket
import sys
import time
from pathlib import Path
from typing import IO, Any

import numpy as np
from rich import box
from rich.console import Console, Group
from rich.live import Live
from rich.progress_bar import ProgressBar
from rich.table import Table
from rich.text import Text

from elopt.optimizer.report.safety import high_voltage_caution
from elopt.optimizer.report.textplot import Series, line_plot, scatter
from elopt.optimizer.store import StudySnapshot, TrialArrays
from elopt.optimizer.study import RunState, pareto_front_mask

ARROW = {"maximize": "max", "minimize": "min"}


# ----------------------------------------------------------------------------- front


def front_numbers(snap: StudySnapshot) -> np.ndarray:
    """Trial numbers of the feasible non-dominated trials, best first by the first objective."""
    c = snap.columns
    ok = np.flatnonzero((snap.state_names() == "complete") & (c["feasible"] == 1))
    if ok.size == 0:
        return ok
    mask = pareto_front_mask(c["objectives"][ok], snap.header.objective_directions)
    front = ok[mask]
    first = c["objectives"][front, 0]
    order = np.argsort(
        -first if snap.header.objective_directions[0] == "maximize" else first, kind="stable"
    )
    return front[order]


def _value_of(snap: StudySnapshot, name: str) -> np.ndarray | None:
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


def default_axes(snap: StudySnapshot) -> tuple[str, str]:
    h = snap.header
    if len(h.objective_names) >= 2:
        return h.objective_names[0], h.objective_names[1]
    other = [m for m in h.metric_names if m != h.objective_names[0]]
    return h.objective_names[0], (
        "peak_surface_field_V_per_m" if "peak_surface_field_V_per_m" in other else other[0]
    )


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


def study_counts(snap: StudySnapshot) -> dict[str, int]:
    names = snap.state_names()
    c = snap.columns
    return {
        "trials": snap.n_trials,
        "complete": int(np.count_nonzero(names == "complete")),
        "feasible": int(np.count_nonzero((names == "complete") & (c["feasible"] == 1))),
        "failed": int(np.count_nonzero(names == "failed")),
        "interrupted": int(np.count_nonzero(names == "interrupted")),
    }


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


def render_front(
    console: Console, snap: StudySnapshot, x: str | None = None, y: str | None = None
) -> None:
    h = snap.header
    counts = study_counts(snap)
    status = writer_status(snap.path)
    title = f"study {h.study_name} ({h.family}) — {snap.path}"
    console.print(Text(title, style="bold"))
    console.print(
        f"{counts['trials']} trials: {counts['complete']} complete ({counts['feasible']} feasible), "
        f"{counts['failed']} failed, {counts['interrupted']} interrupted"
        + (f" — {status}, this is a live read" if status else "")
    )
    front = front_numbers(snap)
    if front.size == 0:
        console.print("no feasible trial yet, so no Pareto front")
    else:
        console.print(_front_table(snap, front, console.width))
    _print_failures(console, snap)
    xd, yd = default_axes(snap)
    x, y = x or xd, y or yd
    console.print()
    for line in front_scatter(snap, x, y, front):
        console.print(Text(line))
    caution = study_caution(snap)
    if caution:
        console.print(Text(caution, style="yellow"))


def _front_table(snap: StudySnapshot, front: np.ndarray, width: int) -> Table:
    h = snap.header
    c = snap.columns
    extra_metrics = [m for m in dict.fromkeys(h.constraint_metrics) if m not in h.objective_names]
    searched = [n for n, s in zip(h.parameter_names, h.parameter_searched, strict=True) if s]
    # Numbers need about 10 characters a column; on a narrow terminal the constraint metrics
    # go first (`elopt show` has them all).
    if 8 + 10 * (1 + len(h.objective_names) + len(extra_metrics) + len(searched)) > width:
        extra_metrics = []
    n_cols = 1 + len(h.objective_names) + len(extra_metrics) + len(searched)
    wrap = max(7, (width - 8) // n_cols - 2)
    table = Table(
        title=f"Pareto front: {len(front)} feasible non-dominated trials",
        title_justify="left",
        box=box.SIMPLE_HEAD,
    )
    table.add_column("trial", justify="right")
    for name, d, unit in zip(
        h.objective_names, h.objective_directions, h.objective_units, strict=True
    ):
        table.add_column(f"{_wrapped_name(name, wrap)}\n{ARROW[d]} ({unit})", justify="right")
    for m in extra_metrics:
        unit = h.metric_units[h.metric_names.index(m)]
        table.add_column(f"{_wrapped_name(m, wrap)}\n({unit})", justify="right")
    for n in searched:
        table.add_column(_wrapped_name(n, wrap), justify="right", overflow="fold")
    for i in front:
        row = [str(int(i))]
        row += [_num(v) for v in c["objectives"][i]]
        row += [_num(c["metrics"][i, h.metric_names.index(m)]) for m in extra_metrics]
        row += [_num(c["params"][i, h.parameter_names.index(n)]) for n in searched]
        table.add_row(*row)
    return table


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


def front_scatter(
    snap: StudySnapshot, x: str, y: str, front: np.ndarray | None = None
) -> list[str]:
    from elopt.optimizer.errors import StudyFileError

    allowed = plottable_names(snap)
    for axis, name in (("--x", x), ("--y", y)):
        if name not in allowed:
            raise StudyFileError(
                f"{axis} {name}: not in this study; choose from {', '.join(allowed)}"
            )
    xv, yv = _value_of(snap, x), _value_of(snap, y)
    assert xv is not None and yv is not None
    names = snap.state_names()
    c = snap.columns
    front = front_numbers(snap) if front is None else front
    complete = names == "complete"
    feasible = complete & (c["feasible"] == 1)
    on_front = np.zeros(snap.n_trials, dtype=bool)
    on_front[front] = True
    infeasible = complete & ~feasible
    series = [
        Series(xv[infeasible], yv[infeasible], "x", f"infeasible ({int(infeasible.sum())})"),
        Series(
            xv[feasible & ~on_front],
            yv[feasible & ~on_front],
            ".",
            f"feasible ({int((feasible & ~on_front).sum())})",
        ),
        Series(xv[on_front], yv[on_front], "O", f"Pareto front ({int(on_front.sum())})"),
    ]
    return scatter(series, x_label=_axis_label(snap, x), y_label=_axis_label(snap, y))


def _axis_label(snap: StudySnapshot, name: str) -> str:
    h = snap.header
    if name in h.objective_names:
        i = h.objective_names.index(name)
        return f"{name} ({ARROW[h.objective_directions[i]]})"
    return name


def _num(v: float) -> str:
    """Four significant digits; a short exponent (3.384e4) outside [1e-3, 1e5)."""
    if not math.isfinite(v):
        return "-"
    if 1e3 <= abs(v) < 1e5:
        return f"{v:.0f}"
    if 1e-3 <= abs(v) < 1e3 or v == 0:
        return f"{v:.4g}"
    mantissa, exponent = f"{v:.3e}".split("e")
    return f"{mantissa}e{int(exponent)}"


def _wrapped_name(name: str, width: int = 12) -> str:
    """A long snake_case name broken after underscores (it stays exact when read joined)."""
    lines, line = [], ""
    for part in name.split("_"):
        piece = part if not line else "_" + part
        if line and len(line) + len(piece) > width:
            lines.append(line + "_")
            line = part
        else:
            line += piece
    lines.append(line)
    return "\n".join(lines)


def front_records(snap: StudySnapshot) -> list[dict[str, Any]]:
    """One dict per front trial: number, objectives, metrics, constraint violations, params."""
    h = snap.header
    c = snap.columns
    out = []
    for i in front_numbers(snap):
        out.append(
            {
                "trial": int(i),
                "objectives": dict(
                    zip(h.objective_names, map(float, c["objectives"][i]), strict=True)
                ),
                "metrics": dict(zip(h.metric_names, map(float, c["metrics"][i]), strict=True)),
                "constraint_violations": dict(
                    zip(h.constraint_names, map(float, c["constraints"][i]), strict=True)
                ),
                "params": dict(zip(h.parameter_names, map(float, c["params"][i]), strict=True)),
            }
        )
    return out


def write_front_csv(path: Path, snap: StudySnapshot) -> int:
    h = snap.header
    rows = front_records(snap)
    fields = ["trial", *h.objective_names]
    fields += [m for m in h.metric_names if m not in h.objective_names]
    fields += list(h.parameter_names)
    with open(path, "w", newline="", encoding="utf-8") as f:
        w = csv.writer(f)
        w.writerow(fields)
        for r in rows:
            merged = {"trial": r["trial"], **r["metrics"], **r["objectives"], **r["params"]}
            w.writerow([merged[k] for k in fields])
    return len(rows)


def write_front_json(path: Path, snap: StudySnapshot) -> int:
    h = snap.header
    rows = front_records(snap)
    doc = {
        "study": h.study_name,
        "family": h.family,
        "file": str(snap.path),
        "config_sha256": h.config_sha256,
        "objectives": [
            {"name": n, "direction": d, "unit": u}
            for n, d, u in zip(
                h.objective_names, h.objective_directions, h.objective_units, strict=True
            )
        ],
        "constraints": [
            {"name": n, "metric": m, "kind": k, "limit": lim, "unit": u}
            for n, m, k, lim, u in zip(
                h.constraint_names,
                h.constraint_metrics,
                h.constraint_kinds,
                h.constraint_limits,
                h.constraint_units,
                strict=True,
            )
        ],
        "units": {
            **dict(zip(h.metric_names, h.metric_units, strict=True)),
            **dict(zip(h.parameter_names, h.parameter_units, strict=True)),
        },
        "front": rows,
    }
    Path(path).write_text(json.dumps(doc, indent=2, allow_nan=False) + "\n", encoding="utf-8")
    return len(rows)


# ----------------------------------------------------------------------------- one trial


def render_trial(console: Console, snap: StudySnapshot, arrays: TrialArrays, number: int) -> None:
    h = snap.header
    c = snap.columns
    state = snap.state_names()[number]
    info = snap.info(number)
    feasible = state == "complete" and c["feasible"][number] == 1
    on_front = number in set(front_numbers(snap).tolist())
    verdict = state if state != "complete" else ("feasible" if feasible else "infeasible")
    verdict += ", on the Pareto front" if on_front else ""
    console.print(
        Text(f"trial {number} of study {h.study_name} ({h.family}) — {verdict}", style="bold")
    )
    solve = c["solve_s"][number]
    timing = f"solve {solve:.2f} s" if math.isfinite(solve) else "no solve"
    console.print(
        f"{timing}; worker {int(c['worker'][number])}; session {int(c['session'][number])}"
    )
    if info.get("failure"):
        console.print(Text(f"reason: {info['failure']}", style="red"))
    if "rerun_of" in info:
        console.print(f"re-run of interrupted trial {info['rerun_of']}")

    params = Table(title="parameters", title_justify="left")
    for col in ("name", "value", "unit", "range"):
        params.add_column(col, justify="right" if col == "value" else "left")
    for k, name in enumerate(h.parameter_names):
        rng = (
            f"[{h.search_low[k]:g}, {h.search_high[k]:g}]{' log' if h.search_log[k] else ''}"
            if h.parameter_searched[k]
            else "fixed"
        )
        params.add_row(name, _num(c["params"][number, k]), h.parameter_units[k], rng)
    console.print(params)
    if state != "complete":
        return

    metrics = Table(title="metrics", title_justify="left")
    for col in ("name", "value", "unit", "role"):
        metrics.add_column(col, justify="right" if col == "value" else "left")
    for k, name in enumerate(h.metric_names):
        roles = []
        if name in h.objective_names:
            roles.append(ARROW[h.objective_directions[h.objective_names.index(name)]] + "imise")
        for j, cm in enumerate(h.constraint_metrics):
            if cm == name:
                ok = c["constraints"][number, j] <= 0
                sign = "<=" if h.constraint_kinds[j] == "max" else ">="
                roles.append(f"{sign} {h.constraint_limits[j]:g}: {'ok' if ok else 'VIOLATED'}")
        metrics.add_row(name, _num(c["metrics"][number, k]), h.metric_units[k], ", ".join(roles))
    console.print(metrics)

    conductors = snap.conductor_names(number)
    cap = Table(title="capacitance matrix (fF)", title_justify="left")
    cap.add_column("")
    for n in conductors:
        cap.add_column(n, justify="right")
    for i, n in enumerate(conductors):
        cap.add_row(n, *[f"{v * 1e15:.5g}" for v in arrays.capacitance_F[i]])
    console.print(cap)

    peak = c["peak_surface_field_V_per_m"][number]
    pc = int(c["peak_conductor"][number])
    where = conductors[pc] if 0 <= pc < len(conductors) else "?"
    kind = arrays.surface[0].kind if arrays.surface else "profile"
    axes = ("x", "y", "z") if kind == "panels" else ("r", "z")
    at = ", ".join(
        f"{a} = {v * 1e3:.4g} mm" for a, v in zip(axes, c["peak_location_m"][number], strict=False)
    )
    console.print(f"peak surface field {peak:.4g} V/m ({peak * 1e-6:.3g} kV/mm) on {where} at {at}")
    if c["peak_at_sharp_corner"][number]:
        console.print(
            Text(
                "the peak sits at a sharp edge: its value depends on the mesh, not a design number "
                "(round the edge with a fillet)",
                style="yellow",
            )
        )
    err = c["relative_error_estimate"][number]
    met = "met" if c["accuracy_met"][number] else "NOT met"
    console.print(f"solve error estimate {err:.2g} (requested accuracy {met})")
    console.print()
    for text in sigma_plot(arrays):
        console.print(Text(text))
    caution = study_caution(snap)
    if caution:
        console.print(Text(caution, style="yellow"))


def sigma_plot(arrays: TrialArrays) -> list[str]:
    """sigma (uC/m^2) on each conductor: a trace against arc length (mm) for profiles, one per
    face of an open sheet; a scatter against height z (mm) for 3-D panels, which have no arc
    length."""
    if not arrays.surface:
        return ["(no surface-charge profile stored)"]
    series = []
    used: set[str] = set()
    panels = arrays.surface[0].kind == "panels"
    for s in arrays.surface:
        for face in np.unique(s.face):
            sel = s.face == face
            name = s.conductor + {1: " (+ face)", -1: " (- face)"}.get(int(face), "")
            marker = next((ch for ch in name if ch.isalnum() and ch not in used), "*")
            used.add(marker)
            x = s.points_m[sel, -1] if panels else s.arc_length_m[sel]
            series.append(Series(x * 1e3, s.sigma_C_per_m2[sel] * 1e6, marker, name))
    if panels:
        return scatter(series, x_label="height z of the panel [mm]", y_label="sigma [uC/m^2]")
    return line_plot(
        series, x_label="arc length along the electrode [mm]", y_label="sigma [uC/m^2]"
    )


# ----------------------------------------------------------------------------- progress


def _hms(seconds: float | None) -> str:
    if seconds is None or not math.isfinite(seconds):
        return "?"
    s = int(round(seconds))
    h, rem = divmod(s, 3600)
    m, s = divmod(rem, 60)
    return f"{h}h{m:02d}m" if h else f"{m}m{s:02d}s"


def _budget_text(state: RunState) -> str:
    t = state.limits.target_trials
    return f"{state.n_finished}/{t}" if t is not None else f"{state.n_finished}"


def _best_text(state: RunState) -> str:
    parts = []
    for o, b, n in zip(state.spec.objectives, state.best, state.best_trial, strict=True):
        parts.append(
            f"{o.metric} {_num(b) if b is not None else '-'} ({ARROW[o.direction]}, #{n})"
            if b is not None
            else f"{o.metric} -"
        )
    return ", ".join(parts)


def summary_line(state: RunState) -> str:
    return (
        f"[{_hms(state.elapsed_s())}] {_budget_text(state)} trials "
        f"(+{state.finished_this_run} this run), {state.n_feasible} feasible, {state.n_failed} failed, "
        f"{state.in_flight} in flight | best {_best_text(state)} | ETA {_hms(state.eta_s())}"
    )


class PlainProgress:
    """Plain lines for logs and batch jobs: one every ``every_s`` seconds (0: one per trial)."""

    def __init__(self, stream: IO[str] | None = None, every_s: float = 60.0) -> None:
        self._stream = stream or sys.stdout
        self._every_s = every_s
        self._last = 0.0

    def _say(self, text: str) -> None:
        print(text, file=self._stream, flush=True)

    def started(self, state: RunState) -> None:
        self._last = time.monotonic()
        self._say(
            f"elopt: study {state.spec.name}: {state.n_stored} trials stored, target "
            f"{state.limits.target_trials if state.limits.target_trials is not None else '-'}"
            f", {state.workers} workers, sampler {state.sampler_kind}"
        )

    def trial_stored(self, state: RunState) -> None:
        if self._every_s == 0:
            self._say(
                f"trial {state.last_number} stored ({state.last_state}) | {summary_line(state)}"
            )

    def tick(self, state: RunState) -> None:
        now = time.monotonic()
        if self._every_s > 0 and now - self._last >= self._every_s:
            self._last = now
            self._say(summary_line(state))

    def finished(self, state: RunState, reason: str) -> None:
        self._say(summary_line(state))


class RichProgress:
    """A live panel on a terminal: bar of trials done / budget, counts, best, elapsed, ETA."""

    def __init__(self, console: Console) -> None:
        self._console = console
        self._live: Live | None = None

    def _view(self, state: RunState) -> Group:
        t = state.limits.target_trials
        done = state.n_finished
        if t is not None:
            bar = ProgressBar(total=max(t, 1), completed=min(done, t), width=40)
        elif state.limits.deadline_unix is not None:
            span = state.limits.deadline_unix - state.started_unix
            bar = ProgressBar(
                total=max(span, 1.0), completed=min(state.elapsed_s(), span), width=40
            )
        else:
            bar = ProgressBar(total=None, width=40)
        grid = Table.grid(padding=(0, 2))
        grid.add_column(style="bold")
        grid.add_column()
        grid.add_row("budget", bar)
        grid.add_row(
            "trials",
            f"{_budget_text(state)} (+{state.finished_this_run} this run), {state.in_flight} in flight",
        )
        grid.add_row("feasible", f"{state.n_feasible}   failed {state.n_failed}")
        for o, b, n in zip(state.spec.objectives, state.best, state.best_trial, strict=True):
            grid.add_row(
                f"best {o.metric}",
                f"{_num(b)} ({ARROW[o.direction]}, trial {n})" if b is not None else "-",
            )
        grid.add_row("elapsed", f"{_hms(state.elapsed_s())}   ETA {_hms(state.eta_s())}")
        grid.add_row("sampler", state.sampler_kind)
        return Group(Text(f"study {state.spec.name}", style="bold"), grid)

    def started(self, state: RunState) -> None:
        self._live = Live(
            self._view(state), console=self._console, refresh_per_second=4, transient=False
        )
        self._live.start()

    def trial_stored(self, state: RunState) -> None:
        if self._live:
            self._live.update(self._view(state))

    def tick(self, state: RunState) -> None:
        if self._live:
            self._live.update(self._view(state))

    def finished(self, state: RunState, reason: str) -> None:
        if self._live:
            self._live.update(self._view(state))
            self._live.stop()
            self._live = None

"""``elopt show`` in the terminal: one trial's parameters, metrics and their roles, the
capacitance matrix, the peak surface field and where it sits, and sigma along each conductor."""

from __future__ import annotations

import math

import numpy as np
from rich.console import Console
from rich.table import Table
from rich.text import Text

from elopt.optimizer.report.numbers import short_number, shown_unit
from elopt.optimizer.report.study_view import fixed_words, front_numbers, reruns, study_caution
from elopt.optimizer.report.textplot import Series, line_plot, scatter
from elopt.optimizer.store import StudySnapshot, TrialArrays
from elopt.physics.electrodes.cross_section import is_cross_section
from elopt.physics.solution import covered_entries_text


def render_trial(console: Console, snap: StudySnapshot, arrays: TrialArrays, number: int) -> None:
    h = snap.header
    c = snap.columns
    state = snap.state_names()[number]
    info = snap.info(number)
    feasible = state == "complete" and c["feasible"][number] == 1
    on_front = number in set(front_numbers(snap).tolist())
    verdict = state if state != "complete" else ("feasible" if feasible else "infeasible")
    verdict += ", on the Pareto front" if on_front else ""
    if state == "interrupted" and number in reruns(snap):
        verdict = f"interrupted, then re-run as trial {reruns(snap)[number]}"
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

    # Text and yes/no values are not numbers in the study file: show them as the config wrote them.
    written = fixed_words(h.config_toml)
    params = Table(title="parameters", title_justify="left")
    for col in ("name", "value", "unit", "range"):
        params.add_column(col, justify="right" if col == "value" else "left", overflow="fold")
    for k, name in enumerate(h.parameter_names):
        rng = (
            f"[{h.search_low[k]:g}, {h.search_high[k]:g}]{' log' if h.search_log[k] else ''}"
            if h.parameter_searched[k]
            else "fixed"
        )
        value = short_number(c["params"][number, k])
        if name in written and not h.parameter_searched[k]:
            value = written[name]
        params.add_row(name, value, shown_unit(h.parameter_units[k]), rng)
    console.print(params)
    if state != "complete":
        return

    metrics = Table(title="metrics", title_justify="left")
    for col in ("name", "value", "unit", "role"):
        metrics.add_column(col, justify="right" if col == "value" else "left", overflow="fold")
    for k, name in enumerate(h.metric_names):
        roles = []
        if name in h.objective_names:
            roles.append(h.objective_directions[h.objective_names.index(name)])
        for j, cm in enumerate(h.constraint_metrics):
            if cm == name:
                ok = c["constraints"][number, j] <= 0
                sign = "<=" if h.constraint_kinds[j] == "max" else ">="
                roles.append(f"{sign} {h.constraint_limits[j]:g}: {'ok' if ok else 'VIOLATED'}")
        metrics.add_row(
            name,
            short_number(c["metrics"][number, k]),
            shown_unit(h.metric_units[k]),
            ", ".join(roles),
        )
    console.print(metrics)
    tolerance = info.get("tolerance")
    if isinstance(tolerance, dict):
        _tolerance_table(console, h, c, number, tolerance)

    conductors = snap.conductor_names(number)
    section = is_cross_section(h.family)
    # A cross-section's matrix is per metre of length: pF/m reads like the family's metrics.
    unit, scale = ("pF/m", 1e12) if section else ("fF", 1e15)
    title = f"capacitance matrix ({unit})"
    cap = Table(title=title, title_justify="left", min_width=len(title))
    cap.add_column("")
    for n in conductors:
        cap.add_column(n, justify="right")
    for i, n in enumerate(conductors):
        cap.add_row(n, *[f"{v * scale:.5g}" for v in arrays.capacitance_F[i]])
    console.print(cap)
    if "period_m" in info.get("extra", {}):
        console.print("(the comb's interior periodic cell: one finger of each comb per period)")

    peak = c["peak_surface_field_V_per_m"][number]
    pc = int(c["peak_conductor"][number])
    where = conductors[pc] if 0 <= pc < len(conductors) else "?"
    kind = arrays.surface[0].kind if arrays.surface else "profile"
    axes = ("x", "y", "z") if kind == "panels" else (("x", "z") if section else ("r", "z"))
    at = ", ".join(
        f"{a} = {v * 1e3:.4g} mm" for a, v in zip(axes, c["peak_location_m"][number], strict=False)
    )
    console.print(f"peak surface field {peak:.4g} V/m ({peak * 1e-6:.3g} kV/mm) on {where} at {at}")
    whole = _metric_peak(h, c, number)
    if info.get("extra", {}).get("peak_on_outer_fingers") and whole is not None:
        console.print(
            f"that is the interior cell's peak; over the whole comb the peak is {whole:.4g} V/m, "
            "on an outer finger (the metric and the field limit use this one)"
        )
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
    covers = info.get("relative_error_estimate_covers") or conductors
    whole_matrix = info.get("matrix_relative_error_estimate")
    every = (
        f"; every entry {whole_matrix:.2g}"
        if len(covers) < len(conductors) and isinstance(whole_matrix, (int, float))
        else ""
    )
    console.print(
        f"solve error estimate {err:.2g} of {covered_entries_text(covers, conductors)} "
        f"(requested accuracy {met}){every}"
    )
    console.print()
    for text in sigma_plot(arrays):
        console.print(Text(text))
    caution = study_caution(snap)
    if caution:
        console.print(Text(caution, style="yellow"))


def _metric_peak(h, c, number: int) -> float | None:
    """The trial's peak-field metric (V/m), or None when the family does not report it."""
    name = "peak_surface_field_V_per_m"
    if name not in h.metric_names:
        return None
    value = float(c["metrics"][number, h.metric_names.index(name)])
    return value if math.isfinite(value) else None


def _tolerance_table(console: Console, h, c, number: int, tolerance: dict) -> None:
    """Nominal beside toleranced value of each judged metric, and the tolerance driving it."""
    judged = tolerance.get("values", {})
    drivers = tolerance.get("driver", {})
    table = Table(title="across tolerances (the roles above judge these)", title_justify="left")
    for col in ("name", "nominal", "toleranced", "unit", "driven by"):
        table.add_column(
            col,
            justify="right" if col in ("nominal", "toleranced") else "left",
            overflow="fold",  # a metric's name is what a config spells: wrap it, never cut it
        )
    for k, name in enumerate(h.metric_names):
        if name in judged:
            table.add_row(
                name,
                short_number(c["metrics"][number, k]),
                short_number(float(judged[name])),
                h.metric_units[k],
                str(drivers.get(name, "")),
            )
    console.print(table)
    how = str(tolerance.get("method", "?")).replace("_", " ")
    why = f" ({tolerance['reason']})" if tolerance.get("reason") else ""
    console.print(
        f"toleranced by {how}{why}: {tolerance.get('evaluations', '?')} solves in "
        f"{float(tolerance.get('seconds', math.nan)):.2f} s"
    )


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

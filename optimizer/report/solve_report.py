"""The terminal report of ``elopt solve``: design, metrics, capacitances, peak field, picture.

Everything is drawn on a rich Console, so it degrades to plain text off a terminal. Numbers
come from :mod:`elopt.optimizer.record` (warnings, caution) and the family's metric registry
(names, units, meanings), so the report and ``--json`` always agree.
"""

from __future__ import annotations

import dataclasses
from typing import TYPE_CHECKING

import numpy as np
from rich.console import Console
from rich.table import Table
from rich.text import Text

from elopt.optimizer.config import SolveSpec
from elopt.optimizer.record import drive_of, solve_warnings
from elopt.optimizer.report.numbers import shown_unit
from elopt.optimizer.report.safety import high_voltage_caution
from elopt.optimizer.report.section_picture import section_picture
from elopt.optimizer.report.textplot import Series, line_plot
from elopt.physics.electrodes.base import ElectrodeFamily, Evaluation, parameter_units
from elopt.physics.electrodes.target_spot import cumulative_on_plane

if TYPE_CHECKING:
    from elopt.physics.solution import ChargeSolution


def _num(v: float) -> str:
    if not np.isfinite(v):
        return "n/a"
    if v == int(v) and 1e4 <= abs(v) < 1e9:
        return f"{int(v):,}"
    return f"{v:.4g}" if 1e-3 <= abs(v) < 1e6 or v == 0 else f"{v:.3e}"


def _percent(fraction: float) -> str:
    """A relative change in per cent, two significant digits, no exponent (140%, 2.1%, 0.0034%)."""
    pct = abs(100 * fraction)
    if pct < 1e-3:
        return "less than 0.001%"
    return f"{pct:.0f}%" if pct >= 10 else f"{float(f'{pct:.2g}'):g}%"


def _design_table(spec: SolveSpec) -> Table:
    table = Table(title="Design", title_justify="left", show_edge=False, pad_edge=False)
    table.add_column("parameter")
    table.add_column("value", justify="right")
    table.add_column("unit")
    units = parameter_units(spec.params)
    for f in dataclasses.fields(spec.params):
        value = getattr(spec.params, f.name)
        if isinstance(value, tuple):
            # Structured parameters (the conductors of a mesh_file design): one row each.
            for item in value:
                table.add_row(
                    f"{f.name}: {getattr(item, 'name', '')}", str(getattr(item, "file", item)), ""
                )
            continue
        if isinstance(value, bool):
            shown = "true" if value else "false"  # as TOML writes it
        else:
            shown = value if isinstance(value, str) else _num(float(value))
        table.add_row(f.name, shown, shown_unit(units[f.name]))
    table.add_row("eps_r (medium)", _num(spec.eps_r), shown_unit(""))
    return table


def _metrics_table(family: ElectrodeFamily, evaluation: Evaluation) -> Table:
    table = Table(title="Metrics", title_justify="left", show_edge=False, pad_edge=False)
    table.add_column("metric", overflow="fold")  # the exact name a study config spells
    table.add_column("value", justify="right", style="bold")
    table.add_column("unit")
    table.add_column("meaning", style="dim")
    # The family's own words for its sense capacitance (a mesh_file design has no guard).
    sense_meaning = str(evaluation.extra.get("sense_capacitance_meaning", ""))
    for m in family.metrics:
        meaning = sense_meaning if m.name == "sense_capacitance_fF" and sense_meaning else None
        table.add_row(
            m.name, _num(evaluation.metrics[m.name]), shown_unit(m.unit), meaning or m.description
        )
    return table


def _capacitance_table(evaluation: Evaluation) -> Table:
    sol = evaluation.solution
    c = sol.capacitance_matrix_F
    scale, unit = (1e15, "fF") if np.max(np.abs(c)) < 1e-11 else (1e12, "pF")
    if getattr(sol, "planar", False):
        unit += "/m"  # a cross-section's matrix is per metre of length
    table = Table(
        title=f"Capacitance matrix ({unit})",
        title_justify="left",
        show_edge=False,
        pad_edge=False,
        min_width=30,
    )
    table.add_column("")
    names = sol.layout.names
    for n in names:
        table.add_column(n, justify="right")
    for i, n in enumerate(names):
        table.add_row(n, *(_num(scale * c[i, j]) for j in range(len(names))))
    return table


def _peak_lines(spec: SolveSpec, evaluation: Evaluation) -> list[Text]:
    sol = evaluation.solution
    peak = sol.peak_field
    where = [1e3 * x for x in peak.location_m]
    line = Text("Peak surface field ")
    line.append(
        f"{peak.field_V_per_m:.4g} V/m = {peak.field_V_per_m / 1e6:.3g} kV/mm", style="bold"
    )
    if np.isfinite(peak.rel_error_estimate):
        line.append(
            f"   (changed {_percent(peak.rel_error_estimate)} on the last refinement)", style="dim"
        )
    planar = bool(getattr(evaluation.solution, "planar", False))
    names = ("x", "z") if planar else ("r", "z") if len(where) == 2 else ("x", "y", "z")
    at = ", ".join(f"{n} = {v:.4g} mm" for n, v in zip(names, where, strict=True))
    out = [line, Text(f"  on {peak.conductor} at {at}")]
    if spec.breakdown_field_V_per_m is not None:
        share = peak.field_V_per_m / spec.breakdown_field_V_per_m
        out.append(
            Text(
                f"  {100 * share:.3g}% of the breakdown field "
                f"{spec.breakdown_field_V_per_m / 1e6:.3g} kV/mm ({spec.breakdown_source})"
            )
        )
    else:
        out.append(
            Text(f"  breakdown field: {spec.breakdown_source}; no limit checked", style="dim")
        )
    out.append(
        Text(
            f"Solver: {sol.n_unknowns} unknowns, refinement level {getattr(sol, 'level', '?')}, "
            f"estimated relative error {sol.rel_error_estimate:.2g} of {sol.estimate_scope} "
            f"(asked {sol.requested_accuracy:.2g}){_matrix_note(sol)}",
            style="dim",
        )
    )
    return out


def _matrix_note(sol: ChargeSolution) -> str:
    """The estimate over every entry, when the solver's estimate covers fewer."""
    if sol.estimate_covers_all:
        return ""
    return f"; every entry: {sol.matrix_rel_error_estimate:.2g}"


def _profile_lines(family: ElectrodeFamily, evaluation: Evaluation) -> list[str]:
    """A line plot that says what the design does on its target or across its gap."""
    extra = evaluation.extra
    if "sensitivity_density_F_per_m3" in extra:
        r = extra["target_r_m"]
        dens = extra["sensitivity_density_F_per_m3"]
        cum = cumulative_on_plane(r, dens)
        share = 100 * cum / cum[-1]
        keep = r <= 2.0 * evaluation.metrics["spot_radius_90_mm"] * 1e-3
        return [
            "Share of the sensitivity that comes from target radius < r",
            *line_plot(
                [Series(1e3 * r[keep], share[keep], "•", "% of -dC_sense/dd")],
                x_label="r on the target (mm)",
                y_label="%",
                width=56,
                height=10,
            ),
        ]
    if "midplane_field_V_per_m" in extra:
        r = extra["midplane_r_m"]
        e = extra["midplane_field_V_per_m"]
        keep = r <= evaluation.metrics["overall_radius_mm"] * 1e-3
        return [
            "Field on the mid-plane relative to the centre",
            *line_plot(
                [Series(1e3 * r[keep], e[keep] / e[0], "•", "|E| / |E(0)|")],
                x_label="r on the mid-plane (mm)",
                y_label="|E|/|E(0)|",
                width=56,
                height=10,
            ),
        ]
    return []


def render_solve_report(
    console: Console, spec: SolveSpec, family: ElectrodeFamily, evaluation: Evaluation
) -> None:
    """Print the whole report of one solve on ``console``."""
    console.rule(f"elopt solve · {spec.family} · {spec.path}", style="cyan")
    if spec.title:
        console.print(Text(spec.title, style="italic"))
    caution = high_voltage_caution(drive_of(spec))
    if caution:
        console.print(Text(caution, style="bold yellow"))
    console.print(_design_table(spec))
    console.print()
    console.print(_metrics_table(family, evaluation))
    console.print()
    console.print(_capacitance_table(evaluation))
    if family.mirror_pair:
        note = "one electrode against the mid-plane; the pair's capacitance is half of it"
    elif evaluation.solution.layout.ground_plane:
        note = "Maxwell matrix; the grounded plane is the reference conductor"
    else:
        note = "Maxwell matrix"
    console.print(Text(note, style="dim"))
    console.print()
    for line in _peak_lines(spec, evaluation):
        console.print(line)
    console.print()
    peak = evaluation.solution.peak_field
    # A pair solved above its mid-plane says so; its picture shows the mirror electrode too.
    mirror = bool(family.mirror_pair)
    planar = bool(getattr(evaluation.solution, "planar", False))
    # A 3-D layout has no cross-section; the text picture draws bodies of revolution only.
    if evaluation.solution.point_dim == 2 and not planar:
        picture = section_picture(
            evaluation.solution.layout,
            marker_m=tuple(peak.location_m),
            plane_label="mid-plane (0 V)" if mirror else "target (grounded)",
            mirror=mirror,
            width=max(24, min(64, console.width - 12)),
        )
        console.print(Text("Cross-section (r, z), axis of revolution on the left", style="bold"))
        for line in picture.lines:
            console.print(line, no_wrap=True, overflow="crop")
        console.print(picture.legend)
    profile = _profile_lines(family, evaluation)
    if profile:
        console.print()
        console.print(Text(profile[0], style="bold"))
        for line in profile[1:]:
            console.print(Text(line), no_wrap=True, overflow="crop")
    for w in solve_warnings(spec, evaluation):
        console.print(Text(f"warning: {w}", style="bold red"))

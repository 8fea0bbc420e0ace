"""Interdigitated electrodes: two combs of long fingers on a layered substrate (2-D model).

Geometry (parameters in um / mm, SI inside): ``finger_count`` fingers of width W
(``finger_width_um``) with gaps G (``gap_um``), ``finger_length_mm`` long, alternately driven
at ``drive_V`` and held at 0 V; metal ``metal_thickness_um`` thick (0: zero-thickness strips)
with corners rounded by ``corner_radius_um``; they stand on the substrate and are covered by
the passivation, then the sensing film; the evaluation's medium (``eps_r``: air, a liquid, the
material under test) fills the half-space above. A thickness of 0 means the layer is absent
(substrate 0: a half-space); ``back_plane`` grounds the substrate's bottom face.

Total capacitance (the published interior/exterior decomposition, R. Igreja & C. J. Dias,
Sensors and Actuators A 112 (2004) 291, docs/references.md item 19):

    C = L [ (N - 3)/2 * C_I + 2 C_end ],

C_I the interior-cell capacitance per unit length from the periodic cell (period 2(W + G)):
the charge per finger divided by the voltage between neighbours. Igreja & Dias give the outer
cells in closed form for zero-thickness fingers in half-spaces; that expression is NOT used
(docs/references.md marks it unchecked). Here C_end comes from a finite cross-section of four
fingers solved on the same stack: C_end = (C_4 - C_I / 2) / 2. For N < 4 the N fingers are
solved directly. ``full_cross_section`` solves all N fingers as a check of the decomposition.
Sensitivities are relative ones of the interior cell applied to the total (the end cells are
assumed to share them).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, ClassVar

from elopt.physics.bem2d import planar_family as pf
from elopt.physics.bem2d import planar_stack as ps
from elopt.physics.bem2d.solve import solve_2d
from elopt.physics.electrodes import metrics
from elopt.physics.electrodes.base import (
    ElectrodeFamily,
    Measured,
    MetricSpec,
    drive_parameter,
    parameter,
)
from elopt.physics.electrodes.rules import RuleBook
from elopt.physics.errors import ElectrodeError, GeometryError
from elopt.physics.layout import Layout, driven
from elopt.physics.refinement import SolveOptions
from elopt.physics.solution import ChargeSolution

UM = ps.UM
MM = 1e-3
MAX_FINGERS = 10_000


@dataclass(frozen=True, kw_only=True)
class InterdigitatedParams(pf.StackParams):
    """Comb geometry (um, mm), drive (V) and the layer stack (um, relative permittivities)."""

    finger_width_um: float = parameter("um", "finger width", low=0.0, low_open=True)
    gap_um: float = parameter("um", "gap between neighbouring fingers", low=0.0, low_open=True)
    finger_count: int = parameter(
        "", "number of fingers (both combs)", low=2, high=MAX_FINGERS, whole=True
    )
    finger_length_mm: float = parameter("mm", "finger length", low=0.0, low_open=True)
    drive_V: float = drive_parameter("voltage of the driven comb (the other at 0 V)")


@dataclass(frozen=True)
class InterdigitatedOptions:
    """``end_cells``: outer cells from a 4-finger cross-section (True) or left out (False:
    C = L (N - 1)/2 C_I); ``full_cross_section``: also solve all N fingers (a check);
    ``penetration``: compute the penetration depths (17 extra solves of the cell; off by
    default so that studies stay fast, NaN then)."""

    end_cells: bool = parameter("", "outer cells from a 4-finger cross-section", default=True)
    full_cross_section: bool = parameter("", "also solve all fingers (a check)", default=False)
    penetration: bool = parameter("", "compute the penetration depths", default=False)


def period_m(p: InterdigitatedParams) -> float:
    return 2.0 * (p.finger_width_um + p.gap_um) * UM


def finger_shapes(p: InterdigitatedParams, n: int, stack: ps.Stack) -> list:
    """Shapes of n fingers, the first centred on x = 0."""
    w, g = p.finger_width_um * UM, p.gap_um * UM
    t, r = p.metal_thickness_um * UM, p.corner_radius_um * UM
    return [
        ps.electrode(k * (w + g) - w / 2, k * (w + g) + w / 2, stack.z0, t, r) for k in range(n)
    ]


def fingers_layout(p: InterdigitatedParams, n: int, eps_r: float) -> Layout:
    """n fingers alternately at drive_V (even) and 0 V (odd) over the stack."""
    stack = pf.stack_of(p)
    conds = tuple(
        driven(f"finger{k}", shape, p.drive_V if k % 2 == 0 else 0.0)
        for k, shape in enumerate(finger_shapes(p, n, stack))
    )
    return ps.stack_layout(conds, stack, eps_r)


def comb_capacitance(c, n: int) -> float:
    """Mutual capacitance (F/m) between the even and the odd fingers."""
    return pf.mutual(c, list(range(0, n, 2)), list(range(1, n, 2)))


class Interdigitated(ElectrodeFamily):
    """Interdigitated comb pair on a planar layer stack (module docstring)."""

    name: ClassVar[str] = "interdigitated"
    per_unit_length: ClassVar[bool] = True
    Params: ClassVar[type] = InterdigitatedParams
    Options: ClassVar[type] = InterdigitatedOptions
    metrics: ClassVar[tuple[MetricSpec, ...]] = (
        *pf.COMMON_METRICS,
        metrics.PLANAR_INTERIOR_CELL,
        metrics.PLANAR_END_CELL,
        metrics.PLANAR_FOOTPRINT,
    )

    def validate(self, params: InterdigitatedParams) -> None:
        rules = RuleBook(self.name, params)
        if pf.check_numbers(rules, params):
            rules.declared()
            pf.check_stack_params(rules, params)
            if 0 < params.finger_width_um < 2 * params.corner_radius_um:
                rules.broken.append(
                    f"corner_radius_um = {params.corner_radius_um:.6g} must be <= "
                    f"finger_width_um / 2 = {0.5 * params.finger_width_um:.6g}"
                )
        rules.raise_if_broken()

    def validate_options(self, options: InterdigitatedOptions) -> None:
        rules = RuleBook(self.name, options)
        pf.validate_flags(rules, options)
        rules.raise_if_broken()

    def build(
        self, params: InterdigitatedParams, *, eps_r: float = 1.0, options: Any = None
    ) -> Layout:
        """The interior periodic cell (two fingers; period :func:`period_m`)."""
        self.validate(params)
        return fingers_layout(params, 2, eps_r)

    def solve(self, layout: Layout, *, solve_options: SolveOptions, options: Any) -> ChargeSolution:
        """The periodic 2-D solve of the cell (period from the fingers' spacing)."""
        try:
            return solve_2d(
                layout,
                period_m=pf.period_from_cell(layout),
                rel_accuracy=solve_options.rel_accuracy,
            )
        except GeometryError as exc:
            raise ElectrodeError(f"{self.name}: {exc}") from None

    def measure(
        self,
        params: InterdigitatedParams,
        options: InterdigitatedOptions,
        solution: ChargeSolution,
        companions,
    ) -> Measured:
        """Metrics; the finite cross-sections (outer cells, the check) are solved here, at the
        cell's requested accuracy, because they are not designs of this family."""
        p = params
        sol = solution
        eps_r = sol.layout.eps_r
        rel = sol.requested_accuracy
        lam = period_m(p)
        n = int(p.finger_count)
        length = p.finger_length_mm * MM
        stack = pf.stack_of(p)
        c_i = comb_capacitance(sol.capacitance_matrix_F, 2)
        peaks = [sol.peak_field]
        extra: dict[str, Any] = {"period_m": lam}
        c_end = float("nan")
        try:
            if n < 4:
                fin = solve_2d(fingers_layout(p, n, eps_r), rel_accuracy=rel)
                c_line = comb_capacitance(fin.capacitance_matrix_F, n)
                peaks.append(fin.peak_field)
            elif options.end_cells:
                fin = solve_2d(fingers_layout(p, 4, eps_r), rel_accuracy=rel)
                c4 = comb_capacitance(fin.capacitance_matrix_F, 4)
                c_end = 0.5 * (c4 - 0.5 * c_i)
                c_line = 0.5 * (n - 3) * c_i + 2.0 * c_end
                peaks.append(fin.peak_field)
                extra["four_finger_pF_per_m"] = c4 * 1e12
            else:
                c_line = 0.5 * (n - 1) * c_i
            if options.full_cross_section and n >= 4:
                full = solve_2d(fingers_layout(p, n, eps_r), rel_accuracy=rel)
                extra["full_cross_section_pF_per_m"] = (
                    comb_capacitance(full.capacitance_matrix_F, n) * 1e12
                )
                extra["full_solution"] = full
            sens = pf.sensitivities(
                sol, stack, lambda c: comb_capacitance(c, 2), lam, options.penetration
            )
        except GeometryError as exc:
            raise ElectrodeError(f"{self.name}: {exc}") from None
        peak = max(peaks, key=lambda q: q.field_V_per_m)
        metrics = pf.common_metrics(c_line * length, length, sens, eps_r, stack, peak.field_V_per_m)
        metrics.update(
            {
                "interior_cell_pF_per_m": c_i * 1e12,
                "end_cell_pF_per_m": c_end * 1e12,
                "footprint_width_mm": (n * p.finger_width_um + (n - 1) * p.gap_um) * UM / MM,
            }
        )
        extra.update(
            {
                "peak_on_outer_fingers": peak is not peaks[0],
                "sense_capacitance_F": metrics["capacitance_pF"] * 1e-12,
                "sense_capacitance_meaning": (
                    "charge on the driven comb / drive_V, other comb at 0 V (whole length)"
                    if not p.back_plane
                    else "charge drawn onto the held comb / drive_V (mutual capacitance, whole "
                    "length; the share to the grounded back plane is left out)"
                ),
                "metric_notes": pf.metric_notes(sens, bool(p.back_plane)),
            }
        )
        return Measured(metrics=metrics, extra=extra)


__all__ = ["Interdigitated", "InterdigitatedOptions", "InterdigitatedParams", "fingers_layout"]

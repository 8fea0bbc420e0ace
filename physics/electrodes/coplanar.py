"""Coplanar electrodes: two or more parallel strips on a layered substrate (2-D model).

Geometry (um / mm, SI inside): ``strip_count`` strips of width ``strip_width_um`` with gaps
``gap_um``, ``length_mm`` long, metal ``metal_thickness_um`` thick (0: zero-thickness) with
corners rounded by ``corner_radius_um``, on the same stack as the interdigitated family
(substrate, optional grounded back plane, passivation, sensing film; the evaluation's medium
above). By default strips 0, 2, 4 ... are driven at ``drive_V`` and the others held at 0 V;
``centre_drive`` drives only the middle strip (the middle two for an even count) and holds the
outer ones at 0 V (a coplanar-waveguide-like sensor). The capacitance is the charge on the
driven strips per volt (the mutual capacitance to the held strips when a back plane exists).
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
from elopt.physics.refinement import SolveOptions, combination_estimate
from elopt.physics.solution import ChargeSolution

UM = ps.UM
MM = 1e-3
MAX_STRIPS = 200


@dataclass(frozen=True, kw_only=True)
class CoplanarParams(pf.StackParams):
    """Strip geometry (um, mm), drive (V), drive pattern and the layer stack."""

    strip_count: int = parameter("", "number of strips", low=2, high=MAX_STRIPS, whole=True)
    strip_width_um: float = parameter("um", "strip width", low=0.0, low_open=True)
    gap_um: float = parameter("um", "gap between neighbouring strips", low=0.0, low_open=True)
    length_mm: float = parameter("mm", "strip length", low=0.0, low_open=True)
    drive_V: float = drive_parameter("voltage of the driven strips (others at 0 V)")
    centre_drive: bool = parameter("", "drive only the middle strip(s)", default=False)


@dataclass(frozen=True)
class CoplanarOptions:
    """``penetration``: compute the penetration depths (17 extra solves; off by default so
    that studies stay fast, NaN then)."""

    penetration: bool = parameter("", "compute the penetration depths", default=False)


def driven_indices(p: CoplanarParams) -> list[int]:
    n = int(p.strip_count)
    if not p.centre_drive:
        return list(range(0, n, 2))
    return [n // 2] if n % 2 else [n // 2 - 1, n // 2]


def strips_layout(p: CoplanarParams, eps_r: float) -> Layout:
    stack = pf.stack_of(p)
    w, g = p.strip_width_um * UM, p.gap_um * UM
    t, r = p.metal_thickness_um * UM, p.corner_radius_um * UM
    on = set(driven_indices(p))
    conds = tuple(
        driven(
            f"strip{k}",
            ps.electrode(k * (w + g), k * (w + g) + w, stack.z0, t, r),
            p.drive_V if k in on else 0.0,
        )
        for k in range(int(p.strip_count))
    )
    return ps.stack_layout(conds, stack, eps_r)


class Coplanar(ElectrodeFamily):
    """Parallel coplanar strips on a planar layer stack (module docstring)."""

    name: ClassVar[str] = "coplanar"
    per_unit_length: ClassVar[bool] = True
    Params: ClassVar[type] = CoplanarParams
    Options: ClassVar[type] = CoplanarOptions
    metrics: ClassVar[tuple[MetricSpec, ...]] = (
        *pf.COMMON_METRICS,
        metrics.PLANAR_FOOTPRINT,
    )

    def validate(self, params: CoplanarParams) -> None:
        rules = RuleBook(self.name, params)
        if not isinstance(params.centre_drive, bool):
            rules.broken.append(f"centre_drive = {params.centre_drive!r} must be true or false")
        if pf.check_numbers(rules, params):
            p = params
            rules.declared()
            if p.centre_drive is True and int(p.strip_count) < 3:
                rules.broken.append(
                    f"centre_drive = true needs strip_count >= 3, got {p.strip_count!r}"
                )
            pf.check_stack_params(rules, p)
            if 0 < p.strip_width_um < 2 * p.corner_radius_um:
                rules.broken.append(
                    f"corner_radius_um = {p.corner_radius_um:.6g} must be <= strip_width_um / 2 "
                    f"= {0.5 * p.strip_width_um:.6g}"
                )
        rules.raise_if_broken()

    def validate_options(self, options: CoplanarOptions) -> None:
        rules = RuleBook(self.name, options)
        pf.validate_flags(rules, options)
        rules.raise_if_broken()

    def build(self, params: CoplanarParams, *, eps_r: float = 1.0, options: Any = None) -> Layout:
        self.validate(params)
        return strips_layout(params, eps_r)

    def solve(self, layout: Layout, *, solve_options: SolveOptions, options: Any) -> ChargeSolution:
        try:
            return solve_2d(layout, rel_accuracy=solve_options.rel_accuracy)
        except GeometryError as exc:
            raise ElectrodeError(f"{self.name}: {exc}") from None

    def measure(
        self, params: CoplanarParams, options: CoplanarOptions, solution: ChargeSolution, companions
    ) -> Measured:
        p = params
        sol = solution
        on = driven_indices(p)
        off = [k for k in range(int(p.strip_count)) if k not in on]
        stack = pf.stack_of(p)
        width = (p.strip_count * p.strip_width_um + (p.strip_count - 1) * p.gap_um) * UM

        def value(c) -> float:
            return pf.mutual(c, on, off)

        try:
            sens = pf.sensitivities(sol, stack, value, width, options.penetration)
        except GeometryError as exc:
            raise ElectrodeError(f"{self.name}: {exc}") from None
        length = p.length_mm * MM
        c_line = value(sol.capacitance_matrix_F)
        peak = sol.peak_field
        metrics = pf.common_metrics(
            c_line * length, length, sens, sol.layout.eps_r, stack, peak.field_V_per_m
        )
        metrics["footprint_width_mm"] = width / MM
        meaning = "charge on the driven strips / drive_V, others at 0 V (whole length)"
        if p.back_plane:
            meaning = (
                "charge drawn onto the held strips / drive_V (mutual capacitance, whole length; "
                "the share to the grounded back plane is left out)"
            )
        extra: dict[str, Any] = {
            "sense_capacitance_F": metrics["capacitance_pF"] * 1e-12,
            "sense_capacitance_meaning": meaning,
            # the sense capacitance combines entries of C: its own estimate, from its changes
            "sense_capacitance_rel_error_estimate": combination_estimate(
                sol.levels, sol.convergence, value
            ),
            "metric_notes": pf.metric_notes(sens, bool(p.back_plane)),
        }
        return Measured(metrics=metrics, extra=extra)


__all__ = ["Coplanar", "CoplanarOptions", "CoplanarParams", "strips_layout"]

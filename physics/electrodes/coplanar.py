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
from elopt.physics.electrodes.base import ElectrodeFamily, Evaluation, MetricSpec
from elopt.physics.electrodes.rules import RuleBook
from elopt.physics.errors import ElectrodeError, GeometryError
from elopt.physics.layout import Layout, driven

UM = ps.UM
MM = 1e-3
MAX_STRIPS = 200


@dataclass(frozen=True)
class CoplanarParams:
    """Strip geometry (um, mm), drive (V), drive pattern and the layer stack."""

    strip_count: int
    strip_width_um: float
    gap_um: float
    length_mm: float
    drive_V: float
    centre_drive: bool = False
    metal_thickness_um: float = 0.0
    corner_radius_um: float = 0.0
    substrate_eps_r: float = 4.6
    substrate_thickness_um: float = 0.0
    back_plane: bool = False
    passivation_eps_r: float = 3.9
    passivation_thickness_um: float = 0.0
    film_eps_r: float = 1.0
    film_thickness_um: float = 0.0


@dataclass(frozen=True)
class CoplanarOptions:
    """``penetration``: compute the penetration depths (14 extra solves; off by default so
    that studies stay fast, NaN then)."""

    penetration: bool = False


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
    Params: ClassVar[type] = CoplanarParams
    Options: ClassVar[type] = CoplanarOptions
    metrics: ClassVar[tuple[MetricSpec, ...]] = (
        *pf.COMMON_METRICS,
        MetricSpec("footprint_width_mm", "mm", "width of the strip set", "minimize"),
    )

    def validate(self, params: CoplanarParams) -> None:
        rules = RuleBook(self.name, params)
        if not isinstance(params.centre_drive, bool):
            rules.broken.append(f"centre_drive = {params.centre_drive!r} must be true or false")
        if pf.check_numbers(rules, params):
            p = params
            rules.positive("strip_width_um", "gap_um", "length_mm")
            rules.nonzero("drive_V")
            n = p.strip_count
            if isinstance(n, bool) or int(n) != n or not 2 <= n <= MAX_STRIPS:
                rules.broken.append(
                    f"strip_count = {n!r} must be a whole number in [2, {MAX_STRIPS}]"
                )
            if p.centre_drive is True and int(n) < 3:
                rules.broken.append(f"centre_drive = true needs strip_count >= 3, got {n!r}")
            pf.check_stack_params(rules, p)
            if p.corner_radius_um > 0.5 * p.strip_width_um:
                rules.broken.append(
                    f"corner_radius_um = {p.corner_radius_um:.6g} must be <= strip_width_um / 2 "
                    f"= {0.5 * p.strip_width_um:.6g}"
                )
        rules.raise_if_broken()

    def build(self, params: CoplanarParams, *, eps_r: float = 1.0) -> Layout:
        self.validate(params)
        return strips_layout(params, eps_r)

    def evaluate(
        self,
        params: CoplanarParams,
        *,
        rel_accuracy: float = 1e-4,
        eps_r: float = 1.0,
        options: CoplanarOptions | None = None,
    ) -> Evaluation:
        options = options or CoplanarOptions()
        p = params
        layout = self.build(p, eps_r=eps_r)
        on = driven_indices(p)
        off = [k for k in range(int(p.strip_count)) if k not in on]
        stack = pf.stack_of(p)
        width = (p.strip_count * p.strip_width_um + (p.strip_count - 1) * p.gap_um) * UM

        def value(c) -> float:
            return pf.mutual(c, on, off)

        try:
            sol = solve_2d(layout, rel_accuracy=rel_accuracy)
            sens = pf.sensitivities(sol, stack, value, width, options.penetration)
        except GeometryError as exc:
            raise ElectrodeError(f"{self.name}: {exc}") from None
        length = p.length_mm * MM
        c_line = value(sol.capacitance_matrix_F)
        peak = sol.peak_field
        metrics = pf.common_metrics(c_line * length, length, sens, eps_r, stack, peak.field_V_per_m)
        metrics["footprint_width_mm"] = width / MM
        extra: dict[str, Any] = {
            "layout": layout,
            "peak_conductor": peak.conductor,
            "peak_singular": bool(peak.singular),
            "sense_capacitance_F": metrics["capacitance_pF"] * 1e-12,
            "sense_capacitance_meaning": "charge on the driven strips / drive_V, others at 0 V (whole length)",
        }
        return Evaluation(metrics=metrics, solution=sol, extra=extra)


__all__ = ["Coplanar", "CoplanarOptions", "CoplanarParams", "strips_layout"]

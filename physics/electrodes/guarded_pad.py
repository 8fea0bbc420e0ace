"""Guarded rectangular pad: a sensor pad inside a rectangular guard frame over a grounded target.

Geometry (parameters in mm, SI inside; the target is the plane z = 0, possibly tilted):

- sensor: a pad a x b (``pad_length_mm`` along x, ``pad_width_mm`` along y), ``thickness_mm``
  thick, its face at the standoff d (z = d), centred on the z axis;
- guard: a frame around it, inner opening (a + 2g) x (b + 2g) for the gap g, ``guard_width_mm``
  wide, as thick as the pad, face also at z = d;
- every convex edge of pad and frame rounded with ``fillet_mm`` (0: sharp); a thickness of 0
  makes both thin sheets (knife edges: the peak field is then mesh-dependent);
- ``target_tilt_deg``: the target tilted by that angle about the line along y through
  x = ``tilt_axis_x_mm`` on it (positive: the target rises on the -x side).

Sensor and guard are both driven at V; C_sense = C_ss + C_sg. The metrics follow the guarded
disk (:mod:`elopt.physics.electrodes.guarded_disk`) where they apply, with the peak field's (x, y, z)
and the tilt sensitivity dC_sense/dtheta (Hadamard formula on the plane) added; the 3-D panel
solver (:mod:`elopt.physics.bem3d`) does the solve.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any, ClassVar

import numpy as np

from elopt.physics.bem3d.surfaces import (
    BoxSurface,
    FrameSheetSurface,
    FrameSurface,
    RectangleSheetSurface,
)
from elopt.physics.electrodes import metrics as m
from elopt.physics.electrodes.base import (
    ElectrodeFamily,
    Measured,
    MetricSpec,
    drive_parameter,
    parameter,
)
from elopt.physics.electrodes.rules import RuleBook
from elopt.physics.electrodes.solvers import (
    SolvedByPanels,
    estimated_panels,
    refuse_too_many_panels,
)
from elopt.physics.electrodes.target_tilt import (
    FF_PER_MRAD,
    FF_PER_UM,
    sense_capacitance_F,
    tilted_layout,
)
from elopt.physics.layout import Layout, driven
from elopt.physics.solution import ChargeSolution

MM = 1e-3
SENSOR = "sensor"
GUARD = "guard"
#: Largest target tilt the family accepts (a small-angle model of a misaligned target).
MAX_TILT_DEG = 10.0
#: Level-0 steps on each half of a fillet's quarter circle. On the wafer-gap demo (error of C
#: against a reference extrapolated from 92,288 panels) one step with equal-area chords gave
#: the least error per panel of the settings tried (1 to 4 steps, faces 0.75 to 3 mm).
ARC_STEPS = 1


@dataclass(frozen=True)
class GuardedPadParams:
    """Guarded rectangular pad parameters (module docstring for the geometry)."""

    pad_length_mm: float = parameter("mm", "pad side along x", low=0, low_open=True)
    pad_width_mm: float = parameter("mm", "pad side along y", low=0, low_open=True)
    guard_gap_mm: float = parameter("mm", "pad-frame gap g", low=0, low_open=True)
    guard_width_mm: float = parameter("mm", "guard frame width", low=0, low_open=True)
    thickness_mm: float = parameter("mm", "pad and frame thickness (0: sheets)", low=0)
    fillet_mm: float = parameter("mm", "convex edge radius (0: sharp)", low=0)
    standoff_mm: float = parameter("mm", "faces to target d", low=0, low_open=True, mounting=True)
    drive_V: float = drive_parameter("pad and guard potential")
    target_tilt_deg: float = parameter(
        "deg",
        "target tilt about y",
        default=0.0,
        low=-MAX_TILT_DEG,
        high=MAX_TILT_DEG,
        mounting=True,
    )
    tilt_axis_x_mm: float = parameter(
        "mm", "x of the tilt axis on the target", default=0.0, mounting=True
    )


@dataclass(frozen=True)
class GuardedPadOptions:
    """How the pad is meshed and solved (each refinement level halves the panel size; two
    levels give the error estimate)."""

    mesh_step_mm: float = parameter(
        "mm",
        "coarsest panel size (0: pad's shorter side / 2, at most guard width, 4 standoffs; "
        "without fillets side / 4, 2 standoffs)",
        default=0.0,
        low=0,
    )
    max_level: int = parameter("", "finest refinement level", default=1, low=1, high=4, whole=True)


def _step_terms_mm(p: GuardedPadParams) -> dict[str, float]:
    """Panel sizes (mm) each parameter allows; the automatic step is the smallest.

    Rounded edges get their own steps along the arcs (:data:`ARC_STEPS` per half fillet at
    level 0, equal-area chords), so the flat faces can be twice as coarse as with sharp
    edges or sheets, whose grading toward the edges follows the face steps.
    """
    rounded = p.thickness_mm > 0 and p.fillet_mm > 0
    share, reach = (0.5, 4.0) if rounded else (0.25, 2.0)
    return {
        "pad_length_mm": share * p.pad_length_mm,
        "pad_width_mm": share * p.pad_width_mm,
        "guard_width_mm": p.guard_width_mm,
        "standoff_mm": reach * p.standoff_mm,
    }


def mesh_step_m(p: GuardedPadParams, options: GuardedPadOptions) -> float:
    if options.mesh_step_mm > 0:
        return options.mesh_step_mm * MM
    return MM * min(_step_terms_mm(p).values())


def panel_size_cause(p: GuardedPadParams, options: GuardedPadOptions, h_m: float) -> str:
    """Which parameter sets the panel size ``h_m`` (m), with its value, for refusals."""
    ox, oy = outer_size_mm(p)
    if options.mesh_step_mm > 0:
        what = f"mesh_step_mm = {options.mesh_step_mm:.6g}"
    else:
        terms = _step_terms_mm(p)
        name = min(terms, key=terms.__getitem__)
        what = f"{name} = {getattr(p, name):.6g} sets the panel size"
    return (
        f"{what} ({h_m / MM:.3g} mm) against a guard of {ox:.6g} x {oy:.6g} mm; raise it or "
        "shrink the guard"
    )


def outer_size_mm(p: GuardedPadParams) -> tuple[float, float]:
    """Outer length (x) and width (y) of the guard frame in mm."""
    return (
        p.pad_length_mm + 2 * (p.guard_gap_mm + p.guard_width_mm),
        p.pad_width_mm + 2 * (p.guard_gap_mm + p.guard_width_mm),
    )


def level_layout(p: GuardedPadParams, h_m: float, *, eps_r: float = 1.0) -> Layout:
    """The untilted layout: pad and frame above the plane (SI)."""
    a, b = p.pad_length_mm * MM, p.pad_width_mm * MM
    g, w, t = p.guard_gap_mm * MM, p.guard_width_mm * MM, p.thickness_mm * MM
    f, d = p.fillet_mm * MM, p.standoff_mm * MM
    hole = (a + 2 * g, b + 2 * g)
    outer = (hole[0] + 2 * w, hole[1] + 2 * w)
    if t > 0:
        # Mirror-symmetric grids (the solver then works on a quarter, or a half when tilted)
        # with equal-area fillets (tests/benchmarks/bench_bem3d.py, part 3).
        kw = {"fillet_m": f, "arc_steps": ARC_STEPS, "secant": True, "centred": True}
        pad = BoxSurface((a, b, t), h_m, center_m=(0.0, 0.0, d + 0.5 * t), **kw)
        guard = FrameSurface(outer, hole, d, t, h_m, **kw)
    else:
        pad = RectangleSheetSurface((a, b), d, h_m)
        guard = FrameSheetSurface(outer, hole, d, h_m)
    v = float(p.drive_V)
    return Layout((driven(SENSOR, pad, v), driven(GUARD, guard, v)), eps_r=eps_r, ground_plane=True)


def spot_radius_m(
    xy: np.ndarray, weights: np.ndarray, density: np.ndarray, fraction: float
) -> float:
    """Radius (m) of the disk about the origin holding ``fraction`` of sum(weights * density)."""
    r = np.hypot(xy[:, 0], xy[:, 1])
    order = np.argsort(r)
    cum = np.cumsum((weights * density)[order])
    total = cum[-1]
    if not total > 0:
        return float("nan")
    k = int(np.searchsorted(cum, fraction * total))
    return float(r[order][min(k, len(r) - 1)])


class GuardedPad(SolvedByPanels, ElectrodeFamily):
    """Guarded rectangular pad over a grounded, possibly tilted target (module docstring)."""

    name: ClassVar[str] = "guarded_pad"
    Params: ClassVar[type] = GuardedPadParams
    Options: ClassVar[type] = GuardedPadOptions
    metrics: ClassVar[tuple[MetricSpec, ...]] = (
        m.SENSE,
        m.TOTAL,
        m.COUPLING,
        *m.PEAK_3D,
        m.SENSITIVITY,
        m.TILT_SENSITIVITY,
        m.SPOT,
        m.EFFECTIVE_RADIUS,
        m.EFFECTIVE_AREA,
        m.OUTER_SIZE,
    )

    def validate(self, params: GuardedPadParams) -> None:
        rules = RuleBook(self.name, params)
        if rules.finite():
            p = params
            rules.declared()
            why = "fillets on one face must not overlap"
            rules.at_most("fillet_mm", p.thickness_mm / 2, "thickness_mm / 2", why)
            rules.at_most("fillet_mm", p.guard_width_mm / 2, "guard_width_mm / 2", why)
            rules.at_most(
                "fillet_mm",
                min(p.pad_length_mm, p.pad_width_mm) / 2,
                "min(pad_length_mm, pad_width_mm) / 2",
                why,
            )
            if abs(p.target_tilt_deg) <= MAX_TILT_DEG:
                # The lowest face corner over the tilted target must stay above it.
                ox, _ = outer_size_mm(p)
                reach = max(abs(0.5 * ox - p.tilt_axis_x_mm), abs(-0.5 * ox - p.tilt_axis_x_mm))
                drop = reach * math.sin(math.radians(abs(p.target_tilt_deg)))
                if drop >= p.standoff_mm:
                    rules.broken.append(
                        f"target_tilt_deg = {p.target_tilt_deg:.6g} with tilt_axis_x_mm = "
                        f"{p.tilt_axis_x_mm:.6g} brings the target up to the guard's edge (it rises "
                        f"{drop:.6g} mm at the far edge, standoff_mm = {p.standoff_mm:.6g}); reduce "
                        "the tilt or move the axis"
                    )
        rules.raise_if_broken()

    def build(
        self,
        params: GuardedPadParams,
        *,
        eps_r: float = 1.0,
        options: GuardedPadOptions | None = None,
    ) -> Layout:
        """The 3-D layout as solved: pad and frame turned so that the target is z = 0."""
        self.validate(params)
        options = options or GuardedPadOptions()
        h_m = mesh_step_m(params, options)
        base = level_layout(params, h_m, eps_r=eps_r)
        refuse_too_many_panels(
            self.name, estimated_panels(base), panel_size_cause(params, options, h_m)
        )
        return tilted_layout(base, math.radians(params.target_tilt_deg), params.tilt_axis_x_mm * MM)

    def measure(
        self,
        params: GuardedPadParams,
        options: GuardedPadOptions,
        solution: ChargeSolution,
        companions: Mapping[str, ChargeSolution],
    ) -> Measured:
        sol = solution
        eps = sol.layout.eps_F_per_m
        c = sol.capacitance_matrix_F
        c_sense = sense_capacitance_F(c)
        d_plane = sol.plane_capacitance_derivative_F_per_m()
        axis_x = params.tilt_axis_x_mm * MM
        d_tilt = sol.plane_tilt_derivative_F_per_rad(axis_point_m=(axis_x, 0.0))
        xy, w = sol.plane_quadrature()
        unit = sol.plane_unit_charge_densities()
        density = unit[:, 0] * (unit[:, 0] + unit[:, 1]) / eps
        peak = sol.peak_field
        d = params.standoff_mm * MM
        area = c_sense * d / eps
        metrics = {
            m.SENSE.name: c_sense * 1e15,
            m.TOTAL.name: float(c.sum()) * 1e15,
            m.COUPLING.name: -float(c[0, 1]) * 1e15,
            m.PEAK_X.name: peak.location_m[0] / MM,
            m.PEAK_Y.name: peak.location_m[1] / MM,
            m.PEAK_Z.name: peak.location_m[2] / MM,
            m.SENSITIVITY.name: sense_capacitance_F(d_plane) * FF_PER_UM,
            m.TILT_SENSITIVITY.name: sense_capacitance_F(d_tilt) * FF_PER_MRAD,
            m.SPOT.name: spot_radius_m(xy, w, density, 0.9) / MM,
            m.EFFECTIVE_RADIUS.name: math.sqrt(area / math.pi) / MM,
            m.EFFECTIVE_AREA.name: area / MM**2,
            m.OUTER_SIZE.name: max(outer_size_mm(params)),
        }
        extra: dict[str, Any] = {
            "sense_capacitance_F": c_sense,
            "sense_capacitance_meaning": "Q_sensor / V with the guard driven at V",
            "target_xy_m": xy,
            "target_weights_m2": w,
            "sensitivity_density_xy_F_per_m3": density,
        }
        if sol.capacitance_matrix_extrapolated_F is not None:
            extra["sense_capacitance_extrapolated_F"] = sense_capacitance_F(
                sol.capacitance_matrix_extrapolated_F
            )
        return Measured(metrics, extra)


__all__ = ["GuardedPad", "GuardedPadOptions", "GuardedPadParams", "level_layout", "spot_radius_m"]

"""Guarded disk probe: a solid disk sensor inside a driven guard ring, facing a grounded target.

Geometry (parameters in mm, SI inside), in the (r, z) half-plane above the target z = 0:

- sensor: solid cylinder r <= a, d + s <= z <= d + s + t (face recessed by s >= 0);
- guard: solid annulus a + g <= r <= a + g + w, d <= z <= d + t (face at the standoff d);
- every off-axis corner of both cross-sections rounded with radius rho (rho = 0: sharp);
- optional insulators: a spacer of ``spacer_eps_r`` filling the sensor-guard gap between the
  fillets (a <= r <= a + g, d + rho <= z <= d + t - rho; needs no recess), a housing sleeve of
  ``housing_width_mm`` and ``housing_eps_r`` on the guard's outer wall between the fillets,
  potting of ``potting_depth_mm`` and ``potting_eps_r`` filling the probe's back (below), and
  a layer of ``target_layer_um`` and ``target_layer_eps_r`` on the target (a coating, a film).
- the potting covers the backs of sensor and guard (their back fillets included) and the
  sleeve, from the axis out to r = a + g + w + (sleeve width), up to z = d + t + depth; it
  bridges the sensor-guard gap at z = d + t - rho (resting on the spacer, or over an air gap
  when there is none). It needs no recess and the straight walls of the spacer.

Sensor and guard are both driven at V (driven guard); the target plane is at 0. The sense
capacitance is C_sense = Q_sensor / V = C_ss + C_sg of the Maxwell matrix. Its sensitivity
to the standoff comes from one solve through the Hadamard shape derivative of the target:
-dC_sense/dd = (1/eps) * integral over the plane of sigma_s (sigma_s + sigma_g), with sigma_i
the plane's charge density with conductor i at 1 V and the other at 0. The integrand is the
sensitivity density; the radius holding 90 % of it is the probe's spot radius. With a layer on
the target that formula does not hold: the standoff sensitivity and the layer's thickness and
permittivity sensitivities are central differences at the solution's mesh level (Richardson
error estimate in ``extra``), and the spot uses the plane's density under the layer.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, fields, replace
from typing import Any, ClassVar

import numpy as np

from elopt.physics.electrodes import metrics as m
from elopt.physics.electrodes.base import (
    ElectrodeFamily,
    Measured,
    MetricSpec,
    drive_parameter,
    parameter,
)
from elopt.physics.electrodes.linearity import linearity_error_pct_fs, standoff_range
from elopt.physics.electrodes.rules import RuleBook
from elopt.physics.electrodes.solvers import SolvedByProfiles
from elopt.physics.electrodes.target_spot import radial_grid, radial_grid_size, spot_radius
from elopt.physics.errors import ElectrodeError, GeometryError
from elopt.physics.geometry import Curve, Segment, rounded_polyline
from elopt.physics.layout import Layout, driven
from elopt.physics.media import DielectricRegion, PlanarLayer
from elopt.physics.solution import ChargeSolution

MM = 1e-3
UM = 1e-6
SENSOR = "sensor"
GUARD = "guard"
SPACER = "spacer"
HOUSING = "housing"
POTTING = "potting"
TARGET_LAYER = "target layer"
#: Most points of the target grid: ample for any probe whose standoff and size are within a
#: factor of about a thousand of each other; beyond, the grid alone costs gigabytes.
MAX_TARGET_POINTS = 100_000
#: fF per um for a derivative in F/m.
FF_PER_UM = 1e15 * 1e-6
#: Key prefix of the linearity sweep's companion designs.
SWEEP = "linearity_standoff_"


@dataclass(frozen=True)
class GuardedDiskParams:
    """Guarded disk probe parameters (module docstring for the symbols)."""

    sensor_radius_mm: float = parameter("mm", "sensor disk radius a", low=0, low_open=True)
    guard_gap_mm: float = parameter("mm", "sensor-guard gap g", low=0, low_open=True)
    guard_width_mm: float = parameter("mm", "guard ring width w", low=0, low_open=True)
    thickness_mm: float = parameter("mm", "sensor and guard thickness t", low=0, low_open=True)
    fillet_mm: float = parameter("mm", "corner radius rho (0: sharp)", low=0)
    standoff_mm: float = parameter(
        "mm", "guard face to target d", low=0, low_open=True, mounting=True
    )
    drive_V: float = drive_parameter("sensor and guard potential")
    recess_mm: float = parameter("mm", "sensor face set back s", default=0.0, low=0, mounting=True)
    spacer_eps_r: float = parameter(
        "1", "eps_r of a spacer filling the sensor-guard gap (1: none)", default=1.0, low=1
    )
    housing_width_mm: float = parameter(
        "mm",
        "width of an insulating sleeve on the guard's outer wall (0: none)",
        default=0.0,
        low=0,
    )
    housing_eps_r: float = parameter("1", "eps_r of the sleeve", default=3.0, low=1)
    target_layer_um: float = parameter(
        "um", "thickness of a layer on the target (0: bare)", default=0.0, low=0, mounting=True
    )
    target_layer_eps_r: float = parameter(
        "1", "eps_r of the layer on the target", default=4.0, low=1, mounting=True
    )
    potting_depth_mm: float = parameter(
        "mm",
        "depth of potting filling the probe's back, above the guard's back face (0: none)",
        default=0.0,
        low=0,
    )
    potting_eps_r: float = parameter("1", "eps_r of the potting", default=3.5, low=1)


@dataclass(frozen=True)
class GuardedDiskOptions:
    """How the linearity is measured: ``linearity_points`` standoffs evenly spaced over
    d * (1 -+ ``linearity_range_fraction``) (odd counts reuse the nominal solve); 0 points
    skips linearity (NaN)."""

    linearity_range_fraction: float = parameter(
        "1",
        "half-width of the standoff sweep / d",
        default=0.5,
        low=0,
        high=1,
        low_open=True,
        high_open=True,
    )
    linearity_points: int = parameter(
        "", "standoffs in the sweep (0: skip)", default=5, low=0, high=25, whole=True
    )


def sensor_curve(p: GuardedDiskParams) -> Curve:
    """Sensor cross-section: from the axis along the face, round the rim, back to the axis."""
    a, t, rho = p.sensor_radius_mm * MM, p.thickness_mm * MM, p.fillet_mm * MM
    z0 = (p.standoff_mm + p.recess_mm) * MM
    vertices = [(0.0, z0), (a, z0), (a, z0 + t), (0.0, z0 + t)]
    return rounded_polyline(vertices, rho, name=SENSOR)


def guard_curve(p: GuardedDiskParams) -> Curve:
    """Guard cross-section: a closed ring, starting mid-face so that all four corners round."""
    r_in = (p.sensor_radius_mm + p.guard_gap_mm) * MM
    r_out = r_in + p.guard_width_mm * MM
    z0 = p.standoff_mm * MM
    z1 = z0 + p.thickness_mm * MM
    r_mid = 0.5 * (r_in + r_out)
    vertices = [(r_mid, z0), (r_out, z0), (r_out, z1), (r_in, z1), (r_in, z0), (r_mid, z0)]
    return rounded_polyline(vertices, p.fillet_mm * MM, name=GUARD)


def sense_capacitance_F(solution: ChargeSolution) -> float:
    """C_sense = Q_sensor / V with sensor and guard at the same potential: C_ss + C_sg (F)."""
    c = solution.capacitance_matrix_F
    return float(c[0, 0] + c[0, 1])


def sensitivity_F_per_m(solution: ChargeSolution) -> float:
    """-dC_sense/dd in F/m: the plane moving up by delta is the standoff shrinking by delta."""
    dc = solution.plane_capacitance_derivative_F_per_m()
    return float(dc[0, 0] + dc[0, 1])


def sensitivity_density_F_per_m3(solution: ChargeSolution, r_m: np.ndarray) -> np.ndarray:
    """Integrand of :func:`sensitivity_F_per_m` over the target area at radii (M,) -> (M,)."""
    return solution.plane_sensitivity_density(0, 0, r_m) + solution.plane_sensitivity_density(
        0, 1, r_m
    )


def _target_grid_args(p: GuardedDiskParams) -> tuple[float, float, float]:
    """(fine step, fine extent, outer extent) in m of the target grid of ``p``."""
    d = p.standoff_mm * MM
    outer = outer_radius_mm(p) * MM
    fine_extent = outer + 6.0 * (d + p.recess_mm * MM)
    step = min(d, p.sensor_radius_mm * MM) / 8.0
    # Beyond the guard the density decays like r**-6 (two dipole-like factors): 50x the
    # fine extent leaves far less than 1e-6 of the integral out.
    return step, fine_extent, 50.0 * fine_extent


def target_grid(p: GuardedDiskParams) -> np.ndarray:
    """Radii (M,) in m on the target resolving the density (step d/8) and its far tail."""
    return radial_grid(*_target_grid_args(p))


def _check_target_grid(rules: RuleBook, p: GuardedDiskParams) -> None:
    """Refuse a design whose target grid (see :func:`target_grid`) would be too large."""
    step, fine_extent, outer_extent = _target_grid_args(p)
    n = radial_grid_size(step, fine_extent, outer_extent)
    if n > MAX_TARGET_POINTS:
        rules.broken.append(
            f"standoff_mm = {p.standoff_mm:.6g} with sensor_radius_mm = {p.sensor_radius_mm:.6g} "
            f"needs a target grid of {n:.3g} points (step min(standoff_mm, sensor_radius_mm) / 8 "
            f"= {step / MM:.3g} mm out to {fine_extent / MM:.3g} mm); at most "
            f"{MAX_TARGET_POINTS:g}: bring the standoff and the probe's size closer together"
        )


def outer_radius_mm(p: GuardedDiskParams) -> float:
    """Outer radius of the guard, a + g + w (mm)."""
    return p.sensor_radius_mm + p.guard_gap_mm + p.guard_width_mm


def parallel_plate_radius_m(c_sense_F: float, standoff_m: float, eps_F_per_m: float) -> float:
    """Radius of the ideal (fringe-free) parallel-plate sensor with capacitance ``c_sense_F``."""
    return math.sqrt(c_sense_F * standoff_m / (math.pi * eps_F_per_m))


class GuardedDisk(SolvedByProfiles, ElectrodeFamily):
    """Guarded disk probe over a grounded target (see the module docstring)."""

    name: ClassVar[str] = "guarded_disk"
    Params: ClassVar[type] = GuardedDiskParams
    Options: ClassVar[type] = GuardedDiskOptions
    metrics: ClassVar[tuple[MetricSpec, ...]] = (
        m.SENSE,
        m.TOTAL,
        m.COUPLING,
        *m.PEAK_PROFILE,
        m.SENSITIVITY,
        m.SPOT,
        m.LINEARITY,
        m.EFFECTIVE_RADIUS,
        m.OUTER_RADIUS,
        m.LAYER_THICKNESS_SENSITIVITY,
        m.LAYER_EPS_SENSITIVITY,
    )

    def validate(self, params: GuardedDiskParams) -> None:
        rules = RuleBook(self.name, params)
        if rules.finite():
            rules.declared()
            p = params
            why = "fillets on one face must not overlap"
            rules.at_most("fillet_mm", p.thickness_mm / 2, "thickness_mm / 2", why)
            rules.at_most("fillet_mm", p.guard_width_mm / 2, "guard_width_mm / 2", why)
            rules.at_most(
                "fillet_mm",
                p.sensor_radius_mm,
                "sensor_radius_mm",
                "fillet wider than the sensor face",
            )
            rules.at_most(
                "recess_mm",
                p.thickness_mm,
                "thickness_mm",
                "the sensor face must stay within the guard",
            )
            if p.target_layer_um > 0 and p.target_layer_um * 1e-3 >= p.standoff_mm:
                rules.broken.append(
                    f"target_layer_um = {p.target_layer_um:g} must be below standoff_mm * 1000 = "
                    f"{p.standoff_mm * 1e3:g} (a layer that thick would bury the probe face)"
                )
            if p.spacer_eps_r != 1.0 and p.recess_mm > 0:
                rules.broken.append(
                    f"spacer_eps_r = {p.spacer_eps_r:g} needs recess_mm = 0 (got "
                    f"{p.recess_mm:g}): the spacer fills the gap between flush walls"
                )
            if p.potting_depth_mm > 0 and p.recess_mm > 0:
                rules.broken.append(
                    f"potting_depth_mm = {p.potting_depth_mm:g} needs recess_mm = 0 (got "
                    f"{p.recess_mm:g}): the potting meets sensor and guard on flush walls"
                )
            _check_straight_walls(rules, p)
            if not rules.broken:  # the grid's size needs the lengths to be valid
                _check_target_grid(rules, p)
        rules.raise_if_broken()

    def validate_design(self, params: GuardedDiskParams, options: GuardedDiskOptions) -> None:
        """The design, then its nearest linearity standoff (the sweep's hardest geometry),
        so that a rule it breaks there is said before the sweep starts."""
        self.validate(params)
        standoffs = linearity_standoffs_m(params, options)
        if len(standoffs) == 0:
            return
        nearest = replace(params, standoff_mm=float(np.min(standoffs)) / MM)
        try:
            self.validate(nearest)
        except ElectrodeError as exc:
            rules = str(exc).removeprefix(f"{self.name}: ")
            raise ElectrodeError(
                f"{self.name}: at the nearest linearity standoff, standoff_mm = "
                f"{nearest.standoff_mm:.6g} ((1 - linearity_range_fraction = "
                f"{options.linearity_range_fraction:.6g}) x standoff_mm = "
                f"{params.standoff_mm:.6g}): {rules}; raise standoff_mm or lower "
                "linearity_range_fraction"
            ) from None

    def validate_options(self, options: GuardedDiskOptions) -> None:
        rules = RuleBook(self.name, options)
        if rules.finite():
            rules.declared()
            n = options.linearity_points
            if n in (1, 2) and not isinstance(n, float):
                rules.broken.append(
                    f"linearity_points = {n!r} must be 0 (skip) or a whole number in [3, 25]"
                )
        rules.raise_if_broken()

    def build(
        self, params: GuardedDiskParams, *, eps_r: float = 1.0, options: Any = None
    ) -> Layout:
        self.validate(params)
        v = float(params.drive_V)
        try:
            return Layout(
                conductors=(
                    driven(SENSOR, sensor_curve(params), v),
                    driven(GUARD, guard_curve(params), v),
                ),
                eps_r=eps_r,
                ground_plane=True,
                layers=target_layers(params),
                regions=insulators(params),
            )
        except GeometryError as exc:
            values = ", ".join(f"{f.name} = {getattr(params, f.name):.6g}" for f in fields(params))
            raise ElectrodeError(
                f"{self.name}: these parameters give no valid cross-section ({exc}): {values}"
            ) from None

    def companion_designs(
        self, params: GuardedDiskParams, options: GuardedDiskOptions
    ) -> dict[str, GuardedDiskParams]:
        """The linearity standoffs other than the nominal one (its solve is reused)."""
        d = params.standoff_mm * MM
        return {
            f"{SWEEP}{k}": replace(params, standoff_mm=dk / MM)
            for k, dk in enumerate(linearity_standoffs_m(params, options))
            if not math.isclose(dk, d, rel_tol=1e-12)
        }

    def measure(
        self,
        params: GuardedDiskParams,
        options: GuardedDiskOptions,
        solution: ChargeSolution,
        companions: Mapping[str, ChargeSolution],
    ) -> Measured:
        sol = solution
        eps = sol.layout.eps_F_per_m
        d = params.standoff_mm * MM
        c_sense = sense_capacitance_F(sol)
        c = sol.capacitance_matrix_F
        r_grid = target_grid(params)
        density = sensitivity_density_F_per_m3(sol, r_grid)
        layer = layer_sensitivities(sol) if params.target_layer_um > 0 else None
        peak = sol.peak_field
        standoffs = linearity_standoffs_m(params, options)
        c_curve = np.array(
            [sense_capacitance_F(companions.get(f"{SWEEP}{k}", sol)) for k in range(len(standoffs))]
        )
        linearity = (
            linearity_error_pct_fs(standoffs, c_curve) if len(standoffs) >= 3 else float("nan")
        )
        metrics = {
            m.SENSE.name: c_sense * 1e15,
            m.TOTAL.name: float(c.sum()) * 1e15,
            m.COUPLING.name: -float(c[0, 1]) * 1e15,
            m.PEAK_R.name: float(peak.location_m[0]) / MM,
            m.PEAK_Z.name: float(peak.location_m[1]) / MM,
            m.SENSITIVITY.name: (layer["standoff_F_per_m"] if layer else sensitivity_F_per_m(sol))
            * FF_PER_UM,
            m.SPOT.name: spot_radius(r_grid, density, 0.9) / MM,
            m.LINEARITY.name: linearity,
            m.EFFECTIVE_RADIUS.name: parallel_plate_radius_m(c_sense, d, eps) / MM,
            m.OUTER_RADIUS.name: outer_radius_mm(params),
            # bare target: the onset of a layer of target_layer_eps_r (a thin sheet of the
            # field-normal gap turning dielectric: (1 - eps_medium/eps_layer) x sensitivity;
            # a layer of no thickness has no permittivity sensitivity)
            m.LAYER_THICKNESS_SENSITIVITY.name: (
                layer["thickness_F_per_m"]
                if layer
                else (1 - sol.layout.eps_r / params.target_layer_eps_r) * sensitivity_F_per_m(sol)
            )
            * FF_PER_UM,
            m.LAYER_EPS_SENSITIVITY.name: layer["eps_F"] * 1e15 if layer else 0.0,
        }
        extra: dict[str, Any] = {
            "sense_capacitance_F": c_sense,
            "sense_capacitance_meaning": "Q_sensor / V with the guard driven at V",
            "target_r_m": r_grid,
            "sensitivity_density_F_per_m3": density,
            "linearity_standoff_m": standoffs,
            "linearity_sense_capacitance_F": c_curve,
        }
        if layer:
            extra["layer_derivative_rel_error_estimates"] = layer["rel_errors"]
        return Measured(metrics, extra)


def target_layers(p: GuardedDiskParams) -> tuple[PlanarLayer, ...]:
    """The layer on the target (a coating, a film), if any."""
    if p.target_layer_um <= 0:
        return ()
    return (PlanarLayer(TARGET_LAYER, p.target_layer_eps_r, 0.0, p.target_layer_um * UM),)


#: Shortest straight wall between the fillets that a spacer, sleeve or potting may rest on,
#: relative to the largest of thickness, gap and sleeve width: a shorter wall would make
#: region sides finer than the region checks resolve (they sample every piece).
MIN_WALL = 1e-3


def _check_straight_walls(rules: RuleBook, p: GuardedDiskParams) -> None:
    """Spacer, sleeve and potting rest on the straight walls between the fillets."""
    users = [
        name
        for name, used in (
            ("spacer_eps_r", p.spacer_eps_r != 1.0),
            ("housing_width_mm", p.housing_width_mm > 0),
            ("potting_depth_mm", p.potting_depth_mm > 0),
        )
        if used
    ]
    if not users:
        return
    wall = p.thickness_mm - 2 * p.fillet_mm
    need = MIN_WALL * max(p.thickness_mm, p.guard_gap_mm, p.housing_width_mm)
    if not wall >= need:
        rules.broken.append(
            f"{' and '.join(users)} need thickness_mm - 2 fillet_mm = {wall:.6g} >= {need:.3g} "
            f"({MIN_WALL:g} x the largest of thickness_mm, guard_gap_mm, housing_width_mm): "
            "they rest on the straight walls between the fillets"
        )


def insulators(p: GuardedDiskParams) -> tuple[DielectricRegion, ...]:
    """The spacer in the sensor-guard gap, the sleeve on the guard and the potting behind
    them, if any. Spacer and sleeve are rectangles on the straight walls between the fillets
    (their corners meet the walls at the fillets' ends, where the conductor curves have
    joints); the potting follows the back pieces of the conductor curves themselves."""
    a = p.sensor_radius_mm * MM
    r_in = a + p.guard_gap_mm * MM
    r_out = r_in + p.guard_width_mm * MM
    z0 = (p.standoff_mm + p.fillet_mm) * MM
    z1 = (p.standoff_mm + p.thickness_mm - p.fillet_mm) * MM
    out = []
    if p.spacer_eps_r != 1.0:
        out.append(DielectricRegion(SPACER, _box(a, r_in, z0, z1), p.spacer_eps_r))
    if p.housing_width_mm > 0:
        sleeve = _box(r_out, r_out + p.housing_width_mm * MM, z0, z1)
        out.append(DielectricRegion(HOUSING, sleeve, p.housing_eps_r))
    if p.potting_depth_mm > 0:
        out.append(DielectricRegion(POTTING, potting_curve(p), p.potting_eps_r))
    return tuple(out)


def potting_curve(p: GuardedDiskParams) -> Curve:
    """Boundary of the potting: from the axis at its top out to its rim, down to the top of
    the straight walls z1 = d + t - rho, along the sleeve's top, over the guard's back, across
    the sensor-guard gap and over the sensor's back to the axis (see the module docstring).
    The pieces on the conductors are the conductor curves' own; the others end where those
    do (a fillet near its limit may have its tangent lengthened a hair, see
    :func:`elopt.physics.geometry.rounded_polyline`)."""
    r_out = outer_radius_mm(p) * MM
    rim = r_out + p.housing_width_mm * MM
    z1 = (p.standoff_mm + p.thickness_mm - p.fillet_mm) * MM
    top = (p.standoff_mm + p.thickness_mm + p.potting_depth_mm) * MM
    wall = (p.thickness_mm - 2 * p.fillet_mm) * MM
    guard = _back_pieces(guard_curve(p), z1, wall)
    sensor = _back_pieces(sensor_curve(p), z1, wall)
    pieces: list = [Segment((0.0, top), (rim, top))]
    if p.housing_width_mm > 0:
        pieces += [Segment((rim, top), (rim, z1)), Segment((rim, z1), guard[0].start)]
    else:
        pieces.append(Segment((rim, top), guard[0].start))
    pieces += [*guard, Segment(guard[-1].end, sensor[0].start), *sensor]
    return Curve(tuple(pieces))


def _back_pieces(curve: Curve, z1: float, wall: float) -> list:
    """The pieces of a conductor curve whose ends lie at or above z1 (its back face and back
    fillets; a straight wall below reaches ``wall`` lower), in the curve's own order: from
    its outer wall over the back towards the axis or its inner wall."""
    return [pc for pc in curve.pieces if min(pc.start[1], pc.end[1]) >= z1 - 0.5 * wall]


def _box(r0: float, r1: float, z0: float, z1: float) -> Curve:
    pts = [(r0, z0), (r1, z0), (r1, z1), (r0, z1), (r0, z0)]
    return Curve(tuple(Segment(s, e) for s, e in zip(pts[:-1], pts[1:], strict=True)))


def layer_sensitivities(solution: ChargeSolution) -> dict[str, Any]:
    """-dC_sense/d(standoff), dC_sense/d(layer thickness) (F/m) and dC_sense/d(layer eps_r)
    (F) by central differences at the solution's mesh level, with their Richardson errors."""
    std = solution.standoff_derivative_fd()
    thick = solution.layer_thickness_derivative(TARGET_LAYER)
    eps = solution.eps_derivative(TARGET_LAYER)

    def sense(fd) -> float:
        return float(fd.value[0, 0] + fd.value[0, 1])

    return {
        # the plane and its layer moving up by delta is the standoff shrinking by delta
        "standoff_F_per_m": sense(std),
        "thickness_F_per_m": sense(thick),
        "eps_F": sense(eps),
        "rel_errors": {
            "standoff": std.rel_error_estimate,
            "thickness": thick.rel_error_estimate,
            "eps_r": eps.rel_error_estimate,
        },
    }


def linearity_standoffs_m(params: GuardedDiskParams, options: GuardedDiskOptions) -> np.ndarray:
    """The standoffs (m) of the linearity sweep, (points,); empty when it is skipped."""
    if options.linearity_points == 0:
        return np.empty(0)
    d = params.standoff_mm * MM
    return standoff_range(d, options.linearity_range_fraction, options.linearity_points)


def effective_area_amey_hamburger_m2(
    electrode_diameter_m: float, guard_gap_m: float, spacing_m: float
) -> float:
    """Effective area of a thin guarded electrode with a wide guard (m^2).

    A = pi (d1 + B g)^2 / 4, B = 1 - 2 delta / g, delta = t (2/pi) ln cosh(pi g / (4 t)),
    d1 the guarded electrode's diameter, g the guard gap, t the spacing to the opposite
    electrode. Amey & Hamburger, Proc. ASTM 49, 1079 (1949), as used by ASTM D150 / D257
    (formula from memory, see docs/references.md item 8).

    The formula lets no field through the gap (the limit of a specimen much more permittive
    than the space behind the electrodes). For a vacuum gap, as here, the field leaking through
    the gap makes B larger, by about pi g / (16 t) to first order in g / t (splitting the slit
    problem into its even and odd parts; our own estimate): use it for g << t.
    """
    g, t = guard_gap_m, spacing_m
    delta = t * (2.0 / math.pi) * math.log(math.cosh(math.pi * g / (4.0 * t)))
    b = 1.0 - 2.0 * delta / g
    return math.pi * (electrode_diameter_m + b * g) ** 2 / 4.0


__all__ = [
    "GuardedDisk",
    "GuardedDiskOptions",
    "GuardedDiskParams",
    "effective_area_amey_hamburger_m2",
    "guard_curve",
    "sense_capacitance_F",
    "sensitivity_F_per_m",
    "sensitivity_density_F_per_m3",
    "sensor_curve",
]

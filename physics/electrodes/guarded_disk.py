"""Guarded disk probe: a solid disk sensor inside a driven guard ring, facing a grounded target.

Geometry (parameters in mm, SI inside), in the (r, z) half-plane above the target z = 0:

- sensor: solid cylinder r <= a, d + s <= z <= d + s + t (face recessed by s >= 0);
- guard: solid annulus a + g <= r <= a + g + w, d <= z <= d + t (face at the standoff d);
- every off-axis corner of both cross-sections rounded with radius rho (rho = 0: sharp).

Sensor and guard are both driven at V (driven guard); the target plane is at 0. The sense
capacitance is C_sense = Q_sensor / V = C_ss + C_sg of the Maxwell matrix. Its sensitivity
to the standoff comes from one solve through the Hadamard shape derivative of the target:
-dC_sense/dd = (1/eps) * integral over the plane of sigma_s (sigma_s + sigma_g), with sigma_i
the plane's charge density with conductor i at 1 V and the other at 0. The integrand is the
sensitivity density; the radius holding 90 % of it is the probe's spot radius.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Any, ClassVar

import numpy as np

from elopt.physics.bem_axi.solve import solve_axisymmetric
from elopt.physics.electrodes import probe_metrics as probe
from elopt.physics.electrodes.base import ElectrodeFamily, Evaluation, MetricSpec
from elopt.physics.electrodes.linearity import linearity_error_pct_fs, standoff_range
from elopt.physics.electrodes.rules import RuleBook
from elopt.physics.electrodes.target_spot import radial_grid, spot_radius
from elopt.physics.geometry import Curve, rounded_polyline
from elopt.physics.layout import Layout, driven
from elopt.physics.solution import ChargeSolution

MM = 1e-3
SENSOR = "sensor"
GUARD = "guard"
#: fF per um for a derivative in F/m.
FF_PER_UM = 1e15 * 1e-6


@dataclass(frozen=True)
class GuardedDiskParams:
    """Guarded disk probe parameters; lengths in mm, drive in V."""

    sensor_radius_mm: float
    guard_gap_mm: float
    guard_width_mm: float
    thickness_mm: float
    fillet_mm: float
    standoff_mm: float
    drive_V: float
    recess_mm: float = 0.0


@dataclass(frozen=True)
class GuardedDiskOptions:
    """How :meth:`GuardedDisk.evaluate` measures linearity.

    The standoffs are d * (1 -+ ``linearity_range_fraction``), ``linearity_points`` of them
    evenly spaced (odd counts reuse the nominal solve); 0 points skips linearity (NaN).
    """

    linearity_range_fraction: float = 0.5
    linearity_points: int = 5


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


def target_grid(p: GuardedDiskParams) -> np.ndarray:
    """Radii (M,) in m on the target resolving the density (step d/8) and its far tail."""
    d = p.standoff_mm * MM
    outer = outer_radius_mm(p) * MM
    fine_extent = outer + 6.0 * (d + p.recess_mm * MM)
    step = min(d, p.sensor_radius_mm * MM) / 8.0
    # Beyond the guard the density decays like r**-6 (two dipole-like factors): 50x the
    # fine extent leaves far less than 1e-6 of the integral out.
    return radial_grid(step, fine_extent, 50.0 * fine_extent)


def outer_radius_mm(p: GuardedDiskParams) -> float:
    """Outer radius of the guard, a + g + w (mm)."""
    return p.sensor_radius_mm + p.guard_gap_mm + p.guard_width_mm


def parallel_plate_radius_m(c_sense_F: float, standoff_m: float, eps_F_per_m: float) -> float:
    """Radius of the ideal (fringe-free) parallel-plate sensor with capacitance ``c_sense_F``."""
    return math.sqrt(c_sense_F * standoff_m / (math.pi * eps_F_per_m))


class GuardedDisk(ElectrodeFamily):
    """Guarded disk probe over a grounded target (see the module docstring)."""

    name: ClassVar[str] = "guarded_disk"
    Params: ClassVar[type] = GuardedDiskParams
    Options: ClassVar[type] = GuardedDiskOptions
    metrics: ClassVar[tuple[MetricSpec, ...]] = (
        probe.SENSE,
        probe.TOTAL,
        probe.COUPLING,
        probe.PEAK_FIELD,
        MetricSpec("peak_field_r_mm", "mm", "radius of the peak field", "either"),
        probe.PEAK_Z,
        probe.SENSITIVITY,
        probe.SPOT,
        MetricSpec("linearity_error_pct_fs", "%FS", "1/C_sense off its best line", "minimize"),
        probe.EFFECTIVE_RADIUS,
        MetricSpec("outer_radius_mm", "mm", "outer radius of the guard", "minimize"),
    )

    def validate(self, params: GuardedDiskParams) -> None:
        rules = RuleBook(self.name, params)
        if rules.finite():
            rules.positive(
                "sensor_radius_mm", "guard_gap_mm", "guard_width_mm", "thickness_mm", "standoff_mm"
            )
            rules.non_negative("fillet_mm", "recess_mm")
            rules.nonzero("drive_V")
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
        rules.raise_if_broken()

    def validate_options(self, options: GuardedDiskOptions) -> None:
        rules = RuleBook(self.name, options)
        if rules.finite():
            f = options.linearity_range_fraction
            if not 0 < f < 1:
                rules.broken.append(
                    f"linearity_range_fraction = {f:.6g} must be in (0, 1) (standoffs d (1 -+ f))"
                )
            n = options.linearity_points
            if isinstance(n, float) or not (n == 0 or 3 <= n <= 25):
                rules.broken.append(
                    f"linearity_points = {n!r} must be 0 (skip) or a whole number in [3, 25]"
                )
        rules.raise_if_broken()

    def build(self, params: GuardedDiskParams, *, eps_r: float = 1.0) -> Layout:
        self.validate(params)
        v = float(params.drive_V)
        return Layout(
            conductors=(
                driven(SENSOR, sensor_curve(params), v),
                driven(GUARD, guard_curve(params), v),
            ),
            eps_r=eps_r,
            ground_plane=True,
        )

    def evaluate(
        self,
        params: GuardedDiskParams,
        *,
        rel_accuracy: float = 1e-4,
        peak_rel_accuracy: float | None = None,
        eps_r: float = 1.0,
        options: GuardedDiskOptions | None = None,
    ) -> Evaluation:
        options = options or GuardedDiskOptions()
        self.validate_options(options)
        layout = self.build(params, eps_r=eps_r)
        sol = solve_axisymmetric(
            layout, rel_accuracy=rel_accuracy, peak_rel_accuracy=peak_rel_accuracy
        )
        eps = layout.eps_F_per_m
        d = params.standoff_mm * MM
        c_sense = sense_capacitance_F(sol)
        c = sol.capacitance_matrix_F
        r_grid = target_grid(params)
        density = sensitivity_density_F_per_m3(sol, r_grid)
        peak = sol.peak_field
        standoffs, c_curve = self._standoff_sweep(params, options, sol, rel_accuracy, eps_r)
        linearity = (
            linearity_error_pct_fs(standoffs, c_curve) if len(standoffs) >= 3 else float("nan")
        )
        metrics = {
            "sense_capacitance_fF": c_sense * 1e15,
            "total_capacitance_fF": float(c.sum()) * 1e15,
            "sensor_guard_coupling_fF": -float(c[0, 1]) * 1e15,
            "peak_surface_field_V_per_m": float(peak.field_V_per_m),
            "peak_field_r_mm": float(peak.location_m[0]) / MM,
            "peak_field_z_mm": float(peak.location_m[1]) / MM,
            "sensitivity_fF_per_um": sensitivity_F_per_m(sol) * FF_PER_UM,
            "spot_radius_90_mm": spot_radius(r_grid, density, 0.9) / MM,
            "linearity_error_pct_fs": linearity,
            "effective_radius_mm": parallel_plate_radius_m(c_sense, d, eps) / MM,
            "outer_radius_mm": outer_radius_mm(params),
        }
        extra: dict[str, Any] = {
            "layout": layout,
            "sense_capacitance_F": c_sense,
            "sense_capacitance_meaning": "Q_sensor / V with the guard driven at V",
            "peak_conductor": peak.conductor,
            "peak_singular": bool(peak.singular),
            "target_r_m": r_grid,
            "sensitivity_density_F_per_m3": density,
            "linearity_standoff_m": standoffs,
            "linearity_sense_capacitance_F": c_curve,
        }
        return Evaluation(metrics=metrics, solution=sol, extra=extra)

    def _standoff_sweep(
        self,
        params: GuardedDiskParams,
        options: GuardedDiskOptions,
        nominal: ChargeSolution,
        rel_accuracy: float,
        eps_r: float,
    ) -> tuple[np.ndarray, np.ndarray]:
        """C_sense (F) at the linearity standoffs (m); the nominal solve is reused."""
        if options.linearity_points == 0:
            return np.empty(0), np.empty(0)
        d = params.standoff_mm * MM
        standoffs = standoff_range(d, options.linearity_range_fraction, options.linearity_points)
        c_values = np.empty_like(standoffs)
        for k, dk in enumerate(standoffs):
            if math.isclose(dk, d, rel_tol=1e-12):
                c_values[k] = sense_capacitance_F(nominal)
                continue
            shifted = replace(params, standoff_mm=dk / MM)
            sol = solve_axisymmetric(self.build(shifted, eps_r=eps_r), rel_accuracy=rel_accuracy)
            c_values[k] = sense_capacitance_F(sol)
        return standoffs, c_values


def effective_area_amey_hamburger_m2(
    electrode_diameter_m: float, guard_gap_m: float, spacing_m: float
) -> float:
    """Effective area of a thin guarded electrode with a wide guard (m^2).

    A = pi (d1 + B g)^2 / 4, B = 1 - 2 delta / g, delta = t (2/pi) ln cosh(pi g / (4 t)),
    d1 the guarded electrode's diameter, g the guard gap, t the spacing to the opposite
    electrode. Amey & Hamburger, Proc. ASTM 49, 1079 (1949), as used by ASTM D150 / D257
    (formula from memory, see REFERENCES.md item 8).

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

"""Conductors read from triangle-mesh files (STL, OBJ, PLY), solved by the 3-D panel solver.

A config names one table per conductor::

    [geometry]
    family = "mesh_file"
    ground_plane = true              # optional: a grounded plane z = 0 below everything
    [[geometry.conductors]]
    name = "sensor"
    file = "sensor.stl"              # relative to the config file
    length_unit = "mm"               # m, cm, mm, um or in: mesh files carry no unit
    potential_V = 10.0               # or charge_C = 0.0 (floating)
    closed = true                    # optional: false for an open thin sheet

The first conductor is the sensor: ``sense_capacitance`` is its charge over its potential at
the given drive (with a driven guard at the same potential this is the guarded sense
capacitance). The standoff and tilt sensitivities (ground plane only, every conductor
driven) are those of that charge: -dQ_0/dd / V_0 and dQ_0/dtheta / V_0 for the plane moved
along +z and tilted about the y axis through the origin.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any, ClassVar

import numpy as np

from elopt.physics.bem3d import load_mesh_surface, solve_3d
from elopt.physics.bem3d.mesh_io import LENGTH_UNITS
from elopt.physics.electrodes.base import ElectrodeFamily, Evaluation, MetricSpec
from elopt.physics.electrodes.guarded_pad import spot_radius_m
from elopt.physics.electrodes.target_tilt import FF_PER_MRAD, FF_PER_UM
from elopt.physics.errors import ElectrodeError, GeometryError
from elopt.physics.layout import Conductor, Layout

MM = 1e-3
CONDUCTOR_KEYS = ("name", "file", "length_unit", "potential_V", "charge_C", "closed")
GEOMETRY_KEYS = ("family", "conductors", "ground_plane")


@dataclass(frozen=True)
class MeshConductorSpec:
    """One conductor: its mesh file (absolute path), unit, and its potential or charge."""

    name: str
    file: str
    length_unit: str
    potential_V: float | None = None
    charge_C: float | None = None
    closed: bool = True


@dataclass(frozen=True)
class MeshFileParams:
    """Conductors from mesh files. ``drive_V`` is derived: the largest |potential_V|."""

    conductors: tuple[MeshConductorSpec, ...]
    ground_plane: bool = False
    drive_V: float = 0.0


@dataclass(frozen=True)
class MeshFileOptions:
    """``max_level``: finest refinement level (each splits every triangle in four)."""

    max_level: int = 2


def _number(value: Any, key: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise ElectrodeError(f"{key}: expected a finite number, got {value!r}")
    return float(value)


def _unknown(table: dict, allowed: tuple[str, ...], where: str) -> None:
    for key in table:
        if key not in allowed:
            raise ElectrodeError(f"{where}.{key}: unknown key; allowed keys: {', '.join(allowed)}")


class MeshFile(ElectrodeFamily):
    """Any conductors given as triangle meshes (module docstring)."""

    name: ClassVar[str] = "mesh_file"
    Params: ClassVar[type] = MeshFileParams
    Options: ClassVar[type] = MeshFileOptions
    metrics: ClassVar[tuple[MetricSpec, ...]] = (
        MetricSpec("sense_capacitance_fF", "fF", "Q_0 / V_0 of the first conductor", "maximize"),
        MetricSpec("total_capacitance_fF", "fF", "sum of the capacitance matrix", "either"),
        MetricSpec(
            "peak_surface_field_V_per_m", "V/m", "largest surface field at drive", "minimize"
        ),
        MetricSpec("peak_field_x_mm", "mm", "x of the peak field", "either"),
        MetricSpec("peak_field_y_mm", "mm", "y of the peak field", "either"),
        MetricSpec("peak_field_z_mm", "mm", "z of the peak field", "either"),
        MetricSpec("sensitivity_fF_per_um", "fF/um", "-dQ_0/dd / V_0 (plane moved)", "maximize"),
        MetricSpec(
            "tilt_sensitivity_fF_per_mrad", "fF/mrad", "dQ_0/dtheta / V_0 (plane tilted)", "either"
        ),
        MetricSpec("spot_radius_90_mm", "mm", "target disk with 90% of it", "minimize"),
    )

    def params_from_table(self, geometry: dict, where: str, base_dir: Path) -> MeshFileParams:
        """Read the ``[geometry]`` table (file paths relative to ``base_dir``)."""
        _unknown(geometry, GEOMETRY_KEYS, where)
        raw = geometry.get("conductors")
        if not isinstance(raw, list) or not raw or not all(isinstance(t, dict) for t in raw):
            raise ElectrodeError(
                f"{where}.conductors: give one [[{where}.conductors]] table per conductor "
                "(name, file, length_unit, potential_V or charge_C)"
            )
        specs = []
        for k, t in enumerate(raw):
            at = f"{where}.conductors[{k}]"
            _unknown(t, CONDUCTOR_KEYS, at)
            for key in ("name", "file", "length_unit"):
                if not isinstance(t.get(key), str) or not t[key]:
                    raise ElectrodeError(f"{at}.{key}: required, a non-empty string")
            pot = _number(t["potential_V"], f"{at}.potential_V") if "potential_V" in t else None
            chg = _number(t["charge_C"], f"{at}.charge_C") if "charge_C" in t else None
            closed = t.get("closed", True)
            if not isinstance(closed, bool):
                raise ElectrodeError(f"{at}.closed: expected true or false, got {closed!r}")
            path = Path(t["file"])
            if not path.is_absolute():
                path = base_dir / path
            specs.append(
                MeshConductorSpec(t["name"], str(path), t["length_unit"], pot, chg, closed)
            )
        ground = geometry.get("ground_plane", False)
        if not isinstance(ground, bool):
            raise ElectrodeError(f"{where}.ground_plane: expected true or false, got {ground!r}")
        drive = max((abs(s.potential_V) for s in specs if s.potential_V is not None), default=0.0)
        return MeshFileParams(tuple(specs), ground, drive)

    def validate(self, params: MeshFileParams) -> None:
        names = [s.name for s in params.conductors]
        problems = []
        dup = sorted({n for n in names if names.count(n) > 1})
        if dup:
            problems.append(f"conductor names must be unique, repeated: {dup}")
        for k, s in enumerate(params.conductors):
            at = f"conductors[{k}] '{s.name}'"
            if (s.potential_V is None) == (s.charge_C is None):
                problems.append(
                    f"{at}: give exactly one of potential_V (driven) or charge_C (floating)"
                )
            if s.length_unit not in LENGTH_UNITS:
                problems.append(
                    f"{at}: length_unit {s.length_unit!r} is not one of {', '.join(LENGTH_UNITS)}"
                )
            if not Path(s.file).is_file():
                problems.append(f"{at}: no such mesh file {s.file}")
        if problems:
            raise ElectrodeError(f"{self.name}: " + "; ".join(problems))

    def validate_options(self, options: MeshFileOptions) -> None:
        lvl = options.max_level
        if isinstance(lvl, bool) or not isinstance(lvl, int) or not 1 <= lvl <= 5:
            raise ElectrodeError(
                f"{self.name}: max_level = {lvl!r} must be a whole number in [1, 5]"
            )

    def build(self, params: MeshFileParams, *, eps_r: float = 1.0) -> Layout:
        self.validate(params)
        conductors = []
        for s in params.conductors:
            try:
                surface = load_mesh_surface(
                    s.file, length_unit=s.length_unit, closed=s.closed, name=s.name
                )
            except GeometryError as exc:
                raise ElectrodeError(f"{self.name}: {exc}") from None
            conductors.append(Conductor(s.name, surface, s.potential_V, s.charge_C))
        return Layout(tuple(conductors), eps_r=eps_r, ground_plane=params.ground_plane)

    def evaluate(
        self,
        params: MeshFileParams,
        *,
        rel_accuracy: float = 1e-4,
        peak_rel_accuracy: float | None = None,
        eps_r: float = 1.0,
        options: MeshFileOptions | None = None,
    ) -> Evaluation:
        options = options or MeshFileOptions()
        self.validate_options(options)
        layout = self.build(params, eps_r=eps_r)
        try:
            sol = solve_3d(
                layout,
                rel_accuracy=rel_accuracy,
                peak_rel_accuracy=peak_rel_accuracy,
                max_level=options.max_level,
                strict=False,
            )
        except GeometryError as exc:
            raise ElectrodeError(f"{self.name}: {exc}") from None
        c = sol.capacitance_matrix_F
        v0 = float(sol.potentials_V[0])
        first = layout.conductors[0]
        sense = float(sol.charges_C[0]) / v0 if (not first.floating and v0 != 0) else float("nan")
        peak = sol.peak_field
        nan = float("nan")
        sens = tilt = spot = nan
        driven_all = not any(cd.floating for cd in layout.conductors)
        if layout.ground_plane and driven_all and layout.applied_field_V_per_m == 0 and v0 != 0:
            volts = sol.potentials_V / v0
            sens = float(sol.plane_capacitance_derivative_F_per_m()[0] @ volts) * FF_PER_UM
            tilt = float(sol.plane_tilt_derivative_F_per_rad()[0] @ volts) * FF_PER_MRAD
            xy, w = sol.plane_quadrature()
            unit = sol.plane_unit_charge_densities()
            density = unit[:, 0] * (unit @ volts) / layout.eps_F_per_m
            spot = spot_radius_m(xy, w, density, 0.9) / MM
        metrics = {
            "sense_capacitance_fF": sense * 1e15,
            "total_capacitance_fF": float(np.sum(c)) * 1e15,
            "peak_surface_field_V_per_m": float(peak.field_V_per_m),
            "peak_field_x_mm": peak.location_m[0] / MM,
            "peak_field_y_mm": peak.location_m[1] / MM,
            "peak_field_z_mm": peak.location_m[2] / MM,
            "sensitivity_fF_per_um": sens,
            "tilt_sensitivity_fF_per_mrad": tilt,
            "spot_radius_90_mm": spot,
        }
        extra = {
            "layout": layout,
            "sense_capacitance_F": sense,
            "sense_capacitance_meaning": f"Q / V of the first conductor '{first.name}' at the drive",
            "peak_conductor": peak.conductor,
            "peak_singular": bool(peak.singular),
        }
        return Evaluation(metrics=metrics, solution=sol, extra=extra)


__all__ = ["MeshConductorSpec", "MeshFile", "MeshFileOptions", "MeshFileParams"]

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
    [[geometry.bodies]]              # optional: dielectric bodies, one table each
    name = "potting"
    file = "potting.stl"             # a closed surface; it may enclose conductors
    length_unit = "mm"
    eps_r = 3.2                      # relative permittivity of the body, > 0

A body fills what its closed surface encloses except the conductors inside it (a coating
or a potting); bodies may nest, and no surface may cross or touch another one
(:mod:`elopt.physics.bem3d.bodies`). The first conductor is the sensor: ``sense_capacitance`` is its charge over its potential at
the given drive (with a driven guard at the same potential this is the guarded sense
capacitance). The standoff and tilt sensitivities (ground plane only, every conductor
driven) are those of that charge: -dQ_0/dd / V_0 and dQ_0/dtheta / V_0 for the plane moved
along +z and tilted about the y axis through the origin.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any, ClassVar

import numpy as np

from elopt.physics.bem3d import load_mesh_surface
from elopt.physics.bem3d.mesh_io import LENGTH_UNITS
from elopt.physics.electrodes import metrics as m
from elopt.physics.electrodes.base import (
    DRIVE_V_MAX,
    ElectrodeFamily,
    Measured,
    MetricSpec,
    parameter,
    parameter_specs,
)
from elopt.physics.electrodes.guarded_pad import spot_radius_m
from elopt.physics.electrodes.solvers import (
    ESTIMATE_LEVEL,
    MAX_SOLVE_PANELS,
    SolvedByPanels,
    estimated_panels,
    refuse_too_many_panels,
)
from elopt.physics.electrodes.target_tilt import FF_PER_MRAD, FF_PER_UM
from elopt.physics.errors import ElectrodeError, GeometryError
from elopt.physics.layout import Conductor, Layout
from elopt.physics.media import DielectricRegion
from elopt.physics.solution import ChargeSolution

MM = 1e-3
CONDUCTOR_KEYS = ("name", "file", "length_unit", "potential_V", "charge_C", "closed")
BODY_KEYS = ("name", "file", "length_unit", "eps_r")
GEOMETRY_KEYS = ("family", "conductors", "bodies", "ground_plane")
#: Largest relative permittivity of a body (that of :func:`elopt.physics.media.check_eps_r`).
BODY_EPS_R_MAX = 1e6


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
class MeshBodySpec:
    """One dielectric body: its mesh file (absolute path, a closed surface), unit, eps_r."""

    name: str
    file: str
    length_unit: str
    eps_r: float


@dataclass(frozen=True)
class MeshFileParams:
    """Conductors from mesh files. ``drive_V`` is derived: the largest |potential_V|."""

    conductors: tuple[MeshConductorSpec, ...] = parameter(
        "", "one mesh file per conductor, with its unit and drive"
    )
    ground_plane: bool = parameter("", "grounded plane z = 0 below everything", default=False)
    bodies: tuple[MeshBodySpec, ...] = parameter(
        "", "one closed mesh file per dielectric body, with its unit and eps_r", default=()
    )
    drive_V: float = parameter(
        "V", "largest |potential_V| (derived)", default=0.0, abs_high=DRIVE_V_MAX
    )


@dataclass(frozen=True)
class MeshFileOptions:
    """How the meshes are refined (each level splits every triangle in four)."""

    max_level: int = parameter("", "finest refinement level", default=2, low=1, high=5, whole=True)


def _number(value: Any, key: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise ElectrodeError(f"{key}: expected a finite number, got {value!r}")
    return float(value)


def _unknown(table: dict, allowed: tuple[str, ...], where: str) -> None:
    for key in table:
        if key not in allowed:
            raise ElectrodeError(f"{where}.{key}: unknown key; allowed keys: {', '.join(allowed)}")


def _tables(raw: Any, at: str, what: str, required: bool) -> list:
    """``raw`` as a list of tables (non-empty when ``required``), else a one-line error."""
    if (
        not isinstance(raw, list)
        or (required and not raw)
        or not all(isinstance(t, dict) for t in raw)
    ):
        raise ElectrodeError(f"{at}: give one [[{at}]] table per {what}")
    return raw


def _file_table(table: dict, allowed: tuple[str, ...], at: str, base_dir: Path) -> Path:
    """Check a conductor's or body's table (keys; name, file, length_unit non-empty strings)
    and return its file's path, relative paths taken from ``base_dir``."""
    _unknown(table, allowed, at)
    for key in ("name", "file", "length_unit"):
        if not isinstance(table.get(key), str) or not table[key]:
            raise ElectrodeError(f"{at}.{key}: required, a non-empty string")
    path = Path(table["file"])
    return path if path.is_absolute() else base_dir / path


class MeshFile(SolvedByPanels, ElectrodeFamily):
    """Any conductors given as triangle meshes (module docstring)."""

    name: ClassVar[str] = "mesh_file"
    Params: ClassVar[type] = MeshFileParams
    Options: ClassVar[type] = MeshFileOptions
    metrics: ClassVar[tuple[MetricSpec, ...]] = (
        m.SENSE,
        m.TOTAL,
        *m.PEAK_3D,
        m.SENSITIVITY,
        m.TILT_SENSITIVITY,
        m.SPOT,
    )

    def params_from_table(self, geometry: dict, where: str, base_dir: Path) -> MeshFileParams:
        """Read the ``[geometry]`` table (file paths relative to ``base_dir``)."""
        _unknown(geometry, GEOMETRY_KEYS, where)
        raw = _tables(
            geometry.get("conductors"),
            f"{where}.conductors",
            "conductor (name, file, length_unit, potential_V or charge_C)",
            required=True,
        )
        specs = []
        for k, t in enumerate(raw):
            at = f"{where}.conductors[{k}]"
            path = _file_table(t, CONDUCTOR_KEYS, at, base_dir)
            pot = _number(t["potential_V"], f"{at}.potential_V") if "potential_V" in t else None
            chg = _number(t["charge_C"], f"{at}.charge_C") if "charge_C" in t else None
            closed = t.get("closed", True)
            if not isinstance(closed, bool):
                raise ElectrodeError(f"{at}.closed: expected true or false, got {closed!r}")
            specs.append(
                MeshConductorSpec(t["name"], str(path), t["length_unit"], pot, chg, closed)
            )
        bodies = self._bodies_from_table(geometry.get("bodies", []), where, base_dir)
        ground = geometry.get("ground_plane", False)
        if not isinstance(ground, bool):
            raise ElectrodeError(f"{where}.ground_plane: expected true or false, got {ground!r}")
        drive = max((abs(s.potential_V) for s in specs if s.potential_V is not None), default=0.0)
        return MeshFileParams(tuple(specs), ground, bodies, drive)

    @staticmethod
    def _bodies_from_table(raw: Any, where: str, base_dir: Path) -> tuple[MeshBodySpec, ...]:
        tables = _tables(
            raw, f"{where}.bodies", "dielectric body (name, file, length_unit, eps_r)", False
        )
        out = []
        for k, t in enumerate(tables):
            at = f"{where}.bodies[{k}]"
            path = _file_table(t, BODY_KEYS, at, base_dir)
            if "eps_r" not in t:
                raise ElectrodeError(f"{at}.eps_r: required, the body's relative permittivity")
            eps_r = _number(t["eps_r"], f"{at}.eps_r")
            out.append(MeshBodySpec(t["name"], str(path), t["length_unit"], eps_r))
        return tuple(out)

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
        body_names = [b.name for b in params.bodies]
        dup = sorted({n for n in body_names if body_names.count(n) > 1 or n in names})
        if dup:
            problems.append(
                f"body names must be unique and differ from conductor names, repeated: {dup}"
            )
        for k, b in enumerate(params.bodies):
            at = f"bodies[{k}] '{b.name}'"
            if not (0.0 < b.eps_r <= BODY_EPS_R_MAX):
                problems.append(f"{at}: eps_r must lie in (0, {BODY_EPS_R_MAX:g}], got {b.eps_r:g}")
            if b.length_unit not in LENGTH_UNITS:
                problems.append(
                    f"{at}: length_unit {b.length_unit!r} is not one of {', '.join(LENGTH_UNITS)}"
                )
            if not Path(b.file).is_file():
                problems.append(f"{at}: no such mesh file {b.file}")
        drive = parameter_specs(MeshFileParams)[-1]
        broken = drive.info.broken_rule(drive.name, params.drive_V)
        if broken:
            problems.append(f"{broken} (the largest |potential_V|)")
        if problems:
            raise ElectrodeError(f"{self.name}: " + "; ".join(problems))

    def build(self, params: MeshFileParams, *, eps_r: float = 1.0, options: Any = None) -> Layout:
        self.validate(params)
        conductors = [
            Conductor(
                s.name,
                self._load(s.file, s.length_unit, s.closed, s.name),
                s.potential_V,
                s.charge_C,
            )
            for s in params.conductors
        ]
        regions = [
            DielectricRegion(b.name, self._load(b.file, b.length_unit, True, b.name), b.eps_r)
            for b in params.bodies
        ]
        layout = Layout(
            tuple(conductors),
            eps_r=eps_r,
            ground_plane=params.ground_plane,
            regions=tuple(regions),
        )
        counts = estimated_panels(layout)
        files = (*params.conductors, *params.bodies)
        biggest = max(files, key=lambda s: counts[s.name])
        base = counts[biggest.name] / 4.0**ESTIMATE_LEVEL
        refuse_too_many_panels(
            self.name,
            counts,
            f"the mesh file {biggest.file} of '{biggest.name}' has {base:.6g} triangles, each "
            "refinement level multiplies them by 4; coarsen that mesh",
        )
        return layout

    def _load(self, file: str, unit: str, closed: bool, name: str):
        try:
            return load_mesh_surface(
                file,
                length_unit=unit,
                closed=closed,
                name=name,
                max_triangles=MAX_SOLVE_PANELS // 4**ESTIMATE_LEVEL,
            )
        except GeometryError as exc:
            raise ElectrodeError(f"{self.name}: {exc}") from None

    def measure(
        self,
        params: MeshFileParams,
        options: MeshFileOptions,
        solution: ChargeSolution,
        companions: Mapping[str, ChargeSolution],
    ) -> Measured:
        sol = solution
        layout = sol.layout
        c = sol.capacitance_matrix_F
        v0 = float(sol.potentials_V[0])
        first = layout.conductors[0]
        sense = float(sol.charges_C[0]) / v0 if (not first.floating and v0 != 0) else float("nan")
        peak = sol.peak_field
        nan = float("nan")
        sens = tilt = spot = nan
        plane_why = _plane_metrics_undefined(layout, first.name, v0)
        notes = {
            name: plane_why for name in (m.SENSITIVITY.name, m.TILT_SENSITIVITY.name, m.SPOT.name)
        }
        if first.floating:
            notes[m.SENSE.name] = (
                f"the first conductor '{first.name}' floats (charge_C given), so Q / V of a "
                "drive is not defined; list a driven conductor first"
            )
        elif v0 == 0:
            notes[m.SENSE.name] = (
                f"the first conductor '{first.name}' is at 0 V, so Q / V divides by zero; "
                "list a driven conductor first"
            )
        if plane_why is None:
            volts = sol.potentials_V / v0
            sens = float(sol.plane_capacitance_derivative_F_per_m()[0] @ volts) * FF_PER_UM
            tilt = float(sol.plane_tilt_derivative_F_per_rad()[0] @ volts) * FF_PER_MRAD
            xy, w = sol.plane_quadrature()
            unit = sol.plane_unit_charge_densities()
            density = unit[:, 0] * (unit @ volts) / layout.eps_F_per_m
            spot = spot_radius_m(xy, w, density, 0.9) / MM
        metrics = {
            m.SENSE.name: sense * 1e15,
            m.TOTAL.name: float(np.sum(c)) * 1e15,
            m.PEAK_X.name: peak.location_m[0] / MM,
            m.PEAK_Y.name: peak.location_m[1] / MM,
            m.PEAK_Z.name: peak.location_m[2] / MM,
            m.SENSITIVITY.name: sens,
            m.TILT_SENSITIVITY.name: tilt,
            m.SPOT.name: spot,
        }
        extra = {
            "sense_capacitance_F": sense,
            "sense_capacitance_meaning": f"Q / V of the first conductor '{first.name}' at the drive",
            "metric_notes": {k: v for k, v in notes.items() if v is not None},
        }
        return Measured(metrics, extra)


def _plane_metrics_undefined(layout: Layout, first: str, v0: float) -> str | None:
    """Why the target-plane metrics (sensitivity, tilt, spot) are undefined, or None."""
    if not layout.ground_plane:
        return "they are measured against the target plane; set ground_plane = true"
    floating = [cd.name for cd in layout.conductors if cd.floating]
    if floating:
        return f"they need every conductor driven; floating: {', '.join(floating)}"
    if layout.applied_field_V_per_m != 0:
        return "they are not defined under an applied field"
    if v0 == 0:
        return f"they are scaled by the first conductor's drive and '{first}' is at 0 V"
    return None


__all__ = ["MeshBodySpec", "MeshConductorSpec", "MeshFile", "MeshFileOptions", "MeshFileParams"]

"""The one record of a solved design: what ``solve --json``, the study file and reports share.

Everything is SI. A design travels as a :class:`DesignRecord` (plain numbers and numpy arrays,
picklable, so a worker can send it back); :func:`design_json` turns it into the strict-JSON
object documented in ``docs/design_record.md`` and :func:`design_from_json` reads it back.
Surface samples are the solvers' own :class:`~elopt.physics.solution.SurfaceSamples`
(dimension-aware: ``profile`` samples lie on the generating curve of a cross-section, (r, z)
for a body of revolution or (x, z) in 2-D, and carry an arc length; ``panels`` samples are 3-D
panel centroids (x, y, z) with no arc length; open sheets list each face apart).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np

from elopt.optimizer.record.strict_json import JsonWarnings, finite_or_none
from elopt.physics.solution import SurfaceSamples

SurfaceKind = Literal["profile", "panels"]
SURFACE_KINDS: tuple[SurfaceKind, ...] = ("profile", "panels")
POINT_DIM: dict[str, int] = {"profile": 2, "panels": 3}
"""Coordinates per sample point: (r, z) or (x, z) for profiles, (x, y, z) for panels."""


@dataclass(frozen=True)
class PeakRecord:
    """The largest surface field |sigma| / eps of the design, V/m, and where it sits.

    ``location_m`` has the coordinates of the solver's points (see :data:`POINT_DIM`);
    ``at_sharp_corner`` marks a peak on a sharp edge (mesh-dependent, no design number);
    ``rel_error_estimate`` is its change over the last refinement (NaN after one level).
    """

    conductor: str
    field_V_per_m: float
    location_m: tuple[float, ...]
    at_sharp_corner: bool
    rel_error_estimate: float


@dataclass(frozen=True)
class ConductorRecord:
    """One conductor as driven: exactly one of ``potential_V`` (driven) or ``charge_C``
    (floating) is set."""

    name: str
    potential_V: float | None
    charge_C: float | None


@dataclass(frozen=True)
class DesignRecord:
    """One solved design. ``capacitance_matrix_F`` (n, n) Maxwell matrix in conductor order;
    ``charges_C`` and ``potentials_V`` (n,) at the excitation; ``metrics`` by unit-suffixed
    name (NaN: undefined); ``surface`` one entry per conductor (may be empty when not kept).
    ``relative_error_estimate`` covers the entries (i, j) among the conductors
    ``relative_error_estimate_covers`` names (empty: every conductor, as in records written
    before it existed); ``matrix_relative_error_estimate`` is the same estimate over every
    entry (NaN: not recorded, i.e. the same as ``relative_error_estimate``). Read both through
    :attr:`estimate_covers` and :attr:`matrix_estimate`."""

    family: str
    parameters: dict[str, Any]
    parameter_units: dict[str, str]
    conductors: tuple[ConductorRecord, ...]
    ground_plane: bool
    capacitance_matrix_F: np.ndarray
    charges_C: np.ndarray
    potentials_V: np.ndarray
    sense_capacitance_F: float
    sense_capacitance_meaning: str
    peak: PeakRecord
    relative_error_estimate: float
    requested_accuracy: float
    accuracy_met: bool
    n_unknowns: int
    metrics: dict[str, float]
    metric_units: dict[str, str]
    surface: tuple[SurfaceSamples, ...] = ()
    extra: dict[str, str | int | float | bool] = field(default_factory=dict)
    relative_error_estimate_covers: tuple[str, ...] = ()
    matrix_relative_error_estimate: float = math.nan

    @property
    def conductor_names(self) -> tuple[str, ...]:
        return tuple(c.name for c in self.conductors)

    @property
    def estimate_covers(self) -> tuple[str, ...]:
        """The conductors whose entries (i, j) ``relative_error_estimate`` covers."""
        return self.relative_error_estimate_covers or self.conductor_names

    @property
    def matrix_estimate(self) -> float:
        """The error estimate over every entry of the capacitance matrix."""
        covers_all = len(self.estimate_covers) == len(self.conductors)
        if covers_all or math.isnan(self.matrix_relative_error_estimate):
            return self.relative_error_estimate
        return self.matrix_relative_error_estimate

    @property
    def surface_kind(self) -> SurfaceKind | None:
        return self.surface[0].kind if self.surface else None


# ----------------------------------------------------------------------------- JSON


def _floats(values: np.ndarray, key: str, warnings: JsonWarnings, why: str) -> Any:
    a = np.asarray(values, dtype=float)
    if a.ndim == 0:
        return finite_or_none(float(a), key, warnings, why)
    return [_floats(v, key, warnings, why) for v in a]


def surface_json(s: SurfaceSamples, warnings: JsonWarnings) -> dict[str, Any]:
    why = "the solver returned a non-finite surface value"
    key = f"surface[{s.conductor}]"
    return {
        "conductor": s.conductor,
        "kind": s.kind,
        "points_m": _floats(s.points_m, key + ".points_m", warnings, why),
        "normal": _floats(s.normal, key + ".normal", warnings, "the solver gave no normal"),
        "face": [int(v) for v in s.face],
        "arc_length_m": None
        if s.arc_length_m is None
        else _floats(s.arc_length_m, key + ".arc_length_m", warnings, why),
        "sigma_C_per_m2": _floats(s.sigma_C_per_m2, key + ".sigma_C_per_m2", warnings, why),
        "field_V_per_m": _floats(s.field_V_per_m, key + ".field_V_per_m", warnings, why),
        "area_m2": _floats(s.area_m2, key + ".area_m2", warnings, "the solver gave no area"),
    }


def design_json(d: DesignRecord, warnings: JsonWarnings) -> dict[str, Any]:
    """The record as a strict-JSON object (keys in ``docs/design_record.md``); every
    non-finite number becomes null and adds a line to ``warnings`` saying why."""
    one_level = "the solver ran a single refinement level, so there is no change to measure"
    out: dict[str, Any] = {
        "family": d.family,
        "parameters": dict(d.parameters),
        "parameter_units": dict(d.parameter_units),
        "conductors": [
            {"name": c.name, "potential_V": c.potential_V, "charge_C": c.charge_C}
            for c in d.conductors
        ],
        "ground_plane": bool(d.ground_plane),
        "capacitance_matrix_F": _floats(
            d.capacitance_matrix_F, "capacitance_matrix_F", warnings, "the solve diverged"
        ),
        "charges_C": _floats(d.charges_C, "charges_C", warnings, "the solve diverged"),
        "potentials_V": _floats(d.potentials_V, "potentials_V", warnings, "the solve diverged"),
        "sense_capacitance_F": finite_or_none(
            d.sense_capacitance_F,
            "sense_capacitance_F",
            warnings,
            f"it is undefined for this layout ({d.sense_capacitance_meaning or 'no meaning given'})",
        ),
        "sense_capacitance_meaning": d.sense_capacitance_meaning,
        "peak_surface_field_V_per_m": finite_or_none(
            d.peak.field_V_per_m, "peak_surface_field_V_per_m", warnings, "the solve diverged"
        ),
        "peak_location_m": _floats(
            np.asarray(d.peak.location_m), "peak_location_m", warnings, "the solve diverged"
        ),
        "peak_conductor": d.peak.conductor,
        "peak_at_sharp_corner": bool(d.peak.at_sharp_corner),
        "peak_rel_error_estimate": finite_or_none(
            d.peak.rel_error_estimate, "peak_rel_error_estimate", warnings, one_level
        ),
        "relative_error_estimate": finite_or_none(
            d.relative_error_estimate, "relative_error_estimate", warnings, one_level
        ),
        "relative_error_estimate_covers": list(d.estimate_covers),
        "matrix_relative_error_estimate": finite_or_none(
            d.matrix_estimate, "matrix_relative_error_estimate", warnings, one_level
        ),
        "requested_accuracy": float(d.requested_accuracy),
        "accuracy_met": bool(d.accuracy_met),
        "n_unknowns": int(d.n_unknowns),
    }
    for name, value in d.metrics.items():
        out[name] = finite_or_none(
            value, name, warnings, "the family could not define it for this design"
        )
    out["metric_units"] = dict(d.metric_units)
    out["extra"] = {
        k: finite_or_none(v, f"extra.{k}", warnings, "the family reported a non-finite value")
        if isinstance(v, float)
        else v
        for k, v in d.extra.items()
    }
    out["surface"] = [surface_json(s, warnings) for s in d.surface]
    return out


def _array(value: Any, dtype: type = float) -> np.ndarray:
    """JSON list (nulls allowed) -> array; null reads back as NaN."""
    if dtype is float:
        return np.array(_nan_for_none(value), dtype=float)
    return np.array(value, dtype=dtype)


def _nan_for_none(value: Any) -> Any:
    if isinstance(value, list):
        return [_nan_for_none(v) for v in value]
    return float("nan") if value is None else value


def design_from_json(obj: dict[str, Any]) -> DesignRecord:
    """Read back an object written by :func:`design_json` (null numbers become NaN)."""
    metric_units = dict(obj["metric_units"])
    surface = []
    for s in obj.get("surface", []):
        d = POINT_DIM[s["kind"]]
        surface.append(
            SurfaceSamples(
                conductor=s["conductor"],
                kind=s["kind"],
                points_m=_array(s["points_m"]).reshape(-1, d),
                normal=_array(s["normal"]).reshape(-1, d),
                face=_array(s["face"], np.int8),
                arc_length_m=None if s["arc_length_m"] is None else _array(s["arc_length_m"]),
                sigma_C_per_m2=_array(s["sigma_C_per_m2"]),
                field_V_per_m=_array(s["field_V_per_m"]),
                area_m2=_array(s["area_m2"]),
            )
        )
    n = len(obj["conductors"])
    return DesignRecord(
        family=obj["family"],
        parameters=dict(obj["parameters"]),
        parameter_units=dict(obj.get("parameter_units", {})),
        conductors=tuple(
            ConductorRecord(c["name"], c["potential_V"], c["charge_C"]) for c in obj["conductors"]
        ),
        ground_plane=bool(obj["ground_plane"]),
        capacitance_matrix_F=_array(obj["capacitance_matrix_F"]).reshape(n, n),
        charges_C=_array(obj["charges_C"]),
        potentials_V=_array(obj["potentials_V"]),
        sense_capacitance_F=float(_nan_for_none(obj["sense_capacitance_F"])),
        sense_capacitance_meaning=obj["sense_capacitance_meaning"],
        peak=PeakRecord(
            conductor=obj["peak_conductor"],
            field_V_per_m=float(_nan_for_none(obj["peak_surface_field_V_per_m"])),
            location_m=tuple(_array(obj["peak_location_m"]).tolist()),
            at_sharp_corner=bool(obj["peak_at_sharp_corner"]),
            rel_error_estimate=float(_nan_for_none(obj["peak_rel_error_estimate"])),
        ),
        relative_error_estimate=float(_nan_for_none(obj["relative_error_estimate"])),
        relative_error_estimate_covers=tuple(obj.get("relative_error_estimate_covers", ())),
        matrix_relative_error_estimate=float(
            _nan_for_none(obj.get("matrix_relative_error_estimate"))
        ),
        requested_accuracy=float(obj["requested_accuracy"]),
        accuracy_met=bool(obj["accuracy_met"]),
        n_unknowns=int(obj["n_unknowns"]),
        metrics={k: float(_nan_for_none(obj[k])) for k in metric_units},
        metric_units=metric_units,
        surface=tuple(surface),
        extra=dict(obj.get("extra", {})),
    )

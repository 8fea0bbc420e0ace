"""Build a :class:`DesignRecord` from a family's evaluation (the one place that does)."""

from __future__ import annotations

import dataclasses
import math
from typing import Any

import numpy as np

from elopt.optimizer.record.schema import (
    POINT_DIM,
    ConductorRecord,
    DesignRecord,
    PeakRecord,
    SurfaceRecord,
)
from elopt.physics.electrodes.base import ElectrodeFamily, Evaluation
from elopt.physics.solution import ChargeSolution

#: Extras the record carries in its own fields (the families also report them in ``extra``).
_OWN_FIELDS = (
    "sense_capacitance_F",
    "sense_capacitance_meaning",
    "peak_conductor",
    "peak_singular",
)


def design_record(
    family: ElectrodeFamily,
    params: Any,
    evaluation: Evaluation,
    *,
    family_name: str | None = None,
    metric_units: dict[str, str] | None = None,
    keep_surface: bool = True,
) -> DesignRecord:
    """The record of one evaluated design. ``params`` is the family's parameter dataclass;
    ``metric_units`` defaults to the family's declared metrics (extra metrics in
    ``evaluation.metrics`` without a unit are kept with unit '')."""
    sol = evaluation.solution
    layout = sol.layout
    peak = sol.peak_field
    units = (
        dict(metric_units) if metric_units is not None else {m.name: m.unit for m in family.metrics}
    )
    metrics = {name: float(evaluation.metrics.get(name, math.nan)) for name in units}
    extra = evaluation.extra
    return DesignRecord(
        family=family_name or family.name,
        parameters=dataclasses.asdict(params),
        conductors=tuple(
            ConductorRecord(c.name, c.potential_V, c.charge_C) for c in layout.conductors
        ),
        ground_plane=bool(layout.ground_plane),
        capacitance_matrix_F=np.asarray(sol.capacitance_matrix_F, dtype=float),
        charges_C=np.asarray(sol.charges_C, dtype=float),
        potentials_V=np.asarray(sol.potentials_V, dtype=float),
        sense_capacitance_F=float(extra.get("sense_capacitance_F", math.nan)),
        sense_capacitance_meaning=str(extra.get("sense_capacitance_meaning", "")),
        peak=PeakRecord(
            conductor=peak.conductor,
            field_V_per_m=float(peak.field_V_per_m),
            location_m=tuple(float(x) for x in peak.location_m),
            at_sharp_corner=bool(peak.singular),
            rel_error_estimate=float(peak.rel_error_estimate),
        ),
        relative_error_estimate=float(sol.rel_error_estimate),
        requested_accuracy=float(sol.requested_accuracy),
        accuracy_met=bool(sol.accuracy_met),
        n_unknowns=int(sol.n_unknowns),
        metrics=metrics,
        metric_units=units,
        surface=tuple(surface_of(sol, name) for name in layout.names) if keep_surface else (),
        extra={
            k: v
            for k, v in extra.items()
            if isinstance(v, (str, int, float, bool)) and k not in _OWN_FIELDS
        },
    )


def surface_of(sol: ChargeSolution, conductor: str) -> SurfaceRecord:
    """The surface samples of one conductor in the record's form."""
    samples = sol.surface_samples(conductor)
    if isinstance(samples, dict):
        return _from_solver_dict(sol, conductor, samples)
    return SurfaceRecord(
        conductor=samples.conductor,
        kind=samples.kind,
        points_m=np.asarray(samples.points_m, dtype=float),
        sigma_C_per_m2=np.asarray(samples.sigma_C_per_m2, dtype=float),
        field_V_per_m=np.asarray(samples.field_V_per_m, dtype=float),
        area_m2=np.asarray(samples.area_m2, dtype=float),
        face=np.asarray(samples.face, dtype=np.int8),
        normal=np.asarray(samples.normal, dtype=float),
        arc_length_m=None
        if samples.arc_length_m is None
        else np.asarray(samples.arc_length_m, dtype=float),
    )


def _from_solver_dict(
    sol: ChargeSolution, conductor: str, s: dict[str, np.ndarray]
) -> SurfaceRecord:
    """Adapter for the solvers' dict samples until ``physics.solution.SurfaceSamples`` lands
    (then this function goes): reads faces and normals the way each solver lays them out."""
    pts = np.asarray(s["points_m"], dtype=float)
    k = len(pts)
    kind = "panels" if pts.shape[1] == 3 else "profile"
    d = POINT_DIM[kind]
    shape = sol.layout.conductors[sol.layout.index(conductor)].shape
    sigma = np.asarray(s["sigma_C_per_m2"], dtype=float)
    area = np.asarray(s.get("area_m2", np.full(k, np.nan)), dtype=float)
    eps = sol.layout.eps_F_per_m
    if kind == "panels":
        normal = np.asarray(s.get("normals", np.full((k, d), np.nan)), dtype=float)
        face = np.zeros(k, dtype=np.int8)
        if not getattr(shape, "closed", True):  # the 3-D solver lists front faces, then back
            face[: k // 2], face[k // 2 :] = 1, -1
        field = np.asarray(s.get("field_V_per_m", np.abs(sigma) / eps), dtype=float)
        return SurfaceRecord(conductor, kind, pts, sigma, field, area, face, normal, None)
    arc = np.asarray(s.get("arc_length_m", np.full(k, np.nan)), dtype=float)
    normal = np.full((k, d), np.nan)  # the axisymmetric dict carries no normals
    if getattr(shape, "kind", None) == "sheet" and "sigma_back_C_per_m2" in s:
        front = np.asarray(s["sigma_front_C_per_m2"], dtype=float)
        back = np.asarray(s["sigma_back_C_per_m2"], dtype=float)
        both = np.concatenate([front, back])
        return SurfaceRecord(
            conductor,
            kind,
            np.concatenate([pts, pts]),
            both,
            np.abs(both) / eps,
            np.concatenate([area, area]),
            np.concatenate([np.ones(k, np.int8), -np.ones(k, np.int8)]),
            np.concatenate([normal, -normal]),
            np.concatenate([arc, arc]),
        )
    field = np.asarray(s.get("field_V_per_m", np.abs(sigma) / eps), dtype=float)
    return SurfaceRecord(
        conductor, kind, pts, sigma, field, area, np.zeros(k, np.int8), normal, arc
    )

"""What ``elopt solve`` found, as plain data: the JSON record and the warnings.

The record is one flat-ish dict of JSON types: the design, the solve (capacitance matrix,
peak field, error estimate) and every family metric under its unit-suffixed name. Non-finite
numbers become null. The rich report reads the same warnings, so both outputs agree.
"""

from __future__ import annotations

import dataclasses
import math
from typing import Any

from elopt.optimizer import __version__
from elopt.optimizer.config.solve_config import SolveSpec
from elopt.optimizer.report.safety import high_voltage_caution
from elopt.physics.electrodes.base import ElectrodeFamily, Evaluation

#: Above this fraction of the breakdown field the report reminds of design margins:
#: design practice caps the peak well below breakdown (REFERENCES 10, from memory).
MARGIN_FRACTION = 0.8


def _json_number(v: float) -> float | None:
    return float(v) if math.isfinite(v) else None


def _kv_per_mm(v: float) -> str:
    return f"{v / 1e6:.3g} kV/mm"


def solve_warnings(spec: SolveSpec, evaluation: Evaluation) -> list[str]:
    """Warnings about the result: field limit, sharp-corner peak, accuracy not reached."""
    sol = evaluation.solution
    peak = sol.peak_field
    out = []
    limit = spec.breakdown_field_V_per_m
    if limit is not None:
        ratio = peak.field_V_per_m / limit
        if ratio > 1.0:
            out.append(
                f"peak surface field {_kv_per_mm(peak.field_V_per_m)} exceeds the breakdown field "
                f"{_kv_per_mm(limit)} ({spec.breakdown_source}) by {100 * (ratio - 1):.0f}%: "
                "round the edges more, widen the gap or lower the drive"
            )
        elif ratio > MARGIN_FRACTION:
            out.append(
                f"peak surface field is {100 * ratio:.0f}% of the breakdown field "
                f"{_kv_per_mm(limit)}; design practice keeps a wider margin"
            )
    if peak.singular:
        out.append(
            f"the peak field sits at a sharp corner of '{peak.conductor}': it is infinite in the "
            "exact solution and the value shown depends on the mesh; give the edges a fillet"
        )
    notes = evaluation.extra.get("metric_notes", {})
    for name, value in evaluation.metrics.items():
        if not math.isfinite(value):
            why = notes.get(name, "it is not a finite number for this design")
            out.append(f"{name} is undefined (null): {why}")
    if not sol.accuracy_met:
        out.append(
            f"the solver stopped at an estimated relative error of {sol.rel_error_estimate:.2g}, "
            f"above the requested {sol.requested_accuracy:.2g}"
        )
    return out


def drive_of(spec: SolveSpec) -> float:
    """The design's drive voltage (V): the parameter ending in ``_V``, 0 if none."""
    for f in dataclasses.fields(spec.params):
        if f.name.endswith("_V"):
            return float(getattr(spec.params, f.name))
    return 0.0


def solve_record(
    spec: SolveSpec, family: ElectrodeFamily, evaluation: Evaluation
) -> dict[str, Any]:
    """The JSON object of ``elopt solve --json`` (see the module docstring)."""
    sol = evaluation.solution
    peak = sol.peak_field
    layout = sol.layout
    record: dict[str, Any] = {
        "elopt_version": __version__,
        "config": spec.path,
        "title": spec.title,
        "family": spec.family,
        "parameters": dataclasses.asdict(spec.params),
        "evaluation_options": dataclasses.asdict(spec.options) if spec.options is not None else {},
        "medium": {
            "eps_r": spec.eps_r,
            "breakdown_field_V_per_m": spec.breakdown_field_V_per_m,
            "breakdown_source": spec.breakdown_source,
        },
        "conductors": [
            {"name": c.name, "potential_V": c.potential_V, "charge_C": c.charge_C}
            for c in layout.conductors
        ],
        "ground_plane": bool(layout.ground_plane),
        "capacitance_matrix_F": [[float(x) for x in row] for row in sol.capacitance_matrix_F],
        "charges_C": [float(q) for q in sol.charges_C],
        "sense_capacitance_F": _json_number(evaluation.extra["sense_capacitance_F"]),
        "sense_capacitance_meaning": evaluation.extra.get("sense_capacitance_meaning", ""),
        "peak_surface_field_V_per_m": float(peak.field_V_per_m),
        "peak_location_m": [float(x) for x in peak.location_m],
        "peak_conductor": peak.conductor,
        "peak_at_sharp_corner": bool(peak.singular),
        "peak_rel_error_estimate": _json_number(peak.rel_error_estimate),
        "relative_error_estimate": _json_number(sol.rel_error_estimate),
        "requested_accuracy": sol.requested_accuracy,
        "accuracy_met": bool(sol.accuracy_met),
        "n_unknowns": int(sol.n_unknowns),
    }
    for m in family.metrics:
        record[m.name] = _json_number(evaluation.metrics[m.name])
    record["metric_units"] = {m.name: m.unit for m in family.metrics}
    record["warnings"] = solve_warnings(spec, evaluation)
    record["caution"] = high_voltage_caution(drive_of(spec))
    return finite_only(record)


def finite_only(value: Any) -> Any:
    """``value`` with every non-finite float (in nested dicts and lists) replaced by None, so
    that the record is strict JSON."""
    if isinstance(value, float):
        return _json_number(value)
    if isinstance(value, dict):
        return {k: finite_only(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [finite_only(v) for v in value]
    return value

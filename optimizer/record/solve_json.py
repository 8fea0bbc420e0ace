"""What ``elopt solve`` found: the warnings and the JSON object of ``solve --json``.

The JSON object is the design record (:func:`~elopt.optimizer.record.schema.design_json`,
documented in ``docs/design_record.md``) plus the solve's context: config path, title,
evaluation options, medium, warnings and the high-voltage caution. The rich report reads the
same warnings, so both outputs agree.
"""

from __future__ import annotations

import dataclasses
import math
from typing import Any

from elopt.optimizer import __version__
from elopt.optimizer.config import SolveSpec
from elopt.optimizer.record.from_solution import design_record
from elopt.optimizer.record.schema import design_json
from elopt.optimizer.record.strict_json import JsonWarnings, finite_or_none
from elopt.optimizer.report.safety import high_voltage_caution
from elopt.physics.electrodes.base import ElectrodeFamily, Evaluation
from elopt.physics.electrodes.registry import get_family

#: Above this fraction of the breakdown field the report reminds of design margins:
#: design practice caps the peak well below breakdown (REFERENCES 10, from memory).
MARGIN_FRACTION = 0.8


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
    for name, why in evaluation.extra.get("metric_notes", {}).items():
        if not math.isfinite(evaluation.metrics.get(name, 0.0)):
            out.append(f"{name} is undefined (null): {why}")
    if not sol.accuracy_met:
        out.append(
            f"the solver stopped at an estimated relative error of {sol.rel_error_estimate:.2g} "
            f"of {sol.estimate_scope}, above the requested {sol.requested_accuracy:.2g}"
        )
    return out


def drive_of(spec: SolveSpec) -> float:
    """The design's drive voltage (V), as its family declares it."""
    return get_family(spec.family).drive_V(spec.params)


def solve_record(
    spec: SolveSpec, family: ElectrodeFamily, evaluation: Evaluation
) -> dict[str, Any]:
    """The JSON object of ``elopt solve --json``: strict JSON types only (no NaN)."""
    warnings = JsonWarnings(solve_warnings(spec, evaluation))
    design = design_record(family, spec.params, evaluation, family_name=spec.family)
    record: dict[str, Any] = {
        "elopt_version": __version__,
        "config": spec.path,
        "title": spec.title,
    }
    body = design_json(design, warnings)
    record["family"] = body.pop("family")
    record["parameters"] = body.pop("parameters")
    record["parameter_units"] = body.pop("parameter_units")
    record["evaluation_options"] = (
        dataclasses.asdict(spec.options) if spec.options is not None else {}
    )
    record["medium"] = {
        "eps_r": finite_or_none(spec.eps_r, "medium.eps_r", warnings, "out of range"),
        "breakdown_field_V_per_m": spec.breakdown_field_V_per_m,
        "breakdown_source": spec.breakdown_source,
    }
    record.update(body)
    record["warnings"] = list(warnings)
    record["caution"] = high_voltage_caution(drive_of(spec))
    return record

"""Build a :class:`DesignRecord` from a family's evaluation (the one place that does)."""

from __future__ import annotations

import dataclasses
import math
from typing import Any

import numpy as np

from elopt.optimizer.record.schema import ConductorRecord, DesignRecord, PeakRecord
from elopt.physics.electrodes.base import ElectrodeFamily, Evaluation, parameter_units

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
        parameter_units=parameter_units(params),
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
        surface=tuple(sol.surface_samples(name) for name in layout.names) if keep_surface else (),
        extra={
            k: v
            for k, v in extra.items()
            if isinstance(v, (str, int, float, bool)) and k not in _OWN_FIELDS
        },
        relative_error_estimate_covers=tuple(sol.estimate_covers),
        matrix_relative_error_estimate=float(sol.matrix_rel_error_estimate),
    )

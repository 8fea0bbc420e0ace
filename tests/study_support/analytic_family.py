"""A test-only electrode family with closed-form "metrics" (a fixture for search tests).

It is NOT a physical model and never stands for the real job: it exists so that the search,
store and CLI machinery can be exercised in milliseconds and with exactly known answers.
Parameters: ``width_mm`` and ``gap_mm`` (searched), ``drive_V`` and ``delay_s`` (fixed).
Rules: ``width_mm > 0``, ``gap_mm > 0``, ``width_mm + gap_mm <= 9`` (so sampled designs can
break a rule), and designs with 4.0 < width_mm < 4.2 make the "solve" fail (SolverError).
"""

from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np

from elopt.physics.electrodes.base import ElectrodeFamily, Evaluation, MetricSpec
from elopt.physics.errors import ElectrodeError, SolverError
from elopt.physics.layout import Layout, driven
from elopt.physics.solution import ChargeSolution, PeakField, SurfaceSamples


@dataclass(frozen=True)
class AnalyticParams:
    width_mm: float
    gap_mm: float
    drive_V: float = 10.0
    delay_s: float = 0.0


class _FixtureSolution(ChargeSolution):
    def __init__(self, p: AnalyticParams) -> None:
        self.layout = Layout((driven("sensor", None, p.drive_V), driven("guard", None, p.drive_V)))
        w, g = p.width_mm, p.gap_mm
        self.capacitance_matrix_F = np.array([[w, -g], [-g, w + g]]) * 1e-12
        self.charges_C = self.capacitance_matrix_F.sum(axis=1) * p.drive_V
        self.potentials_V = np.array([p.drive_V, p.drive_V])
        self.rel_error_estimate = 1e-4
        self.requested_accuracy = 1e-3
        self.accuracy_met = True
        self.n_unknowns = 40
        self.point_dim = 2
        self._p = p

    def potential_at(self, points_m):
        raise NotImplementedError("fixture")

    def field_at(self, points_m):
        raise NotImplementedError("fixture")

    def surface_samples(self, conductor):
        s = np.linspace(0.0, self._p.width_mm * 1e-3, 20)
        k = 1.0 if conductor == "sensor" else 0.5
        sigma = k * 1e-6 / np.sqrt(1e-4 + (s - s[-1]) ** 2)
        return SurfaceSamples(
            conductor=conductor,
            kind="profile",
            points_m=np.column_stack([s, np.full_like(s, 1e-3)]),
            sigma_C_per_m2=sigma,
            field_V_per_m=sigma / 8.854e-12,
            area_m2=np.full_like(s, 1e-6),
            face=np.zeros(len(s), dtype=np.int8),
            normal=np.tile([0.0, 1.0], (len(s), 1)),
            arc_length_m=s,
        )

    def peak_fields(self):
        e = self._p.drive_V / (self._p.gap_mm * 1e-3)
        return (
            PeakField("sensor", e, (self._p.width_mm * 1e-3, 1e-3), False, 1e-3),
            PeakField("guard", 0.5 * e, (0.0, 1e-3), False, 1e-3),
        )

    def plane_capacitance_derivative_F_per_m(self):
        raise NotImplementedError("fixture")

    def plane_sensitivity_density(self, i, j, points_m):
        raise NotImplementedError("fixture")


class AnalyticFamily(ElectrodeFamily):
    name = "analytic_fixture"
    Params = AnalyticParams
    metrics = (
        MetricSpec("score_fF", "fF", "closed-form score, peaks at width 3 gap 0.5", "maximize"),
        MetricSpec("size_mm", "mm", "width + gap", "minimize"),
    )

    def validate(self, params: AnalyticParams) -> None:
        for name in ("width_mm", "gap_mm"):
            if not getattr(params, name) > 0:
                raise ElectrodeError(f"{name} must be > 0, got {getattr(params, name)}")
        if params.width_mm + params.gap_mm > 9:
            raise ElectrodeError(
                f"width_mm + gap_mm <= 9 must hold, got {params.width_mm + params.gap_mm:g}"
            )

    def build(self, params: AnalyticParams) -> Layout:
        self.validate(params)
        return _FixtureSolution(params).layout

    def evaluate(self, params: AnalyticParams, *, rel_accuracy: float = 1e-4, eps_r: float = 1.0):
        self.validate(params)
        if params.delay_s:
            time.sleep(params.delay_s)
        if 4.0 < params.width_mm < 4.2:
            raise SolverError(f"fixture solve fails for width_mm={params.width_mm:g} in (4, 4.2)")
        w, g = params.width_mm, params.gap_mm
        score = 10.0 - (w - 3.0) ** 2 - 4.0 * (np.log(g) - np.log(0.5)) ** 2
        return Evaluation(
            metrics={"score_fF": float(score), "size_mm": w + g},
            solution=_FixtureSolution(params),
            extra={"note": "fixture"},
        )


FAMILY = AnalyticFamily()

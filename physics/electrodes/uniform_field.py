"""Uniform-field electrode pair: two profiled electrodes facing each other across a gap.

The electrodes are identical and driven at +V/2 and -V/2, so the mid-plane between them is
an equipotential at 0: the problem is solved as one electrode at V/2 above the grounded
plane z = 0 of the solver, its flat face at z = G/2. Each electrode is a flat central face
of radius R_f that blends into its rim through a curvature ramp and an edge arc (see
:mod:`elopt.physics.edge_profile <elopt.physics.electrodes.edge_profile>`):

- ``gap_mm`` G: face-to-face spacing of the two electrodes;
- ``flat_radius_mm`` R_f: radius of the flat central face;
- ``blend_length_mm`` L_b: arc length of the curvature ramp (0: the edge arc meets the flat
  face directly, a flat disk with a rounded rim);
- ``edge_radius_mm`` R_e: radius of the edge arc the ramp ends in (and of the back corner);
- ``back_thickness_mm`` T: face-to-back thickness of one electrode;
- ``drive_V`` V: voltage between the two electrodes;
- ``specimen_um`` h and ``specimen_eps_r``: an optional specimen sheet between the electrodes
  (0: none), centred on the mid-plane so that the mirror pair stays exact; h = G fills the gap
  (a sheet clamped between the electrodes). It extends to infinity in r, a planar layer
  ``|z| <= h/2`` (in the solver: ``0 <= z <= h/2`` over the grounded mid-plane).

The overall radius follows: R_o = R_f + (radial reach of ramp and edge arc).
Metrics: centre field on the mid-plane, radius over which |E| on the mid-plane stays within
a tolerance of it, peak surface field with its ratio to the centre field and where it sits.
With a specimen: the eps_r the guarded-electrode effective-area formula would infer from the
computed capacitance, and its error against the specimen's eps_r (see
:func:`inferred_specimen_eps_r`).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
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
from elopt.physics.electrodes.edge_profile import RAMP_ARCS, front_rise_m, profile_curve
from elopt.physics.electrodes.rules import RuleBook
from elopt.physics.electrodes.solvers import SolvedByProfiles
from elopt.physics.layout import EPS0_F_PER_M, Layout, driven
from elopt.physics.media import PlanarLayer
from elopt.physics.solution import ChargeSolution

MM = 1e-3
UM = 1e-6
ELECTRODE = "electrode"
SPECIMEN = "specimen"


@dataclass(frozen=True)
class UniformFieldParams:
    """Uniform-field electrode pair (module docstring for the symbols)."""

    gap_mm: float = parameter("mm", "face-to-face gap G", low=0, low_open=True)
    flat_radius_mm: float = parameter("mm", "flat face radius R_f", low=0, low_open=True)
    blend_length_mm: float = parameter("mm", "curvature ramp length L_b", low=0)
    edge_radius_mm: float = parameter("mm", "edge arc radius R_e", low=0, low_open=True)
    back_thickness_mm: float = parameter("mm", "face-to-back thickness T", low=0, low_open=True)
    drive_V: float = drive_parameter("voltage between the electrodes")
    specimen_um: float = parameter(
        "um", "thickness of the specimen sheet centred in the gap (0: none)", default=0.0, low=0
    )
    specimen_eps_r: float = parameter("1", "eps_r of the specimen sheet", default=3.0, low=1)


@dataclass(frozen=True)
class UniformFieldOptions:
    """How the uniform radius is measured."""

    uniform_tolerance_pct: float = parameter(
        "%",
        "band of |E| on the mid-plane counted uniform",
        default=1.0,
        low=0,
        high=50,
        low_open=True,
        high_open=True,
    )


def overall_radius_m(p: UniformFieldParams) -> float:
    """Outer radius of one electrode (m)."""
    _, reach = front_rise_m(p.blend_length_mm * MM, p.edge_radius_mm * MM, RAMP_ARCS)
    return p.flat_radius_mm * MM + reach


def specimen_layers(p: UniformFieldParams) -> tuple[PlanarLayer, ...]:
    """The specimen sheet's upper half over the mid-plane, if any."""
    if p.specimen_um <= 0:
        return ()
    return (PlanarLayer(SPECIMEN, p.specimen_eps_r, 0.0, 0.5 * p.specimen_um * UM),)


def inferred_specimen_eps_r(c_pair_F: float, p: UniformFieldParams) -> float:
    """eps_r the guarded-electrode effective-area formula infers from the pair's capacitance.

    The formula (docs/references.md item 8) is A = pi (d1 + B g)^2 / 4, B g = g - 2 delta,
    delta = t (2/pi) ln cosh(pi g / (4 t)), for an electrode of diameter d1 on a specimen of
    thickness t over the opposite electrode. By the mirror symmetry each half of this cell is
    such an electrode (d1 = 2 R_f, the flat face) on half the specimen, t = h/2, over the
    mid-plane, with no guard: g -> inf, where ln cosh x -> x - ln 2 gives B g -> (4 ln 2 / pi) t.
    Then C_pair = eps0 eps_r A / h. The formula assumes the electrodes touch the specimen.
    """
    h = p.specimen_um * UM
    d1 = 2.0 * p.flat_radius_mm * MM
    area = 0.25 * math.pi * (d1 + 4.0 * math.log(2.0) / math.pi * 0.5 * h) ** 2
    return c_pair_F * h / (EPS0_F_PER_M * area)


def midplane_field_V_per_m(solution: ChargeSolution, r_m: np.ndarray) -> np.ndarray:
    """|E| on the mid-plane at radii (M,) -> (M,): the field there is normal to the plane.

    Bare gap: the plane's |sigma| / eps. With a specimen the field in it, at the plane.
    """
    if not solution.layout.layers:
        return np.abs(solution.plane_charge_density(r_m)) / solution.layout.eps_F_per_m
    r = np.asarray(r_m, dtype=float)
    return np.abs(solution.field_at(np.stack([r, np.zeros_like(r)], axis=1))[:, 1])


def uniform_radius_m(
    solution: ChargeSolution, r_max_m: float, tolerance: float, n: int = 241
) -> tuple[float, np.ndarray, np.ndarray]:
    """First radius where |E| leaves centre*(1 -+ tolerance) on the mid-plane (m).

    Returns (radius, radii (n,), |E| (n,)) with the coarse profile for reports; the crossing
    is refined on a 33-point grid inside the bracketing step and interpolated linearly.
    """
    r = np.linspace(0.0, r_max_m, n)
    e = midplane_field_V_per_m(solution, r)
    deviation = np.abs(e / e[0] - 1.0)
    outside = np.nonzero(deviation > tolerance)[0]
    if len(outside) == 0:
        return float(r_max_m), r, e
    k = int(outside[0])
    fine = np.linspace(r[k - 1], r[k], 33)
    dev_fine = np.abs(midplane_field_V_per_m(solution, fine) / e[0] - 1.0) - tolerance
    j = int(np.nonzero(dev_fine > 0)[0][0])
    j = max(j, 1)
    w = -dev_fine[j - 1] / (dev_fine[j] - dev_fine[j - 1]) if dev_fine[j - 1] < 0 else 0.0
    return float(fine[j - 1] + w * (fine[j] - fine[j - 1])), r, e


class UniformField(SolvedByProfiles, ElectrodeFamily):
    """Profiled uniform-field electrode pair, solved above its mirror plane."""

    name: ClassVar[str] = "uniform_field"
    Params: ClassVar[type] = UniformFieldParams
    Options: ClassVar[type] = UniformFieldOptions
    mirror_pair: ClassVar[bool] = True
    metrics: ClassVar[tuple[MetricSpec, ...]] = (
        m.CENTRE_FIELD,
        m.UNIFORM_RADIUS,
        m.UNIFORM_FRACTION,
        m.PEAK_FIELD,
        m.PEAK_TO_CENTRE,
        m.PEAK_R,
        m.PEAK_Z,
        m.OVERALL_RADIUS,
        m.PAIR_CAPACITANCE,
        m.SPECIMEN_EPS_INFERRED,
        m.SPECIMEN_EPS_ERROR,
    )

    def validate(self, params: UniformFieldParams) -> None:
        rules = RuleBook(self.name, params)
        if rules.finite():
            rules.declared()
            if not rules.broken:
                p = params
                rules.below(
                    "blend_length_mm",
                    math.pi * p.edge_radius_mm,
                    "pi * edge_radius_mm",
                    "the curvature ramp would turn past vertical",
                )
            if not rules.broken:
                rise, _ = front_rise_m(p.blend_length_mm * MM, p.edge_radius_mm * MM, RAMP_ARCS)
                need = rise / MM + p.edge_radius_mm
                rules.at_least(
                    "back_thickness_mm",
                    need,
                    f"front rise {rise / MM:.6g} + edge_radius_mm",
                    "the edge profile would not close at the back",
                )
                rules.at_most(
                    "specimen_um",
                    p.gap_mm * 1e3,
                    "gap_mm * 1000",
                    "a specimen thicker than the gap would bury the electrodes",
                )
        rules.raise_if_broken()

    def build(
        self, params: UniformFieldParams, *, eps_r: float = 1.0, options: Any = None
    ) -> Layout:
        self.validate(params)
        curve = profile_curve(
            params.flat_radius_mm * MM,
            0.5 * params.gap_mm * MM,
            params.blend_length_mm * MM,
            params.edge_radius_mm * MM,
            params.back_thickness_mm * MM,
        )
        return Layout(
            conductors=(driven(ELECTRODE, curve, 0.5 * params.drive_V),),
            eps_r=eps_r,
            ground_plane=True,
            layers=specimen_layers(params),
        )

    def measure(
        self,
        params: UniformFieldParams,
        options: UniformFieldOptions,
        solution: ChargeSolution,
        companions: Mapping[str, ChargeSolution],
    ) -> Measured:
        sol = solution
        r_out = overall_radius_m(params)
        radius, r_profile, e_profile = uniform_radius_m(
            sol, 1.5 * r_out, options.uniform_tolerance_pct / 100.0
        )
        centre = float(e_profile[0])
        peak = sol.peak_field
        # Each electrode holds Q = C_half V/2 against the mid-plane; Q/V is the pair's C.
        c_pair = 0.5 * float(sol.capacitance_matrix_F[0, 0])
        metrics = {
            m.CENTRE_FIELD.name: centre,
            m.UNIFORM_RADIUS.name: radius / MM,
            m.UNIFORM_FRACTION.name: radius / r_out,
            m.PEAK_TO_CENTRE.name: float(peak.field_V_per_m) / centre,
            m.PEAK_R.name: float(peak.location_m[0]) / MM,
            m.PEAK_Z.name: float(peak.location_m[1]) / MM,
            m.OVERALL_RADIUS.name: r_out / MM,
            m.PAIR_CAPACITANCE.name: c_pair * 1e12,
            m.SPECIMEN_EPS_INFERRED.name: float("nan"),
            m.SPECIMEN_EPS_ERROR.name: float("nan"),
        }
        if params.specimen_um > 0:
            inferred = inferred_specimen_eps_r(c_pair, params)
            metrics[m.SPECIMEN_EPS_INFERRED.name] = inferred
            metrics[m.SPECIMEN_EPS_ERROR.name] = 100.0 * (inferred / params.specimen_eps_r - 1)
        extra: dict[str, Any] = {
            "sense_capacitance_F": c_pair,
            "sense_capacitance_meaning": "capacitance between the two electrodes (Q / V)",
            "midplane_r_m": r_profile,
            "midplane_field_V_per_m": e_profile,
        }
        if params.specimen_um <= 0:
            why = "the cell holds no specimen (specimen_um = 0)"
            extra["metric_notes"] = {
                m.SPECIMEN_EPS_INFERRED.name: why,
                m.SPECIMEN_EPS_ERROR.name: why,
            }
        return Measured(metrics, extra)

"""Uniform-field electrode pair: profile geometry, parameter rules, symmetry and limits."""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest

from elopt.physics.bem_axi.solve import solve_axisymmetric
from elopt.physics.electrodes.edge_profile import RAMP_ARCS, front_rise_m
from elopt.physics.electrodes.uniform_field import (
    UniformField,
    UniformFieldOptions,
    UniformFieldParams,
    overall_radius_m,
)
from elopt.physics.errors import ElectrodeError
from elopt.physics.geometry import Arc, Curve, Segment, rounded_polyline
from elopt.physics.layout import Layout, driven

FAMILY = UniformField()
BASE = UniformFieldParams(
    gap_mm=10.0,
    flat_radius_mm=15.0,
    blend_length_mm=6.0,
    edge_radius_mm=4.0,
    back_thickness_mm=12.0,
    drive_V=1000.0,
)
MM = 1e-3


def _curvature(piece) -> float:
    return 0.0 if isinstance(piece, Segment) else 1.0 / piece.radius


def _mirrored(curve: Curve) -> Curve:
    """The curve reflected in z = 0 (segments and arcs)."""
    out = []
    for pc in curve.pieces:
        if isinstance(pc, Segment):
            out.append(Segment((pc.start[0], -pc.start[1]), (pc.end[0], -pc.end[1])))
        else:
            out.append(
                Arc((pc.center[0], -pc.center[1]), pc.radius, -pc.start_angle, -pc.end_angle)
            )
    return Curve(tuple(out))


# -- geometry -------------------------------------------------------------------------------


def test_profile_is_a_closed_convex_body_with_no_tangent_break():
    layout = FAMILY.build(BASE)
    curve = layout.conductors[0].shape
    assert curve.kind == "body"
    assert curve.corners() == ()  # tangent-continuous at every joint
    pts = curve.sample(200)
    assert pts[:, 1].min() == pytest.approx(0.5 * BASE.gap_mm * MM, rel=1e-12)
    assert pts[:, 1].max() == pytest.approx(
        (0.5 * BASE.gap_mm + BASE.back_thickness_mm) * MM, rel=1e-12
    )
    assert pts[:, 0].max() == pytest.approx(overall_radius_m(BASE), rel=1e-9)
    # Convex, turning one way: the tangent angle never decreases along the curve.
    turn = [p.end_angle - p.start_angle for p in curve.pieces if isinstance(p, Arc)]
    assert all(t > 0 for t in turn)
    assert sum(turn) == pytest.approx(math.pi)
    assert layout.conductors[0].potential_V == 0.5 * BASE.drive_V


def test_curvature_ramp_rises_in_small_steps_to_the_edge_radius():
    curve = FAMILY.build(BASE).conductors[0].shape
    kappa = [_curvature(p) for p in curve.pieces]
    ramp = kappa[1 : RAMP_ARCS + 2]  # the ramp's arcs, then the edge arc
    edge = 1.0 / (BASE.edge_radius_mm * MM)
    assert ramp[-1] == pytest.approx(edge)
    steps = np.diff([0.0, *ramp])
    assert np.all(steps > 0)
    # Steps of 1/(N R_e) between ramp arcs, half that at both ends of the ramp.
    assert steps[1:-1] == pytest.approx(edge / RAMP_ARCS)
    assert steps[0] == pytest.approx(0.5 * edge / RAMP_ARCS)
    assert steps[-1] == pytest.approx(0.5 * edge / RAMP_ARCS)
    # The ramp turns by L_b / (2 R_e), as a clothoid of that length does.
    ramp_turn = sum(p.end_angle - p.start_angle for p in curve.pieces[1 : RAMP_ARCS + 1])
    assert ramp_turn == pytest.approx(BASE.blend_length_mm / (2 * BASE.edge_radius_mm))
    ramp_len = sum(p.length for p in curve.pieces[1 : RAMP_ARCS + 1])
    assert ramp_len == pytest.approx(BASE.blend_length_mm * MM)


def test_no_blend_is_a_flat_disk_with_a_rounded_rim():
    p = dataclasses.replace(BASE, blend_length_mm=0.0)
    ours = FAMILY.build(p).conductors[0].shape
    h, r_o, t, r_e = (
        0.5 * p.gap_mm * MM,
        (p.flat_radius_mm + p.edge_radius_mm) * MM,
        p.back_thickness_mm * MM,
        p.edge_radius_mm * MM,
    )
    disk = rounded_polyline([(0, h), (r_o, h), (r_o, h + t), (0, h + t)], r_e)
    assert np.allclose(ours.sample(64), disk.sample(64), atol=1e-15, rtol=0)


def test_back_can_close_exactly_without_a_rim():
    rise, _ = front_rise_m(BASE.blend_length_mm * MM, BASE.edge_radius_mm * MM)
    p = dataclasses.replace(BASE, back_thickness_mm=rise / MM + BASE.edge_radius_mm)
    curve = FAMILY.build(p).conductors[0].shape
    assert not any(isinstance(pc, Segment) and pc.start[0] == pc.end[0] for pc in curve.pieces)
    assert curve.corners() == ()


# -- parameter rules ------------------------------------------------------------------------


@pytest.mark.parametrize(
    "change, words",
    [
        ({"gap_mm": 0.0}, ["gap_mm = 0", "> 0"]),
        ({"flat_radius_mm": -1.0}, ["flat_radius_mm = -1", "> 0"]),
        ({"edge_radius_mm": 0.0}, ["edge_radius_mm = 0", "> 0"]),
        ({"blend_length_mm": -1.0}, ["blend_length_mm = -1", ">= 0"]),
        ({"back_thickness_mm": 0.0}, ["back_thickness_mm = 0", "> 0"]),
        ({"drive_V": 0.0}, ["drive_V = 0", "nonzero"]),
        (
            {"blend_length_mm": 13.0},
            ["blend_length_mm = 13", "pi * edge_radius_mm = 12.566", "vertical"],
        ),
        (
            {"back_thickness_mm": 5.0},
            ["back_thickness_mm = 5", "front rise", "edge_radius_mm", "close"],
        ),
        ({"gap_mm": float("inf")}, ["gap_mm", "finite"]),
    ],
)
def test_bad_parameters_are_refused_with_name_value_and_rule(change, words):
    msg = str(
        pytest.raises(ElectrodeError, FAMILY.validate, dataclasses.replace(BASE, **change)).value
    )
    assert msg.startswith("uniform_field: ")
    for w in words:
        assert w in msg


def test_bad_tolerance_is_refused():
    with pytest.raises(ElectrodeError, match=r"uniform_tolerance_pct = 0 must lie in \(0, 50\)"):
        FAMILY.validate_options(UniformFieldOptions(uniform_tolerance_pct=0.0))


# -- physics ---------------------------------------------------------------------------------


def test_mirror_solve_equals_the_explicit_pair():
    # The pair at +-V/2 solved as two conductors (no mirror plane) must reproduce the
    # mirror-plane solve: equal and opposite charges, the same peak field, a mid-plane at 0 V
    # with a purely normal field (symmetry, common practice, no source).
    half = FAMILY.build(BASE)
    curve = half.conductors[0].shape
    v = 0.5 * BASE.drive_V
    pair = Layout((driven("upper", curve, v), driven("lower", _mirrored(curve), -v)))
    s_half = solve_axisymmetric(half, rel_accuracy=1e-6)
    s_pair = solve_axisymmetric(pair, rel_accuracy=1e-6)
    q_up, q_low = s_pair.charges_C
    assert q_low == pytest.approx(-q_up, rel=1e-9)
    assert q_up == pytest.approx(s_half.charges_C[0], rel=1e-7)
    peaks = s_pair.peak_fields()
    assert peaks[0].field_V_per_m == pytest.approx(s_half.peak_field.field_V_per_m, rel=1e-6)
    assert peaks[1].field_V_per_m == pytest.approx(peaks[0].field_V_per_m, rel=1e-9)
    r = np.linspace(0.0, 1.3 * overall_radius_m(BASE), 9)
    mid = np.stack([r, np.zeros_like(r)], axis=1)
    e = s_pair.field_at(mid)
    assert np.max(np.abs(e[:, 0])) < 1e-8 * np.max(np.abs(e[:, 1]))
    assert np.max(np.abs(s_pair.potential_at(mid))) < 1e-8 * v
    assert e[:, 1] == pytest.approx(s_half.field_at(mid)[:, 1], rel=1e-6)
    # Points mirrored in the mid-plane: E_z equal, E_r opposite.
    above = np.stack([r, np.full_like(r, 2e-3)], axis=1)
    e_up, e_dn = s_pair.field_at(above), s_pair.field_at(above * [1.0, -1.0])
    scale = np.max(np.abs(e_up))
    assert np.allclose(e_up[:, 1], e_dn[:, 1], atol=1e-9 * scale)
    assert np.allclose(e_up[:, 0], -e_dn[:, 0], atol=1e-9 * scale)


def test_centre_field_of_wide_electrodes_is_drive_over_gap():
    # Far inside a wide parallel-plate pair the field is V / G (common practice, no source).
    ev = FAMILY.evaluate(BASE, rel_accuracy=1e-5)
    assert ev.metrics["centre_field_V_per_m"] == pytest.approx(
        BASE.drive_V / (BASE.gap_mm * MM), rel=1e-4
    )
    # The field_at evaluation just above the mid-plane agrees with the plane's charge density.
    e = ev.solution.field_at(np.array([[0.0, 1e-6]]))[0]
    assert abs(e[1]) == pytest.approx(ev.metrics["centre_field_V_per_m"], rel=1e-6)


def test_uniform_radius_sits_where_the_field_leaves_the_band():
    for tol_pct in (0.5, 1.0, 2.0):
        ev = FAMILY.evaluate(BASE, rel_accuracy=1e-5, options=UniformFieldOptions(tol_pct))
        m = ev.metrics
        r_u = m["uniform_field_radius_mm"] * MM
        e = np.abs(ev.solution.plane_charge_density(np.array([r_u, 0.95 * r_u])))
        e = e / ev.solution.layout.eps_F_per_m / m["centre_field_V_per_m"]
        assert abs(e[0] - 1) == pytest.approx(tol_pct / 100, abs=2e-5)
        assert abs(e[1] - 1) < tol_pct / 100
    radii = [
        FAMILY.evaluate(BASE, rel_accuracy=1e-4, options=UniformFieldOptions(t)).metrics[
            "uniform_field_radius_mm"
        ]
        for t in (0.5, 1.0, 2.0)
    ]
    assert radii[0] < radii[1] < radii[2]


def test_peak_to_centre_ratio_tends_to_the_flat_disk_pair_as_the_blend_vanishes():
    # The sharpest member of the family (no curvature ramp) is a flat disk with a rim rounded
    # at R_e; shortening the ramp must take the ratio there smoothly.
    p0 = dataclasses.replace(BASE, blend_length_mm=0.0)
    h, r_o = 0.5 * p0.gap_mm * MM, (p0.flat_radius_mm + p0.edge_radius_mm) * MM
    t, r_e = p0.back_thickness_mm * MM, p0.edge_radius_mm * MM
    disk = rounded_polyline([(0, h), (r_o, h), (r_o, h + t), (0, h + t)], r_e)
    sol = solve_axisymmetric(
        Layout((driven("disk", disk, 0.5 * p0.drive_V),), ground_plane=True), rel_accuracy=1e-6
    )
    centre = abs(sol.plane_charge_density(np.array([0.0]))[0]) / sol.layout.eps_F_per_m
    disk_ratio = sol.peak_field.field_V_per_m / centre
    assert disk_ratio > 1.2  # a rounded rim still enhances the field
    gaps = []
    for blend in (3.2, 0.8, 0.2):
        ev = FAMILY.evaluate(dataclasses.replace(BASE, blend_length_mm=blend), rel_accuracy=1e-6)
        gaps.append(disk_ratio - ev.metrics["peak_to_centre_field_ratio"])
    assert gaps[0] > gaps[1] > gaps[2] > 0  # a longer ramp lowers the rim field
    assert gaps[2] < 1e-3


def test_pair_capacitance_and_medium():
    opts = UniformFieldOptions()
    air = FAMILY.evaluate(BASE, rel_accuracy=1e-5, options=opts)
    oil = FAMILY.evaluate(BASE, rel_accuracy=1e-5, eps_r=2.2, options=opts)
    c_half = air.solution.capacitance_matrix_F[0, 0]
    assert air.metrics["pair_capacitance_pF"] == pytest.approx(0.5e12 * c_half)
    # More than the plates' eps pi R_f^2 / G alone: the ramp and rim add fringing.
    flat = 8.8541878128e-12 * math.pi * (BASE.flat_radius_mm * MM) ** 2 / (BASE.gap_mm * MM)
    assert air.metrics["pair_capacitance_pF"] > 1e12 * flat
    assert oil.metrics["pair_capacitance_pF"] == pytest.approx(
        2.2 * air.metrics["pair_capacitance_pF"], rel=1e-9
    )
    assert oil.metrics["centre_field_V_per_m"] == pytest.approx(
        air.metrics["centre_field_V_per_m"], rel=1e-9
    )
    m = air.metrics
    assert m["peak_to_centre_field_ratio"] == pytest.approx(
        m["peak_surface_field_V_per_m"] / m["centre_field_V_per_m"]
    )
    assert m["uniform_radius_fraction"] == pytest.approx(
        m["uniform_field_radius_mm"] / m["overall_radius_mm"]
    )
    assert list(m) == [s.name for s in FAMILY.metrics]

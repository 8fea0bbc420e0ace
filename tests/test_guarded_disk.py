"""Guarded disk probe: geometry, parameter rules, and its physics against outside references."""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest

from elopt.physics.bem_axi.solve import solve_axisymmetric
from elopt.physics.electrodes.guarded_disk import (
    GuardedDisk,
    GuardedDiskOptions,
    GuardedDiskParams,
    guard_curve,
    sense_capacitance_F,
    sensitivity_density_F_per_m3,
    sensitivity_F_per_m,
    sensor_curve,
    target_grid,
)
from elopt.physics.electrodes.linearity import linearity_error_pct_fs, standoff_range
from elopt.physics.electrodes.target_spot import cumulative_on_plane, spot_radius
from elopt.physics.errors import ElectrodeError
from elopt.physics.layout import EPS0_F_PER_M, Layout, driven
from elopt.physics.validation import case_guarded_electrode, love_disk_pair_capacitance

FAMILY = GuardedDisk()
BASE = GuardedDiskParams(
    sensor_radius_mm=2.0,
    guard_gap_mm=0.3,
    guard_width_mm=1.5,
    thickness_mm=1.0,
    fillet_mm=0.1,
    standoff_mm=0.5,
    drive_V=10.0,
    recess_mm=0.05,
)


def _polygon_area(pts: np.ndarray) -> float:
    x, y = pts[:, 0], pts[:, 1]
    return 0.5 * abs(float(np.sum(x * np.roll(y, -1) - np.roll(x, -1) * y)))


def _solve(p: GuardedDiskParams, accuracy: float = 1e-6):
    return solve_axisymmetric(FAMILY.build(p), rel_accuracy=accuracy)


# -- geometry -------------------------------------------------------------------------------


def test_cross_sections_have_the_stated_extent_and_area():
    p = BASE
    s = sensor_curve(p).sample(400)
    g = guard_curve(p).sample(400)
    mm = 1e-3
    assert s[:, 0].min() == pytest.approx(0.0, abs=1e-15)
    assert s[:, 0].max() == pytest.approx(p.sensor_radius_mm * mm, rel=1e-12)
    assert s[:, 1].min() == pytest.approx((p.standoff_mm + p.recess_mm) * mm, rel=1e-12)
    assert s[:, 1].max() == pytest.approx(
        (p.standoff_mm + p.recess_mm + p.thickness_mm) * mm, rel=1e-12
    )
    r_in = (p.sensor_radius_mm + p.guard_gap_mm) * mm
    assert g[:, 0].min() == pytest.approx(r_in, rel=1e-12)
    assert g[:, 0].max() == pytest.approx(r_in + p.guard_width_mm * mm, rel=1e-12)
    assert g[:, 1].min() == pytest.approx(p.standoff_mm * mm, rel=1e-12)
    assert g[:, 1].max() == pytest.approx((p.standoff_mm + p.thickness_mm) * mm, rel=1e-12)
    # A fillet of radius rho cuts (1 - pi/4) rho^2 off each right-angle corner (plane
    # geometry): two corners on the sensor's half-section, four on the guard's.
    rho, t = p.fillet_mm * mm, p.thickness_mm * mm
    cut = (1 - math.pi / 4) * rho**2
    sensor_area = _polygon_area(np.concatenate([s, s[:1]]))
    assert sensor_area == pytest.approx(p.sensor_radius_mm * mm * t - 2 * cut, rel=1e-4)
    assert _polygon_area(g) == pytest.approx(p.guard_width_mm * mm * t - 4 * cut, rel=1e-4)


def test_kinds_and_corners():
    assert sensor_curve(BASE).kind == "body"
    assert guard_curve(BASE).kind == "ring"
    # Rounded: no tangent breaks anywhere.
    assert sensor_curve(BASE).corners() == ()
    assert guard_curve(BASE).corners() == ()
    sharp = dataclasses.replace(BASE, fillet_mm=0.0)
    angles = [c.angle for c in sensor_curve(sharp).corners()] + [
        c.angle for c in guard_curve(sharp).corners()
    ]
    assert len(angles) == 6 and np.allclose(angles, math.pi / 2)


def test_layout_drives_sensor_and_guard_together_over_a_grounded_plane():
    layout = FAMILY.build(BASE, eps_r=2.5)
    assert layout.names == ("sensor", "guard")
    assert layout.ground_plane
    assert [c.potential_V for c in layout.conductors] == [10.0, 10.0]
    assert layout.eps_r == 2.5


def test_largest_fillets_allowed_build():
    p = dataclasses.replace(BASE, thickness_mm=0.4, guard_width_mm=0.4, fillet_mm=0.2)
    FAMILY.build(p)  # fillets meet mid-edge: still a valid curve


# -- parameter rules ------------------------------------------------------------------------


@pytest.mark.parametrize(
    "change, words",
    [
        ({"sensor_radius_mm": 0.0}, ["sensor_radius_mm = 0", "> 0"]),
        ({"guard_gap_mm": -0.1}, ["guard_gap_mm = -0.1", "> 0"]),
        ({"guard_width_mm": 0.0}, ["guard_width_mm = 0", "> 0"]),
        ({"standoff_mm": 0.0}, ["standoff_mm = 0", "> 0"]),
        ({"thickness_mm": -1.0}, ["thickness_mm = -1", "> 0"]),
        ({"fillet_mm": -0.01}, ["fillet_mm = -0.01", ">= 0"]),
        ({"recess_mm": -0.2}, ["recess_mm = -0.2", ">= 0"]),
        ({"drive_V": 0.0}, ["drive_V = 0", "nonzero"]),
        ({"fillet_mm": 0.6}, ["fillet_mm = 0.6", "thickness_mm / 2 = 0.5"]),
        (
            {"fillet_mm": 0.4, "guard_width_mm": 0.6},
            ["fillet_mm = 0.4", "guard_width_mm / 2 = 0.3"],
        ),
        (
            {"fillet_mm": 0.3, "sensor_radius_mm": 0.2, "thickness_mm": 2.0, "guard_width_mm": 2.0},
            ["fillet_mm = 0.3", "sensor_radius_mm = 0.2"],
        ),
        ({"recess_mm": 1.5}, ["recess_mm = 1.5", "thickness_mm = 1"]),
        ({"standoff_mm": float("nan")}, ["standoff_mm", "finite"]),
    ],
)
def test_bad_parameters_are_refused_with_name_value_and_rule(change, words):
    p = dataclasses.replace(BASE, **change)
    with pytest.raises(ElectrodeError) as info:
        FAMILY.validate(p)
    msg = str(info.value)
    assert msg.startswith("guarded_disk: ")
    assert "\n" not in msg
    for w in words:
        assert w in msg


def test_every_broken_rule_is_reported_at_once():
    p = dataclasses.replace(BASE, guard_gap_mm=0.0, drive_V=0.0, fillet_mm=0.9)
    msg = str(pytest.raises(ElectrodeError, FAMILY.validate, p).value)
    assert "guard_gap_mm" in msg and "drive_V" in msg and "fillet_mm = 0.9" in msg


@pytest.mark.parametrize(
    "options, words",
    [
        (
            GuardedDiskOptions(linearity_range_fraction=1.0),
            ["linearity_range_fraction = 1", "(0, 1)"],
        ),
        (GuardedDiskOptions(linearity_points=2), ["linearity_points = 2", "[3, 25]"]),
    ],
)
def test_bad_options_are_refused(options, words):
    msg = str(pytest.raises(ElectrodeError, FAMILY.validate_options, options).value)
    for w in words:
        assert w in msg


# -- linearity and spot helpers (pure maths) ---------------------------------------------------


def test_linearity_of_an_exact_line_is_zero_and_of_a_parabola_is_known():
    d = standoff_range(1e-3, 0.5, 3)
    assert np.allclose(d, [0.5e-3, 1e-3, 1.5e-3])
    assert linearity_error_pct_fs(d, 1.0 / (2.0 * d + 1.0)) == pytest.approx(0.0, abs=1e-9)
    # 1/C = x + k x^2 at x = -h, 0, h: the least-squares line leaves residuals
    # k h^2 (1/3, -2/3, 1/3), so the error is (2/3) k h^2 over the span 2 h.
    k, h = 0.3, 0.5
    x = np.array([-h, 0.0, h])
    expected = 100 * (2 / 3) * k * h**2 / (2 * h)
    assert linearity_error_pct_fs(x + 2.0, 1.0 / (x + k * x**2 + 5.0)) == pytest.approx(expected)


def test_spot_radius_of_a_uniform_disk_density():
    # Uniform density on r < R: 90 % of it lies inside sqrt(0.9) R.
    r = np.linspace(0, 2.0, 20001)
    density = (r <= 1.0).astype(float)
    assert spot_radius(r, density, 0.9) == pytest.approx(math.sqrt(0.9), rel=1e-3)


# -- physics ---------------------------------------------------------------------------------


def test_standards_effective_area_for_thin_electrodes_and_a_wide_guard():
    # Amey & Hamburger, Proc. ASTM 49, 1079 (1949), as used by ASTM D150/D257 (formula from
    # memory, docs/references.md item 8); case and tolerance explained in elopt.physics.validation.
    (row,) = case_guarded_electrode()
    assert row.passed, row


def test_parallel_plate_limit_and_the_fringing_of_a_right_angle_edge():
    # As d -> 0, C_sense -> eps pi a^2 / d. What is left, the fringing F = (C - C_pp) /
    # (eps 2 pi a), grows like (2/pi) ln(1/d): between the sensor's side wall (at V) and the
    # target (at 0), which meet at a right angle as seen from r >> d, the potential is that of
    # a wedge, V theta / (pi/2), so the wall carries eps V 2 / (pi r) per unit area (potential
    # between two conducting half-planes at angle beta: V theta / beta; Jackson, Classical
    # Electrodynamics 3rd ed., sec. 2.11, from memory). Each halving of d then adds
    # (2/pi) ln 2 to F. Sharp edges, a gap and thickness much wider than d.
    a_mm = 2.0
    standoffs = [0.05, 0.025, 0.0125]
    excess, fringe = [], []
    for d in standoffs:
        p = GuardedDiskParams(a_mm, 0.2, 1.0, 0.5, 0.0, d, 1.0)
        c = sense_capacitance_F(_solve(p, 1e-5))
        c_pp = EPS0_F_PER_M * math.pi * (a_mm * 1e-3) ** 2 / (d * 1e-3)
        excess.append(c / c_pp - 1)
        fringe.append((c - c_pp) / (EPS0_F_PER_M * 2 * math.pi * a_mm * 1e-3))
    assert excess[0] > excess[1] > excess[2] > 0
    assert excess[2] < 0.03
    steps = np.diff(fringe)
    wedge = (2 / math.pi) * math.log(2)
    miss = np.abs(steps / wedge - 1)
    # Corrections of order d/g fade as d halves: the miss must shrink and end within 2 %.
    assert miss[1] < 0.5 * miss[0]
    assert miss[1] < 0.02


def test_far_guard_leaves_the_sensor_alone():
    # With the guard far away the sense capacitance is that of the sensor by itself; the
    # guard's share falls off as the gap grows.
    t = 0.01
    alone = Layout(
        (
            driven(
                "sensor", sensor_curve(GuardedDiskParams(1.0, 1.0, 1.0, t, t / 2, 0.5, 1.0)), 1.0
            ),
        ),
        ground_plane=True,
    )
    c_alone = float(solve_axisymmetric(alone, rel_accuracy=1e-6).capacitance_matrix_F[0, 0])
    gaps = [4.0, 8.0, 16.0, 32.0]
    shortfall = []
    for g in gaps:
        p = GuardedDiskParams(1.0, g, 1.0, t, t / 2, 0.5, 1.0)
        shortfall.append(1 - sense_capacitance_F(_solve(p)) / c_alone)
    assert all(s > 0 for s in shortfall)  # a guard at V takes field lines from the sensor
    assert all(b < 0.4 * a for a, b in zip(shortfall, shortfall[1:], strict=False))
    assert shortfall[-1] < 2e-3


def test_thin_sensor_alone_tends_to_love_disk():
    # A disk of radius a at V at height d above a grounded plane carries the charge of one
    # disk of a pair at +-V/2 spaced 2d: C = 2 C_pair(2d/a), C_pair from Love's equation
    # (Love 1949; docs/references.md item 7). Our sensor is a body of thickness t with rounded
    # rim: the difference must shrink as t -> 0.
    a, d = 1.0, 0.5
    love = 2 * love_disk_pair_capacitance(2 * d / a) * EPS0_F_PER_M * a * 1e-3
    misses = []
    for t in (0.01, 0.005):
        p = GuardedDiskParams(a, 1.0, 1.0, t, t / 2, d, 1.0)
        layout = Layout((driven("sensor", sensor_curve(p), 1.0),), ground_plane=True)
        c = float(solve_axisymmetric(layout, rel_accuracy=1e-6).capacitance_matrix_F[0, 0])
        misses.append(c / love - 1)
    assert 0 < misses[1] < misses[0] < 0.02
    assert misses[1] / misses[0] < 0.7


def test_shape_derivative_sensitivity_matches_central_differences():
    # dC/dd from the Hadamard shape derivative of the target vs central differences of two
    # solves; the difference quotient errs by O(h^2), so Richardson's combination of h and
    # h/2 must agree closely.
    p = BASE
    sens = sensitivity_F_per_m(_solve(p, 1e-6))

    def fd(h_mm: float) -> float:
        up = sense_capacitance_F(_solve(dataclasses.replace(p, standoff_mm=p.standoff_mm + h_mm)))
        dn = sense_capacitance_F(_solve(dataclasses.replace(p, standoff_mm=p.standoff_mm - h_mm)))
        return -(up - dn) / (2 * h_mm * 1e-3)

    coarse, fine = fd(0.01), fd(0.005)
    assert abs(fine / sens - 1) < 3e-4
    assert abs(fine / sens - 1) < 0.5 * abs(coarse / sens - 1)  # converging like h^2
    assert (4 * fine - coarse) / 3 == pytest.approx(sens, rel=2e-5)


def test_sensitivity_density_integrates_to_the_sensitivity():
    sol = _solve(BASE)
    r = target_grid(BASE)
    density = sensitivity_density_F_per_m3(sol, r)
    assert np.all(density > 0)  # both plane densities are negative: their product is not
    total = cumulative_on_plane(r, density)[-1]
    assert total == pytest.approx(sensitivity_F_per_m(sol), rel=1e-5)


def test_evaluate_reports_every_metric_consistently():
    ev = FAMILY.evaluate(BASE, rel_accuracy=1e-4)
    names = [m.name for m in FAMILY.metrics]
    assert list(ev.metrics) == names
    assert all(np.isfinite(v) for v in ev.metrics.values())
    sol = ev.solution
    c = sol.capacitance_matrix_F
    assert ev.metrics["sense_capacitance_fF"] == pytest.approx(1e15 * (c[0, 0] + c[0, 1]))
    assert ev.metrics["total_capacitance_fF"] == pytest.approx(1e15 * c.sum())
    assert ev.metrics["sensor_guard_coupling_fF"] == pytest.approx(-1e15 * c[0, 1])
    # Driven guard: the sensor's charge at V is C_sense V.
    assert sol.charges_C[0] == pytest.approx(BASE.drive_V * (c[0, 0] + c[0, 1]), rel=1e-12)
    r_eff = ev.metrics["effective_radius_mm"] * 1e-3
    c_pp = EPS0_F_PER_M * math.pi * r_eff**2 / (BASE.standoff_mm * 1e-3)
    assert c_pp == pytest.approx(ev.extra["sense_capacitance_F"], rel=1e-12)
    assert ev.metrics["outer_radius_mm"] == pytest.approx(3.8)
    # The spot holds 90 % of the density and sits inside the guard's outer radius here.
    r = ev.extra["target_r_m"]
    cum = cumulative_on_plane(r, ev.extra["sensitivity_density_F_per_m3"])
    inside = np.interp(ev.metrics["spot_radius_90_mm"] * 1e-3, r, cum) / cum[-1]
    assert inside == pytest.approx(0.9, abs=2e-3)
    # The middle standoff of the sweep is the nominal solve itself.
    d, c_curve = ev.extra["linearity_standoff_m"], ev.extra["linearity_sense_capacitance_F"]
    assert len(d) == 5 and d[2] == pytest.approx(BASE.standoff_mm * 1e-3)
    assert c_curve[2] == ev.extra["sense_capacitance_F"]
    assert np.all(np.diff(c_curve) < 0)  # farther target, smaller capacitance
    peak = sol.peak_field
    assert ev.metrics["peak_surface_field_V_per_m"] == peak.field_V_per_m
    assert ev.extra["peak_conductor"] in ("sensor", "guard")


def test_skipping_linearity_costs_no_extra_solve():
    ev = FAMILY.evaluate(BASE, rel_accuracy=1e-3, options=GuardedDiskOptions(linearity_points=0))
    assert math.isnan(ev.metrics["linearity_error_pct_fs"])
    assert len(ev.extra["linearity_standoff_m"]) == 0


def test_medium_scales_capacitance_not_the_field_at_fixed_drive():
    # Homogeneous medium: every capacitance scales with eps_r, the field at fixed potentials
    # does not (common practice, no source).
    opts = GuardedDiskOptions(linearity_points=0)
    air = FAMILY.evaluate(BASE, rel_accuracy=1e-4, options=opts)
    oil = FAMILY.evaluate(BASE, rel_accuracy=1e-4, eps_r=2.2, options=opts)
    assert oil.metrics["sense_capacitance_fF"] == pytest.approx(
        2.2 * air.metrics["sense_capacitance_fF"], rel=1e-9
    )
    assert oil.metrics["peak_surface_field_V_per_m"] == pytest.approx(
        air.metrics["peak_surface_field_V_per_m"], rel=1e-9
    )
    assert oil.metrics["effective_radius_mm"] == pytest.approx(
        air.metrics["effective_radius_mm"], rel=1e-9
    )

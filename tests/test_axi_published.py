"""Axisymmetric solver against published closed forms and series (docs/references.md).

Reference formulas come from tests/reference_values.py.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from reference_values import (
    disk_capacitance_F,
    ellipsoid_capacitance_F,
    kirchhoff_disk_pair_capacitance,
    love_disk_pair_capacitance,
    sphere_above_plane_capacitance_F,
    sphere_capacitance_F,
)

from elopt.physics import geometry as geo
from elopt.physics.bem_axi.solve import solve_axisymmetric
from elopt.physics.layout import EPS0_F_PER_M as EPS0
from elopt.physics.layout import Layout, driven, floating


def test_sphere_capacitance_uniform_charge_and_surface_field():
    # Isolated sphere: C = 4 pi eps0 R, sigma = eps0 V / R uniform, surface field V / R
    # (Jackson, Classical Electrodynamics, 3rd ed., 1999).
    radius, volts = 0.02, 250.0
    sol = solve_axisymmetric(
        Layout((driven("ball", geo.sphere(radius, 0.1), volts),)), rel_accuracy=1e-8
    )
    assert sol.accuracy_met
    assert sol.capacitance_matrix_F[0, 0] == pytest.approx(sphere_capacitance_F(radius), rel=1e-9)
    s = sol.surface_samples("ball")
    np.testing.assert_allclose(s.sigma_C_per_m2, EPS0 * volts / radius, rtol=1e-8)
    assert sol.peak_field.field_V_per_m == pytest.approx(volts / radius, rel=1e-8)
    assert not sol.peak_field.singular


def test_thin_disk_capacitance_and_edge_singular_density():
    # Thin disk: C = 8 eps0 R; sigma(r) summed over both faces = 4 eps0 V / (pi sqrt(R^2 - r^2))
    # (Landau & Lifshitz, Electrodynamics of Continuous Media, 2nd ed., sec. 4; section from memory).
    radius = 0.01
    sol = solve_axisymmetric(Layout((driven("disk", geo.disk(radius), 1.0),)), rel_accuracy=1e-7)
    assert sol.accuracy_met
    assert sol.capacitance_matrix_F[0, 0] == pytest.approx(disk_capacitance_F(radius), rel=1e-7)
    s = sol.surface_samples("disk")
    front, back = s.face == 1, s.face == -1
    r = s.points_m[front, 0]
    both = s.sigma_C_per_m2[front] + s.sigma_C_per_m2[back]
    exact = 4 * EPS0 / (math.pi * np.sqrt(radius**2 - r**2))
    inner = r < 0.999 * radius
    np.testing.assert_allclose(both[inner], exact[inner], rtol=1e-5)
    # The knife edge makes the exact field infinite: the peak must be flagged as mesh-dependent.
    assert sol.peak_field.singular


def _spheroid_capacitance(a_r: float, c_z: float) -> float:
    # Ellipsoid: C = 4 pi eps0 / R_F(a^2, b^2, c^2), Carlson's R_F (docs/references.md item 3).
    return ellipsoid_capacitance_F(a_r, a_r, c_z)


@pytest.mark.parametrize(
    ("a_r", "c_z"),
    [(1.0, 2.0), (1.0, 10.0), (1.0, 0.5)],
    ids=["prolate-2", "prolate-10", "oblate-0.5"],
)
def test_spheroid_capacitance_and_density_vs_carlson(a_r, c_z):
    # C from Carlson's R_F; the closed forms give the spot values of docs/references.md item 3
    # (prolate a/b = 2 -> 1.315190722204 b, oblate c/a = 0.5 -> 0.826993343133 a).
    # Density for total charge Q: sigma = Q / (4 pi a b c) (x^2/a^4 + y^2/b^4 + z^2/c^4)^(-1/2)
    # (Landau & Lifshitz sec. 4, from memory).
    sol = solve_axisymmetric(
        Layout((driven("body", geo.spheroid(a_r, c_z, 0.0), 1.0),)), rel_accuracy=1e-8
    )
    cap = sol.capacitance_matrix_F[0, 0]
    assert cap == pytest.approx(_spheroid_capacitance(a_r, c_z), rel=1e-8)
    s = sol.surface_samples("body")
    r, z = s.points_m.T
    exact = cap / (4 * math.pi * a_r * a_r * c_z) / np.sqrt(r**2 / a_r**4 + z**2 / c_z**4)
    np.testing.assert_allclose(s.sigma_C_per_m2, exact, rtol=1e-6)


def test_spheroid_spot_values_from_references():
    # docs/references.md item 3 spot values (verified there against R_F to 12 digits).
    assert _spheroid_capacitance(1.0, 2.0) / (4 * math.pi * EPS0) == pytest.approx(
        1.315190722204, rel=1e-11
    )
    assert _spheroid_capacitance(1.0, 0.5) / (4 * math.pi * EPS0) == pytest.approx(
        0.826993343133, rel=1e-11
    )


@pytest.mark.parametrize("h_over_r", [5.0, 2.0, 1.5, 1.2, 1.1])
def test_sphere_above_grounded_plane_vs_image_series(h_over_r):
    radius = 1e-3
    lay = Layout((driven("ball", geo.sphere(radius, h_over_r * radius), 1.0),), ground_plane=True)
    sol = solve_axisymmetric(lay, rel_accuracy=1e-8)
    assert sol.accuracy_met
    assert sol.capacitance_matrix_F[0, 0] == pytest.approx(
        # Image series (Smythe, ch. 5, from memory; docs/references.md item 6).
        sphere_above_plane_capacitance_F(radius, h_over_r * radius),
        rel=1e-8,
    )


def _love_capacitance(radius: float, gap: float, n: int = 400) -> float:
    # Love's equation, Nystrom solve (Love 1949; docs/references.md item 7): the pair's C.
    return love_disk_pair_capacitance(gap / radius, n) * EPS0 * radius


def _kirchhoff_capacitance(radius: float, gap: float) -> float:
    # Kirchhoff (1877) with Shaw's next term (docs/references.md item 7).
    return kirchhoff_disk_pair_capacitance(gap / radius)[0] * EPS0 * radius


def _disk_pair_capacitance(radius: float, gap: float) -> tuple[float, object]:
    lay = Layout(
        (
            driven("top", geo.disk(radius, gap / 2), 0.5),
            driven("bottom", geo.disk(radius, -gap / 2), -0.5),
        )
    )
    sol = solve_axisymmetric(lay, rel_accuracy=1e-6)
    c = sol.capacitance_matrix_F
    return 0.5 * (c[0, 0] - c[0, 1]), sol


def test_love_nystrom_reference_converges():
    # The test's own reference must be converged before it judges the solver.
    assert _love_capacitance(1.0, 0.1, 300) == pytest.approx(
        _love_capacitance(1.0, 0.1, 600), rel=1e-9
    )


@pytest.mark.parametrize("gap_over_r", [0.5, 0.2, 0.1, 0.05])
def test_coaxial_disks_vs_love_equation(gap_over_r):
    radius = 0.01
    cap, sol = _disk_pair_capacitance(radius, gap_over_r * radius)
    assert sol.accuracy_met
    assert cap == pytest.approx(_love_capacitance(radius, gap_over_r * radius), rel=2e-6)


@pytest.mark.parametrize("gap_over_r", [0.1, 0.05])
def test_coaxial_disks_vs_kirchhoff_formula(gap_over_r):
    # Kirchhoff's expansion is asymptotic in d/R: its truncation error is O((d/R)^2 ln) of the
    # leading term; 1e-3 holds comfortably at d/R <= 0.1 (Love's exact values differ by less).
    radius = 0.01
    cap, _ = _disk_pair_capacitance(radius, gap_over_r * radius)
    assert cap == pytest.approx(_kirchhoff_capacitance(radius, gap_over_r * radius), rel=1e-3)


def test_sphere_in_uniform_field_peak_and_cosine_density():
    # Uncharged conducting sphere in a uniform field E0: sigma = 3 eps0 E0 cos(theta), peak field
    # 3 E0 at the poles (Jackson sec. 2.5).
    radius, e0 = 0.05, 1.0e5
    lay = Layout((floating("ball", geo.sphere(radius, 0.0), 0.0),), applied_field_V_per_m=e0)
    sol = solve_axisymmetric(lay, rel_accuracy=1e-8)
    s = sol.surface_samples("ball")
    r, z = s.points_m.T
    cos_theta = z / np.hypot(r, z)
    np.testing.assert_allclose(
        s.sigma_C_per_m2, 3 * EPS0 * e0 * cos_theta, atol=1e-8 * 3 * EPS0 * e0
    )
    peak = sol.peak_field
    assert peak.field_V_per_m == pytest.approx(3 * e0, rel=1e-7)
    assert abs(abs(peak.location_m[1]) - radius) < 1e-9 * radius
    assert sol.potentials_V[0] == pytest.approx(0.0, abs=1e-9 * e0 * radius)


def _cylinder(length: float, radius: float, rounding: float):
    half = length / 2
    return geo.rounded_polyline(
        [(0.0, -half), (radius, -half), (radius, half), (0.0, half)], rounding
    )


def test_long_thin_cylinder_charge_crowds_to_the_ends():
    # Charge per unit length on a thin straight conductor rises towards the ends and approaches
    # uniform only slowly (Jackson, Am. J. Phys. 68, 789 (2000)); Maxwell's estimate
    # C ~ 2 pi eps0 L / (ln(2L/a) - 1) is about 2% low at L/(2a) = 50 (estimate from memory:
    # loose check only).
    length, radius = 1.0, 0.01
    sol = solve_axisymmetric(
        Layout((driven("rod", _cylinder(length, radius, 0.5 * radius), 1.0),)), rel_accuracy=1e-5
    )
    s = sol.surface_samples("rod")
    r, z = s.points_m.T
    side = (np.abs(r - radius) < 1e-12) & (z > 0) & (z < 0.49 * length)
    order = np.argsort(z[side])
    line_density = 2 * math.pi * radius * s.sigma_C_per_m2[side][order]
    assert np.all(np.diff(line_density) > 0)
    assert line_density[-1] > 1.2 * line_density[0]
    maxwell = 2 * math.pi * EPS0 * length / (math.log(2 * length / radius) - 1)
    assert 1.0 < sol.capacitance_matrix_F[0, 0] / maxwell < 1.05

"""3-D panel solver against published closed forms and facts of electrostatics.

Sources are named beside each check (see docs/references.md); reference formulas come from
tests/reference_values.py.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from reference_values import (
    CUBE_C_OVER_4PI_EPS0_A,
    FOUR_PI_EPS0,
    disk_capacitance_F,
    ellipsoid_capacitance_F,
    sphere_above_plane_series,
)

from elopt.physics.bem3d import BoxSurface, EllipsoidSurface, RevolvedSurface, solve_3d, sphere
from elopt.physics.geometry import disk
from elopt.physics.geometry import sphere as sphere_curve
from elopt.physics.layout import EPS0_F_PER_M, Layout, driven, floating


@pytest.fixture(scope="module")
def sphere_solution():
    r = 0.01
    layout = Layout((driven("ball", sphere(r, subdivisions=2), 5.0),))
    return r, solve_3d(layout, rel_accuracy=1e-5, max_level=2, strict=False)


def test_sphere_capacitance_converges_at_second_order_to_4_pi_eps_r(sphere_solution):
    # Jackson, Classical Electrodynamics, 3rd ed. (1999): C = 4 pi eps0 R (docs/references.md item 1).
    r, sol = sphere_solution
    exact = FOUR_PI_EPS0 * r
    errors = [abs(lv.capacitance_F[0, 0] - exact) / exact for lv in sol.levels]
    assert errors[-1] < 2e-3
    rates = [math.log2(errors[k] / errors[k + 1]) for k in range(len(errors) - 1)]
    assert all(1.8 < p < 2.2 for p in rates), rates
    assert sol.convergence_rate == pytest.approx(2.0, abs=0.2)
    c_rich = sol.capacitance_matrix_extrapolated_F[0, 0]
    assert abs(c_rich - exact) / exact < 1e-4
    # The h vs h/2 estimate must bound the true error of the finest level.
    assert sol.rel_error_estimate >= errors[-1]


def test_sphere_charge_is_uniform_and_field_is_v_over_r(sphere_solution):
    # Jackson (1999): sigma = eps0 V / R everywhere, surface field V / R (docs/references.md item 1).
    r, sol = sphere_solution
    s = sol.surface_samples("ball")
    expected = EPS0_F_PER_M * 5.0 / r
    assert np.max(np.abs(s.sigma_C_per_m2 / expected - 1.0)) < 0.01
    assert s.area_m2.sum() == pytest.approx(4 * math.pi * r**2, rel=2e-3)
    assert sol.peak_field.field_V_per_m == pytest.approx(5.0 / r, rel=0.01)
    assert not sol.peak_field.singular


def test_sphere_potential_inside_is_constant_and_outside_falls_as_one_over_r(sphere_solution):
    # Facts of the trade (common practice, no source): inside a conductor the potential is
    # the conductor's and the field vanishes; outside a charged sphere phi = V R / r.
    r, sol = sphere_solution
    inside = np.array([[0.0, 0.0, 0.0], [0.3 * r, -0.2 * r, 0.4 * r], [0.0, 0.0, 0.8 * r]])
    assert np.allclose(sol.potential_at(inside), 5.0, rtol=2e-3)
    assert np.max(np.linalg.norm(sol.field_at(inside), axis=1)) < 2e-3 * 5.0 / r
    outside = np.array([[0.0, 0.0, 2 * r], [3 * r, 0.0, 0.0], [0.0, -5 * r, 1e-3]])
    dist = np.linalg.norm(outside, axis=1)
    assert np.allclose(sol.potential_at(outside), 5.0 * r / dist, rtol=2e-3)
    e = sol.field_at(outside)
    assert np.allclose(e, (5.0 * r / dist**3)[:, None] * outside, rtol=3e-3, atol=1e-3 * 5.0 / r)


def test_triaxial_ellipsoid_capacitance_and_charge_density():
    # C = 4 pi eps0 / R_F(a^2, b^2, c^2) (Carlson R_F, DLMF 19.16.1; docs/references.md item 3), spot
    # value 1.96600920070939 for (3, 2, 1); sigma = Q / (4 pi a b c) (x^2/a^4 + y^2/b^4 +
    # z^2/c^4)^(-1/2) (Landau & Lifshitz sec. 4, from memory).
    a, b, c = 3.0, 2.0, 1.0
    exact = ellipsoid_capacitance_F(a, b, c) / FOUR_PI_EPS0
    assert exact == pytest.approx(1.96600920070939, rel=1e-12)
    layout = Layout((driven("e", EllipsoidSurface((a, b, c), subdivisions=2), 1.0),))
    sol = solve_3d(layout, rel_accuracy=1e-5, max_level=2, strict=False)
    c_fine = sol.capacitance_matrix_F[0, 0] / FOUR_PI_EPS0
    assert abs(c_fine - exact) / exact < 3e-3
    c_rich = sol.capacitance_matrix_extrapolated_F[0, 0] / FOUR_PI_EPS0
    assert abs(c_rich - exact) / exact < 3e-4
    s = sol.surface_samples("e")
    p = s.points_m
    q = sol.charges_C[0]
    # Compare at the centroids pushed radially onto the exact ellipsoid.
    on = p / np.sqrt((p[:, 0] / a) ** 2 + (p[:, 1] / b) ** 2 + (p[:, 2] / c) ** 2)[:, None]
    g = (on[:, 0] ** 2 / a**4 + on[:, 1] ** 2 / b**4 + on[:, 2] ** 2 / c**4) ** -0.5
    expected = q / (4 * math.pi * a * b * c) * g
    rel = np.abs(s.sigma_C_per_m2 / expected - 1.0)
    assert np.median(rel) < 0.01
    assert np.max(rel) < 0.06


def test_unit_cube_richardson_estimate_within_1e4_of_published_value():
    # C/(4 pi eps0 a) = 0.6606782 (Hwang & Mascagni, J. Appl. Phys. 95, 3798 (2004);
    # docs/references.md item 4). Sharp edges: graded meshes, three levels, Richardson with the observed
    # rate (about 2.7 here).
    layout = Layout((driven("cube", BoxSurface((1.0, 1.0, 1.0), 0.5, grade=2.0), 1.0),))
    sol = solve_3d(layout, rel_accuracy=1e-7, max_level=2, strict=False)
    assert [lv.panels.n for lv in sol.levels] == [192, 768, 3072]
    c_fine = sol.capacitance_matrix_F[0, 0] / FOUR_PI_EPS0
    c_rich = sol.capacitance_matrix_extrapolated_F[0, 0] / FOUR_PI_EPS0
    assert abs(c_fine - CUBE_C_OVER_4PI_EPS0_A) < 2e-4
    assert abs(c_rich - CUBE_C_OVER_4PI_EPS0_A) < 1e-5
    assert 2.0 < sol.convergence_rate < 3.5
    assert sol.peak_field.singular


def test_sphere_above_grounded_plane_matches_image_series():
    # C = 4 pi eps0 R sinh(alpha) sum 1/sinh(n alpha), cosh(alpha) = h/R (Smythe, Static and
    # Dynamic Electricity, 3rd ed. (1968), ch. 5, from memory; docs/references.md item 6).
    r, h = 1.0, 1.5
    exact = r * sphere_above_plane_series(h / r)
    layout = Layout(
        (driven("s", RevolvedSurface(sphere_curve(r, center_z=h), 0.3), 1.0),), ground_plane=True
    )
    sol = solve_3d(layout, rel_accuracy=1e-5, max_level=2, strict=False)
    c_fine = sol.capacitance_matrix_F[0, 0] / FOUR_PI_EPS0
    assert abs(c_fine - exact) / exact < 2e-3
    c_rich = sol.capacitance_matrix_extrapolated_F[0, 0] / FOUR_PI_EPS0
    assert abs(c_rich - exact) / exact < 2e-4
    assert abs(c_fine - exact) / exact <= 1.5 * sol.rel_error_estimate


def test_neutral_sphere_in_uniform_field_has_cosine_charge_and_peak_three_e0():
    # sigma = 3 eps0 E0 cos(theta), peak field 3 E0 (Jackson sec. 2.5 and 3rd ed. (1999);
    # docs/references.md item 9). A floating neutral sphere keeps zero charge.
    e0 = 1.0e5
    layout = Layout(
        (floating("ball", sphere(0.02, subdivisions=3), 0.0),), applied_field_V_per_m=e0
    )
    sol = solve_3d(layout, rel_accuracy=1e-3, max_level=1, strict=False)
    s = sol.surface_samples("ball")
    cos_t = s.points_m[:, 2] / np.linalg.norm(s.points_m, axis=1)
    expected = 3 * EPS0_F_PER_M * e0 * cos_t
    assert np.max(np.abs(s.sigma_C_per_m2 - expected)) < 0.01 * 3 * EPS0_F_PER_M * e0
    assert sol.peak_field.field_V_per_m == pytest.approx(3 * e0, rel=0.01)
    assert abs(sol.charges_C[0]) < 1e-6 * 3 * EPS0_F_PER_M * e0 * 4 * math.pi * 0.02**2
    assert abs(sol.potentials_V[0]) < 1e-3 * e0 * 0.02


def test_thin_disk_capacitance_and_both_faces():
    # C = 8 eps0 R; summed density 4 eps0 V / (pi sqrt(R^2 - r^2)), half on each face
    # (Landau & Lifshitz, sec. 4, section from memory; docs/references.md item 2).
    r = 0.05
    layout = Layout((driven("disk", RevolvedSurface(disk(r), 0.01), 1.0),))
    sol = solve_3d(layout, rel_accuracy=1e-4, max_level=2, strict=False)
    exact = disk_capacitance_F(r)
    assert sol.capacitance_matrix_F[0, 0] == pytest.approx(exact, rel=3e-3)
    assert sol.capacitance_matrix_extrapolated_F[0, 0] == pytest.approx(exact, rel=5e-4)
    s = sol.surface_samples("disk")
    # Two samples per panel, one per face, covering both faces' area.
    assert s.area_m2.sum() == pytest.approx(2 * math.pi * r**2, rel=1e-3)
    rho = np.hypot(s.points_m[:, 0], s.points_m[:, 1])
    inner = rho < 0.7 * r
    half = 2 * EPS0_F_PER_M / (math.pi * np.sqrt(r**2 - rho[inner] ** 2))
    assert np.max(np.abs(s.sigma_C_per_m2[inner] / half - 1.0)) < 0.01
    assert sol.peak_field.singular


def test_floating_conductor_stays_neutral_and_matrix_is_maxwell():
    # Maxwell capacitance matrix: symmetric, positive diagonal, negative coupling; a
    # floating neutral body carries no net charge (common practice, no source).
    layout = Layout(
        (
            driven("a", sphere(0.01, (0.0, 0.0, 0.0), subdivisions=2), 1.0),
            floating("b", sphere(0.01, (0.03, 0.0, 0.0), subdivisions=2), 0.0),
        )
    )
    sol = solve_3d(layout, rel_accuracy=1e-3, max_level=1, strict=False)
    c = sol.capacitance_matrix_F
    assert c[0, 1] < 0 < c[0, 0] and c[1, 0] < 0
    # The matrix is not symmetrised: its asymmetry is measured and part of the estimate.
    asym = abs(c[0, 1] - c[1, 0]) / math.sqrt(c[0, 0] * c[1, 1])
    assert asym == pytest.approx(sol.error_estimate.asymmetry, rel=1e-12)
    assert 0.5 * asym <= sol.rel_error_estimate
    assert c[0, 0] == pytest.approx(c[1, 1], rel=1e-6)
    # Each charge is the integral of its density: C V equals the sum of sigma dA.
    for k, name in enumerate(layout.names):
        assert sol.surface_samples(name).charge_C == pytest.approx(sol.charges_C[k], rel=1e-12)
    assert abs(sol.charges_C[1]) < 1e-9 * abs(sol.charges_C[0])
    # The neutral neighbour's potential follows from the matrix: V_b = -C_ba V_a / C_bb.
    assert sol.potentials_V[1] == pytest.approx(-c[1, 0] / c[1, 1], rel=1e-9)
    # Two spheres at distance 3R: C_aa exceeds the isolated 4 pi eps0 R (common practice).
    assert c[0, 0] > FOUR_PI_EPS0 * 0.01

"""Facts every electrostatic equilibrium obeys (common practice, no source), checked on the
axisymmetric solver, plus its accuracy control and refinement behaviour."""

from __future__ import annotations

import math

import numpy as np
import pytest

from elopt.physics import geometry as geo
from elopt.physics.bem_axi.solve import solve_axisymmetric
from elopt.physics.layout import Layout, driven, floating


def _probe(scale: float = 1.0, fillet: float = 0.1e-3) -> Layout:
    """A guarded disk probe over a grounded plane (sensor at 1 V, guard at 0.5 V)."""
    a, g, w, t, d = 2e-3, 0.2e-3, 1e-3, 1e-3, 0.5e-3
    a, g, w, t, d, fillet = (scale * v for v in (a, g, w, t, d, fillet))
    sensor = geo.rounded_polyline([(0, d), (a, d), (a, d + t), (0, d + t)], fillet)
    r0, r1 = a + g, a + g + w
    guard = geo.rounded_polyline(
        [(0.5 * (r0 + r1), d), (r1, d), (r1, d + t), (r0, d + t), (r0, d), (0.5 * (r0 + r1), d)],
        fillet,
    )
    return Layout((driven("sensor", sensor, 1.0), driven("guard", guard, 0.5)), ground_plane=True)


@pytest.fixture(scope="module")
def probe_solution():
    return solve_axisymmetric(_probe(), rel_accuracy=1e-6)


def test_inside_a_conductor_field_is_zero_and_potential_constant(probe_solution):
    # Common practice, no source: E = 0 inside a conductor, which is one equipotential.
    sol = probe_solution
    inside_sensor = np.array([[0.2e-3, 1.0e-3], [1.5e-3, 0.7e-3], [1.9e-3, 1.4e-3]])
    inside_guard = np.array([[2.4e-3, 0.9e-3], [2.9e-3, 1.3e-3]])
    np.testing.assert_allclose(sol.potential_at(inside_sensor), 1.0, atol=1e-6)
    np.testing.assert_allclose(sol.potential_at(inside_guard), 0.5, atol=1e-6)
    field = sol.field_at(np.concatenate([inside_sensor, inside_guard]))
    outside = np.linalg.norm(sol.field_at(np.array([[1.0e-3, 0.25e-3]])))
    assert np.max(np.abs(field)) < 1e-5 * outside


def test_field_just_outside_is_normal_with_magnitude_sigma_over_eps(probe_solution):
    # Common practice, no source: just outside, E is normal to the surface, |E| = sigma / eps.
    sol = probe_solution
    s = sol.surface_samples("sensor")
    mesh = sol.mesh
    idx = np.nonzero(mesh.node_conductor == 0)[0][::7]
    normals = mesh.normals[idx]
    tangents = mesh.tangents[idx]
    # 10 nm out: the tangential field there is O(offset / fillet radius) of the normal one.
    offset = 1e-8
    pts = mesh.points_m[idx] + offset * normals
    keep = (pts[:, 0] > 1e-5) & (np.abs(pts[:, 0] - 2e-3) > 5e-5)
    e = sol.field_at(pts[keep])
    e_t = np.einsum("ij,ij->i", e, tangents[keep])
    e_n = np.einsum("ij,ij->i", e, normals[keep])
    sigma = sol.sigma_C_per_m2[idx][keep]
    scale = np.max(np.abs(s.field_V_per_m))
    assert np.max(np.abs(e_t)) < 1e-3 * scale
    np.testing.assert_allclose(e_n, sigma / sol.eps, atol=1e-3 * scale)


def test_charges_equal_integral_of_sigma(probe_solution):
    sol = probe_solution
    for k, name in enumerate(sol.layout.names):
        s = sol.surface_samples(name)
        assert np.sum(s.sigma_C_per_m2 * s.area_m2) == pytest.approx(sol.charges_C[k], rel=1e-12)


def test_plane_carries_the_opposite_of_all_conductor_charge(probe_solution):
    # Gauss's law: every field line from the conductors ends on the grounded plane.
    sol = probe_solution
    r, w = sol._plane_rule
    total = np.sum(2 * math.pi * r * w * sol.plane_charge_density(r))
    assert total == pytest.approx(-np.sum(sol.charges_C), rel=1e-5)


def test_capacitance_matrix_symmetric_positive_diagonal_negative_coupling(probe_solution):
    sol = probe_solution
    c = sol.capacitance_matrix_F
    assert np.all(np.diag(c) > 0)
    assert c[0, 1] < 0 and c[1, 0] < 0
    # Symmetric to solver precision: the collocation matrix is not symmetric, so this checks
    # the discretisation, within the stated error estimate.
    assert abs(c[0, 1] - c[1, 0]) / math.sqrt(c[0, 0] * c[1, 1]) < max(sol.rel_error_estimate, 1e-9)
    # With the plane grounded the row sums are positive: each conductor sees ground.
    assert np.all(c.sum(axis=1) > 0)


def test_capacitance_scales_with_geometry():
    # C(lambda * geometry) = lambda * C (common practice, no source).
    c1 = solve_axisymmetric(_probe(1.0), rel_accuracy=1e-6).capacitance_matrix_F
    c3 = solve_axisymmetric(_probe(3.0), rel_accuracy=1e-6).capacitance_matrix_F
    np.testing.assert_allclose(c3, 3.0 * c1, rtol=1e-6)


def test_floating_conductor_takes_the_potential_that_holds_its_charge():
    # A floating uncharged sphere between a driven sphere and ground: its charge stays zero.
    lay = Layout(
        (
            driven("hot", geo.sphere(1e-3, 5e-3), 10.0),
            floating("idle", geo.sphere(1e-3, 2e-3), 0.0),
        ),
        ground_plane=True,
    )
    sol = solve_axisymmetric(lay, rel_accuracy=1e-8)
    assert sol.charges_C[1] == pytest.approx(0.0, abs=1e-9 * abs(sol.charges_C[0]))
    assert 0.0 < sol.potentials_V[1] < 10.0
    assert sol.potential_at(np.array([[0.1e-3, 2e-3]]))[0] == pytest.approx(
        sol.potentials_V[1], abs=1e-7
    )


def test_requested_accuracy_drives_refinement_and_is_reported():
    lay = _probe()
    loose = solve_axisymmetric(lay, rel_accuracy=1e-3)
    tight = solve_axisymmetric(lay, rel_accuracy=1e-8)
    assert loose.accuracy_met and tight.accuracy_met
    assert tight.n_unknowns > loose.n_unknowns
    assert tight.rel_error_estimate <= 1e-8
    ref = tight.capacitance_matrix_F
    err = np.max(
        np.abs(loose.capacitance_matrix_F - ref) / np.sqrt(np.outer(np.diag(ref), np.diag(ref)))
    )
    # The estimate compares the last two levels, so it bounds the finer level's error.
    assert err <= loose.rel_error_estimate
    capped = solve_axisymmetric(lay, rel_accuracy=1e-12, max_level=1)
    assert not capped.accuracy_met
    assert capped.rel_error_estimate > 1e-12


def test_observed_convergence_order_on_a_smooth_body():
    # A smooth body (oblate spheroid) with p Gauss nodes per panel: the capacitance, a smooth
    # functional of the density, converges like the 2p-order Gauss rule, h^(2p) (common practice
    # for Gauss-point collocation, no source); demand at least 2p - 1/2 over three halvings.
    from reference_values import ellipsoid_capacitance_F

    from elopt.physics.bem_axi.mesh import build_mesh
    from elopt.physics.bem_axi.solve import solve_level

    a, c = 1.0, 0.4
    lay = Layout((driven("body", geo.spheroid(a, c), 1.0),))
    # Carlson's R_F (docs/references.md item 3).
    exact = ellipsoid_capacitance_F(a, a, c)
    p = 2
    hs, errs = [], []
    for level in range(4):
        mesh = build_mesh(lay, level, p)
        res = solve_level(lay, mesh)
        hs.append(2.0**-level)
        errs.append(abs(res.capacitance_F[0, 0] / exact - 1))
    slope = np.polyfit(np.log(hs), np.log(errs), 1)[0]
    assert slope >= 2 * p - 0.5, (slope, errs)


def test_sharp_corner_peak_is_flagged_and_fillet_peak_converges():
    sharp = solve_axisymmetric(_probe(fillet=0.0), rel_accuracy=1e-4)
    assert sharp.peak_field.singular
    rounded = solve_axisymmetric(_probe(fillet=0.1e-3), rel_accuracy=1e-6)
    peak = rounded.peak_field
    assert not peak.singular
    assert peak.rel_error_estimate < 1e-3
    finer = solve_axisymmetric(_probe(fillet=0.1e-3), rel_accuracy=1e-9).peak_field
    assert peak.field_V_per_m == pytest.approx(
        finer.field_V_per_m, rel=max(peak.rel_error_estimate, 1e-6)
    )
    # Rounding lowers the peak far below the sharp-edge value on a fine mesh.
    assert sharp.peak_field.field_V_per_m > peak.field_V_per_m


def test_capacitance_scales_with_the_medium_permittivity():
    # C is proportional to eps = eps_r eps0 in a homogeneous medium (common practice, no source).
    base = solve_axisymmetric(_probe(), rel_accuracy=1e-6)
    oil = solve_axisymmetric(
        Layout(_probe().conductors, eps_r=2.2, ground_plane=True), rel_accuracy=1e-6
    )
    np.testing.assert_allclose(
        oil.capacitance_matrix_F, 2.2 * base.capacitance_matrix_F, rtol=1e-12
    )
    # Same charge density per volt scaled, so the surface field at the drive is unchanged.
    assert oil.peak_field.field_V_per_m == pytest.approx(base.peak_field.field_V_per_m, rel=1e-12)


def test_open_sheet_faces_share_its_charge():
    # An isolated thin disk carries half its charge on each face by symmetry; over a grounded
    # plane the face towards the plane carries more, and the faces always sum to the total
    # (jump of the normal field across a charged sheet: common practice, no source).
    alone = solve_axisymmetric(
        Layout((driven("disk", geo.disk(1e-2, 0.0), 1.0),)), rel_accuracy=1e-6
    )
    s = alone.surface_samples("disk")
    front, back = s.sigma_C_per_m2[s.face == 1], s.sigma_C_per_m2[s.face == -1]
    np.testing.assert_allclose(front, 0.5 * (front + back), rtol=1e-4)
    over = solve_axisymmetric(
        Layout((driven("disk", geo.disk(1e-2, 2e-3), 1.0),), ground_plane=True), rel_accuracy=1e-6
    )
    s = over.surface_samples("disk")
    front, back = s.sigma_C_per_m2[s.face == 1], s.sigma_C_per_m2[s.face == -1]
    # Both faces share the points, arc lengths and areas; their normals are opposite.
    np.testing.assert_array_equal(s.arc_length_m[s.face == 1], s.arc_length_m[s.face == -1])
    np.testing.assert_array_equal(s.normal[s.face == 1], -s.normal[s.face == -1])
    idx = np.nonzero(over.mesh.node_conductor == 0)[0]
    summed = over.sigma_C_per_m2[idx[np.argsort(over.mesh.arc_m[idx], kind="stable")]]
    np.testing.assert_allclose(front + back, summed, rtol=1e-4)
    # The segment runs outwards along +r, so its normal points down, towards the plane.
    assert np.all(s.normal[s.face == 1][:, 1] < 0)
    assert np.all(front > back)
    assert np.max(s.field_V_per_m) <= over.peak_field.field_V_per_m * (1 + 1e-12)

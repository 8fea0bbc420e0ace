"""Facts of the trade for the axisymmetric solver with dielectrics (docs/references.md,
"Facts of the trade": common practice, no source), convergence, and derivatives."""

from __future__ import annotations

import math

import numpy as np
import pytest

from elopt.physics import geometry as geo
from elopt.physics.bem_axi import dielectric_solve as ds
from elopt.physics.bem_axi.solve import solve_axisymmetric
from elopt.physics.geometry import Arc, Curve, Segment
from elopt.physics.layout import EPS0_F_PER_M as EPS0
from elopt.physics.layout import Layout, driven
from elopt.physics.media import DielectricRegion, PlanarLayer


def _rect(r0, r1, z0, z1) -> Curve:
    return Curve(
        (
            Segment((r0, z0), (r1, z0)),
            Segment((r1, z0), (r1, z1)),
            Segment((r1, z1), (r0, z1)),
            Segment((r0, z1), (r0, z0)),
        )
    )


def _block(r1, z0, z1) -> Curve:
    """A solid cylinder r <= r1, z0 <= z <= z1 (generating curve from axis to axis)."""
    return Curve(
        (
            Segment((0.0, z0), (r1, z0)),
            Segment((r1, z0), (r1, z1)),
            Segment((r1, z1), (0.0, z1)),
        )
    )


def _ball_beside_spheroid():
    """A charged ball and a neutral dielectric ball on the axis, apart (eps_r 5)."""
    return Layout(
        (driven("ball", geo.sphere(0.5, 1.2), 1.0),),
        regions=(DielectricRegion("lens", geo.sphere(0.6), 5.0),),
    )


@pytest.fixture(scope="module")
def ball_lens():
    return solve_axisymmetric(_ball_beside_spheroid(), rel_accuracy=1e-7)


def test_normal_d_and_tangential_e_continuous_across_region_interface(ball_lens):
    # common practice, no source: across a charge-free interface D_n and E_t are continuous.
    sol = ball_lens
    u = np.linspace(-1.2, 1.2, 7)
    nrm = np.stack([np.cos(u), np.sin(u)], axis=1)
    pts = 0.6 * nrm
    tan = np.stack([-nrm[:, 1], nrm[:, 0]], axis=1)
    delta = 1e-6
    d_out = sol.displacement_at(pts + delta * nrm)
    d_in = sol.displacement_at(pts - delta * nrm)
    e_out, e_in = sol.field_at(pts + delta * nrm), sol.field_at(pts - delta * nrm)
    scale = np.abs(d_out).max()
    np.testing.assert_allclose(np.sum(d_out * nrm, 1), np.sum(d_in * nrm, 1), atol=1e-5 * scale)
    np.testing.assert_allclose(
        np.sum(e_out * tan, 1), np.sum(e_in * tan, 1), atol=1e-5 * np.abs(e_out).max()
    )
    # and the jump of E_n is the factor eps_r (the check is not empty)
    assert np.all(np.abs(np.sum(e_in * nrm, 1)) < 0.5 * np.abs(np.sum(e_out * nrm, 1)))


def test_no_free_charge_in_dielectric_and_neutral_body_bound_charge_zero(ball_lens):
    # common practice, no source: the flux of D out of a surface enclosing only the dielectric
    # is zero (no free charge), and the bound charge of the neutral body sums to zero.
    sol = ball_lens
    x, w = np.polynomial.legendre.leggauss(96)
    theta = 0.5 * math.pi * x  # the sphere of radius 0.65 about the origin, pole to pole
    rad = 0.65
    pts = rad * np.stack([np.cos(theta), np.sin(theta)], axis=1)
    normal = pts / rad
    flux = np.sum(
        w
        * 0.5
        * math.pi
        * rad
        * 2
        * math.pi
        * pts[:, 0]
        * np.sum(sol.displacement_at(pts) * normal, 1)
    )
    q_ball = sol.charges_C[0]
    assert abs(flux) < 1e-7 * q_ball
    assert abs(sol.bound_charge_C("lens")) < 1e-7 * q_ball


def test_capacitance_scales_with_every_permittivity():
    # common practice, no source: C scales by s when every permittivity scales by s.
    def layout(s):
        return Layout(
            (
                driven("sensor", _block(1.0, 0.5, 0.8), 1.0),
                driven("ring", _rect(1.2, 1.6, 0.5, 0.8), 0.0),
            ),
            eps_r=s,
            ground_plane=True,
            layers=(PlanarLayer("film", 3.0 * s, 0.0, 0.1),),
            regions=(DielectricRegion("spacer", _rect(1.0, 1.2, 0.5, 0.8), 2.0 * s),),
        )

    c1 = solve_axisymmetric(layout(1.0), rel_accuracy=1e-4).capacitance_matrix_F
    c2 = solve_axisymmetric(layout(2.5), rel_accuracy=1e-4).capacitance_matrix_F
    np.testing.assert_allclose(c2, 2.5 * c1, rtol=1e-9, atol=1e-9 * abs(c1[0, 0]))


def test_spacer_junction_is_flagged_and_field_uses_the_touching_medium():
    # common practice, no source: the field just off a conductor is sigma_free / eps of the
    # medium touching it; a metal-dielectric-air junction is a singular point like a corner.
    layout = Layout(
        (
            driven("sensor", _block(1.0, 0.5, 0.8), 1.0),
            driven("ring", _rect(1.2, 1.6, 0.5, 0.8), 0.0),
        ),
        ground_plane=True,
        regions=(DielectricRegion("spacer", _rect(1.0, 1.2, 0.5, 0.8), 3.0),),
    )
    sol = solve_axisymmetric(layout, rel_accuracy=1e-4)
    s = sol.surface_samples("sensor")
    pts = s.points_m
    side = (np.abs(pts[:, 0] - 1.0) < 1e-12) & (pts[:, 1] > 0.55) & (pts[:, 1] < 0.75)
    off = pts[side] + np.array([1e-6, 0.0])
    assert np.all(sol.eps_r_at(off) == 3.0)
    e = sol.field_at(off)[:, 0]
    np.testing.assert_allclose(e, s.sigma_C_per_m2[side] / (EPS0 * 3.0), rtol=1e-4)
    np.testing.assert_allclose(s.field_V_per_m[side], np.abs(e), rtol=1e-4)
    assert sol.peak_fields()[0].singular


def test_convergence_rate_with_dielectric_region():
    # Item 11 of docs/references.md (sphere + shell): with 2 nodes per panel the error of C
    # falls at least like h^3.5 over three halvings (collocation at Gauss points superconverges,
    # measured 2^-4 per level; common practice, no source for the rate).
    a, b, eps_r = 1.0, 2.0, 4.0
    layout = Layout(
        (driven("ball", geo.sphere(a), 1.0),),
        regions=(DielectricRegion("shell", geo.sphere(b), eps_r),),
    )
    exact = 4 * math.pi * EPS0 / ((1 / a - 1 / b) / eps_r + 1 / b)
    model = ds.dielectric_model(layout)
    err = [
        abs(ds.solve_dielectric_level(model, lv, 2).capacitance_F[0, 0] / exact - 1)
        for lv in range(4)
    ]
    rates = -np.diff(np.log2(err))
    assert np.all(rates > 3.5), rates


def test_eps_and_thickness_derivatives_against_closed_forms():
    # d/d eps_r of item 11 (docs/references.md): C = 4 pi eps0 / ((1/a - 1/b)/e + 1/b).
    # The finite difference comes with a Richardson error estimate.
    a, b, e = 1.0, 2.0, 4.0
    layout = Layout(
        (driven("ball", geo.sphere(a), 1.0),),
        regions=(DielectricRegion("shell", geo.sphere(b), e),),
    )
    sol = solve_axisymmetric(layout, rel_accuracy=1e-8)
    den = (1 / a - 1 / b) / e + 1 / b
    dc_de = 4 * math.pi * EPS0 * (1 / a - 1 / b) / e**2 / den**2
    d = sol.eps_derivative("shell")
    assert d.value[0, 0] == pytest.approx(dc_de, rel=1e-6)
    # the estimate (error of the plain central difference) bounds the true error honestly
    assert abs(d.value[0, 0] / dc_de - 1) <= d.rel_error_estimate < 1e-3


def test_pv_normal_field_of_uniform_sphere_is_half_the_jump():
    # Potential theory (Gauss): a uniform single layer on a sphere has normal field sigma/eps
    # outside and 0 inside, so the principal value is sigma/(2 eps) (common practice).
    mesh = ds.build_mesh(Layout((driven("s", geo.sphere(1.0), 1.0),)), 1, 4)
    from elopt.physics.bem_axi.layered_kernel import LayeredKernel
    from elopt.physics.media import LayerStack

    kernel = LayeredKernel(LayerStack(()), mesh.points_m[:, 1], 1.0, "test")
    rows = np.arange(mesh.n_nodes)
    delta = ds.PV_OFFSET * mesh.length_m[rows // mesh.order][:, None]
    pv = ds.principal_value_normal_field(kernel, mesh, rows, delta)
    np.testing.assert_allclose(pv @ np.ones(mesh.n_nodes), 0.5, atol=1e-9)


def test_region_given_by_arcs_matches_region_given_by_axis_closure():
    # The same shell given two ways (ring with axis pieces / enclosing ball) gives the same C
    # (common practice, no source: the axis bounds no area).
    a, b, e = 1.0, 2.0, 4.0
    ring = Curve(
        (
            Arc((0.0, 0.0), b, -math.pi / 2, math.pi / 2),
            Segment((0.0, b), (0.0, a)),
            Arc((0.0, 0.0), a, math.pi / 2, -math.pi / 2),
            Segment((0.0, -a), (0.0, -b)),
        )
    )
    out = []
    for shape in (ring, geo.sphere(b)):
        lay = Layout(
            (driven("ball", geo.sphere(a), 1.0),),
            regions=(DielectricRegion("shell", shape, e),),
        )
        out.append(solve_axisymmetric(lay, rel_accuracy=1e-7).capacitance_matrix_F[0, 0])
    assert out[0] == pytest.approx(out[1], rel=1e-8)


def test_standoff_finite_difference_matches_one_solve_hadamard_formula():
    # The Hadamard shape derivative of the bare plane (one solve; DEVELOPERS.md) and the central
    # difference used when a layer covers the target agree on a layout with a dielectric
    # region and a bare target (common practice, no source).
    layout = Layout(
        (driven("ball", geo.sphere(0.5, 1.0), 1.0),),
        ground_plane=True,
        regions=(DielectricRegion("collar", _rect(0.7, 1.0, 0.6, 1.0), 3.0),),
    )
    sol = solve_axisymmetric(layout, rel_accuracy=1e-5)
    hadamard = sol.plane_capacitance_derivative_F_per_m()
    fd = sol.standoff_derivative_fd()
    assert fd.value[0, 0] == pytest.approx(hadamard[0, 0], rel=1e-4)
    assert fd.rel_error_estimate < 1e-3


@pytest.mark.parametrize("eps_film", [4.0, 80.0])
def test_continuity_across_a_film_on_the_grounded_plane(eps_film):
    # common practice, no source: phi, tangential E and normal D are continuous across the
    # face of a film (points 1e-9 m either side), and phi = 0 on the grounded plane under it.
    d = 0.1
    layout = Layout(
        (driven("ball", geo.sphere(0.3, 0.6), 1.0),),
        ground_plane=True,
        layers=(PlanarLayer("film", eps_film, 0.0, d),),
    )
    sol = solve_axisymmetric(layout, rel_accuracy=1e-7)
    r = np.array([0.0, 0.2, 0.5, 1.0])
    up = np.stack([r, np.full(4, d + 1e-9)], axis=1)
    down = np.stack([r, np.full(4, d - 1e-9)], axis=1)
    phi = sol.potential_at(up)
    e_up, e_down = sol.field_at(up), sol.field_at(down)
    # phi may differ by the field times the 2e-9 m between the points
    np.testing.assert_allclose(sol.potential_at(down), phi, atol=4e-9 * np.abs(e_up).max())
    np.testing.assert_allclose(e_down[:, 0], e_up[:, 0], atol=1e-6 * np.abs(e_up).max())
    np.testing.assert_allclose(
        eps_film * e_down[:, 1], e_up[:, 1], atol=1e-6 * np.abs(e_up[:, 1]).max()
    )
    plane = np.stack([r, np.zeros(4)], axis=1)
    np.testing.assert_allclose(sol.potential_at(plane), 0.0, atol=1e-12)

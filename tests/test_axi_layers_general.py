"""Axisymmetric solver in general layer stacks: sources in several gaps, points in every layer,
an applied field through layers (docs/references.md, section "Dielectrics")."""

from __future__ import annotations

import math

import numpy as np
import pytest
from study_support.layer_images import slab_on_substrate_images

from elopt.physics import geometry as geo
from elopt.physics.bem_axi.solve import solve_axisymmetric
from elopt.physics.geometry import Arc, Curve, Segment
from elopt.physics.layout import EPS0_F_PER_M as EPS0
from elopt.physics.layout import Layout, driven, floating
from elopt.physics.media import DielectricRegion, PlanarLayer


@pytest.mark.parametrize(("eps2", "eps3"), [(4.0, 2.0), (80.0, 4.0), (2.0, 80.0)])
def test_small_sphere_over_slab_on_substrate_against_image_series(eps2, eps3):
    # A sphere of radius a = 0.01 h carrying q stands for the point charge; its polarisation
    # by the image field is a dipole ~ (a / 2h)^3 ~ 1e-7 relative (as in the half-space test).
    q, h, a, d = 1e-12, 1.0, 0.01, 0.4
    layout = Layout(
        (floating("charge", geo.sphere(a, h), q),),
        layers=(
            PlanarLayer("slab", eps2, -d, 0.0),
            PlanarLayer("substrate", eps3, -math.inf, -d),
        ),
    )
    sol = solve_axisymmetric(layout, rel_accuracy=1e-7)
    pts = np.array(
        [[0.5, 0.5], [1.0, 1.5], [0.2, 0.1], [0.3, -0.1], [1.2, -0.35], [0.1, -0.6], [2.0, -3.0]]
    )
    ref = q / (4 * math.pi * EPS0) * slab_on_substrate_images(h, 1.0, eps2, eps3, d, pts)
    np.testing.assert_allclose(sol.potential_at(pts), ref, rtol=2e-6)


def _stack_solution(eps_film: float):
    # ball over two films on a grounded plane and a sheet floating above the ball's gap
    layout = Layout(
        (driven("ball", geo.sphere(0.3, 1.0), 1.0),),
        ground_plane=True,
        layers=(
            PlanarLayer("base", eps_film, 0.0, 0.2),
            PlanarLayer("coat", 3.0, 0.2, 0.35),
            PlanarLayer("cover", 2.0, 1.5, 1.7),
        ),
    )
    return solve_axisymmetric(layout, rel_accuracy=1e-7)


@pytest.mark.parametrize("eps_film", [4.0, 80.0])
def test_continuity_across_a_deeper_interface(eps_film):
    # common practice, no source: phi, tangential E and normal D continuous across the face
    # between the two films (not the one next to the ball) and both faces of the cover, at
    # points 1e-9 m either side; phi = 0 on the grounded plane.
    sol = _stack_solution(eps_film)
    r = np.array([0.0, 0.2, 0.5, 1.0, 3.0])
    for face, lo, hi in ((0.2, eps_film, 3.0), (1.5, 1.0, 2.0), (1.7, 2.0, 1.0)):
        up = np.stack([r, np.full(5, face + 1e-9)], axis=1)
        down = np.stack([r, np.full(5, face - 1e-9)], axis=1)
        e_up, e_down = sol.field_at(up), sol.field_at(down)
        scale = np.abs(e_up).max()
        np.testing.assert_allclose(sol.potential_at(down), sol.potential_at(up), atol=4e-9 * scale)
        np.testing.assert_allclose(e_down[:, 0], e_up[:, 0], atol=1e-6 * scale)
        np.testing.assert_allclose(lo * e_down[:, 1], hi * e_up[:, 1], atol=1e-6 * hi * scale)
    plane = np.stack([r, np.zeros(5)], axis=1)
    np.testing.assert_allclose(sol.potential_at(plane), 0.0, atol=1e-12)


@pytest.mark.parametrize("eps_s", [3.0, 80.0])
def test_applied_field_through_a_thick_layer_and_a_sphere_inside_it(eps_s):
    # The applied field E0 is the field of the medium; D_z is continuous, so the layer (eps_L)
    # carries E_L = E0 / eps_L far from bodies (common practice, no source). A dielectric
    # sphere (eps_s) inside the layer sees a uniform E_L in a host eps_L: inside field
    # 3 eps_L E_L / (eps_s + 2 eps_L) (docs/references.md item 14, Jackson sec. 4.4, with
    # eps_r -> eps_s / eps_L). The layer's faces 40 R away react on the sphere's dipole by
    # about (R / 80)^3 ~ 2e-6 relative; the far floating probe (radius 0.01, 60 R above) by
    # its induced dipole, ~1e-11.
    radius, e0, eps_l, half = 1.0, 2.0, 5.0, 40.0
    layout = Layout(
        (floating("far probe", geo.sphere(0.01, 60.0)),),
        applied_field_V_per_m=e0,
        regions=(DielectricRegion("ball", geo.sphere(radius), eps_s),),
        layers=(PlanarLayer("host", eps_l, -half, half),),
    )
    sol = solve_axisymmetric(layout, rel_accuracy=1e-7)
    e_l = e0 / eps_l
    inside = np.array([[0.1, 0.2], [0.5, -0.3], [0.0, 0.0]])
    np.testing.assert_allclose(
        sol.field_at(inside),
        np.tile([0.0, 3 * eps_l * e_l / (eps_s + 2 * eps_l)], (3, 1)),
        atol=1e-5 * e_l,
    )
    # far from the sphere: E_L in the layer, E0 outside, D_z continuous at the faces
    far = np.array([[0.0, 30.0], [35.0, -20.0], [0.0, 45.0], [30.0, -50.0]])
    expect = np.array([e_l, e_l, e0, e0])
    np.testing.assert_allclose(sol.field_at(far)[:, 1], expect, rtol=1e-4)
    for face in (-half, half):
        pts = np.array([[50.0, face - 1e-9], [50.0, face + 1e-9]])
        ez = sol.field_at(pts)[:, 1]
        below, above = (e0, eps_l) if face < 0 else (eps_l, e0)
        eps_pair = (1.0, eps_l) if face < 0 else (eps_l, 1.0)
        assert eps_pair[0] * ez[0] == pytest.approx(eps_pair[1] * ez[1], rel=1e-8)
        del below, above


@pytest.mark.slow
def test_plates_on_both_sides_of_a_sheet_reach_the_series_formula():
    # docs/references.md item 16: C/A = 1 / sum(d_i / eps_i) is the limit of vanishing
    # fringing. Two disks of radius R, one under a sheet (gap g below it), one over it (gap g
    # above): three dielectric layers in series between conductors in different gaps. The
    # excess -C_12 / C_series - 1 is fitted as c + a/R + b ln(R)/R + e/R^2; c must vanish.
    g, t, eps = 0.25, 0.5, 4.0
    radii, excess = [], []
    for ratio in (8, 16, 32, 64):
        radius = ratio * (2 * g + t)
        layout = Layout(
            (
                driven("low", geo.disk(radius, -g), 0.0),
                driven("high", geo.disk(radius, t + g), 1.0),
            ),
            layers=(PlanarLayer("sheet", eps, 0.0, t),),
        )
        sol = solve_axisymmetric(layout, rel_accuracy=1e-6)
        series = EPS0 * math.pi * radius**2 / (2 * g + t / eps)
        radii.append(radius)
        excess.append(-sol.capacitance_matrix_F[0, 1] / series - 1)
    rr = np.array(radii)
    fit = np.linalg.solve(
        np.stack([np.ones(4), 1 / rr, np.log(rr) / rr, 1 / rr**2], axis=1), np.array(excess)
    )
    assert np.all(np.diff(excess) < 0)
    assert abs(fit[0]) < 2e-3


def _half_shell(a: float, b: float, upper: bool) -> Curve:
    """Half of the shell a < r < b (upper: z >= 0), closed by the axis and the plane z = 0."""
    s = 1.0 if upper else -1.0
    return Curve(
        (
            Segment((a, 0.0), (b, 0.0)),
            Arc((0.0, 0.0), b, 0.0, s * math.pi / 2),
            Segment((0.0, s * b), (0.0, s * a)),
            Arc((0.0, 0.0), a, s * math.pi / 2, 0.0),
        )
    )


def _split_ball(radius: float) -> Curve:
    return Curve(
        (
            Arc((0.0, 0.0), radius, -math.pi / 2, 0.0),
            Arc((0.0, 0.0), radius, 0.0, math.pi / 2),
        )
    )


def test_sphere_on_interface_with_half_shells_resting_on_it():
    # Conducting sphere (radius a) centred on the interface of two half-spaces (eps_lo below,
    # eps_hi above), with a shell a < r < b made of two halves resting on the interface,
    # eps_su above and eps_sl below, eps_su / eps_sl = eps_hi / eps_lo. A radial field
    # E = Q / (2 pi eps0 r^2 (eps_u(r) + eps_l(r))) is tangential to the plane and keeps
    # normal D continuous on r = b in each half, so it is the solution (docs/references.md
    # items 11 and 12: Gauss's law and the argument of item 12; combination from memory):
    #   C = 2 pi eps0 / [(1/a - 1/b)/(eps_su + eps_sl) + 1/(b (eps_hi + eps_lo))].
    a, b, eps_lo, eps_hi = 1.0, 1.6, 4.0, 1.0
    eps_sl, eps_su = 10.0, 2.5
    layout = Layout(
        (driven("ball", _split_ball(a), 1.0),),
        layers=(PlanarLayer("lower", eps_lo, -math.inf, 0.0),),
        regions=(
            DielectricRegion("upper shell", _half_shell(a, b, True), eps_su),
            DielectricRegion("lower shell", _half_shell(a, b, False), eps_sl),
        ),
    )
    sol = solve_axisymmetric(layout, rel_accuracy=1e-7)
    exact = 2 * math.pi * EPS0 / ((1 / a - 1 / b) / (eps_su + eps_sl) + 1 / (b * (eps_hi + eps_lo)))
    assert sol.capacitance_matrix_F[0, 0] == pytest.approx(exact, rel=1e-6)


def _block(r0, r1, z0, z1, split=()) -> Curve:
    """Rectangle r0..r1, z0..z1 (counter-clockwise), its sides split at the heights ``split``."""
    zs = [z0, *split, z1]
    right = [Segment((r1, u), (r1, v)) for u, v in zip(zs[:-1], zs[1:], strict=True)]
    left = [Segment((r0, v), (r0, u)) for u, v in reversed(list(zip(zs[:-1], zs[1:], strict=True)))]
    return Curve((Segment((r0, z0), (r1, z0)), *right, Segment((r1, z1), (r0, z1)), *left))


@pytest.mark.parametrize("eps_ring", [3.0, 10.0])
def test_region_crossing_a_layer_face_equals_two_regions_meeting_on_it(eps_ring):
    # Two descriptions of one body (a ring of eps_ring through the face of a film on the
    # grounded plane): one region crossing the face (the face inside it becomes an interface
    # of the background) and two regions of the same eps_ring meeting on the face. Physics
    # does not tell them apart (common practice, no source), so C and the field must agree
    # within the requested accuracy (measured 2e-7 and 1e-8 on C).
    film = (PlanarLayer("film", 6.0, 0.0, 0.2),)
    ball = driven("ball", geo.sphere(0.3, 1.0), 1.0)
    one = Layout(
        (ball,),
        ground_plane=True,
        layers=film,
        regions=(DielectricRegion("ring", _block(0.3, 0.8, 0.1, 0.4, (0.2,)), eps_ring),),
    )
    two = Layout(
        (ball,),
        ground_plane=True,
        layers=film,
        regions=(
            DielectricRegion("low", _block(0.3, 0.8, 0.1, 0.2), eps_ring),
            DielectricRegion("high", _block(0.3, 0.8, 0.2, 0.4), eps_ring),
        ),
    )
    s1 = solve_axisymmetric(one, rel_accuracy=1e-5)
    s2 = solve_axisymmetric(two, rel_accuracy=1e-5)
    assert s1.capacitance_matrix_F[0, 0] == pytest.approx(s2.capacitance_matrix_F[0, 0], rel=1e-5)
    pts = np.array([[0.5, 0.15], [0.5, 0.3], [1.0, 0.1], [0.1, 0.5]])
    e1, e2 = s1.field_at(pts), s2.field_at(pts)
    np.testing.assert_allclose(e1, e2, atol=1e-4 * np.abs(e2).max())


@pytest.mark.parametrize("eps_l", [5.0, 80.0])
def test_grounded_small_sphere_in_an_applied_field_over_a_layer(eps_l):
    # Grounded plane, a layer (thickness t, eps_l) on it, medium above, applied field E0 in the
    # medium: the unperturbed potential is piecewise linear with D_z continuous,
    # phi0(h) = -E0 (t / eps_l + (h - t)) at a height h above the layer (common practice, no
    # source). A small grounded sphere (radius a) there takes the charge
    # Q = -4 pi eps0 phi0(h) / (1/a + K): a sphere of capacitance 4 pi eps0 a (docs/references.md
    # item 1) held at 0 in a local potential phi0(h), K the potential its images (film and
    # plane; the series of docs/references.md item 15 repeated, as in test_layer_spectrum:
    # r/(2(h - t)) - (1 - r^2) sum_n r^n / (2h + 2nt), r = (1 - eps_l)/(1 + eps_l), from memory)
    # give per unit charge at its centre. The uniform part of the field induces only a dipole;
    # what is left is of order (a / h)^3 ~ 1e-9 (common practice).
    e0, t, h, a = 1e3, 0.5, 1.0, 1e-3
    layout = Layout(
        (driven("sphere", geo.sphere(a, h), 0.0),),
        ground_plane=True,
        applied_field_V_per_m=e0,
        layers=(PlanarLayer("layer", eps_l, 0.0, t),),
    )
    sol = solve_axisymmetric(layout, rel_accuracy=1e-6)
    phi0 = -e0 * (t / eps_l + (h - t))
    r = (1 - eps_l) / (1 + eps_l)
    n = np.arange(20000)  # |r| <= 0.976: the tail is below 1e-200
    images = r / (2 * (h - t)) - (1 - r * r) * np.sum(r**n / (2 * h + 2 * n * t))
    assert sol.charges_C[0] == pytest.approx(
        -4 * math.pi * EPS0 * phi0 / (1 / a + images), rel=1e-7
    )
    # far from the sphere (its charge and image form a dipole ~1 V m: ~1e-8 relative at r = 50)
    # the field is E0 above and E0 / eps_l in the layer
    far = np.array([[50.0, 0.25], [50.0, 2.0]])
    np.testing.assert_allclose(sol.field_at(far)[:, 1], [e0 / eps_l, e0], rtol=1e-6)
    np.testing.assert_allclose(sol.potential_at(far)[1], -e0 * (t / eps_l + 1.5), rtol=1e-6)

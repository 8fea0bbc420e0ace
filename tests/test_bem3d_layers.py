"""Planar layer stacks in the 3-D panel solver: published closed forms, the axisymmetric
layered solver on a round pad, field continuity across interfaces, the remainder tables."""

from __future__ import annotations

import math

import numpy as np
import pytest

from elopt.physics import geometry as geo
from elopt.physics.bem3d import RevolvedSurface, revolved_layout, solve_3d, sphere
from elopt.physics.bem3d.layer_tables import TABLE_REL_TOL, build_table
from elopt.physics.bem3d.layered_green import LayeredBackground
from elopt.physics.bem3d.mesh import TriangleMesh
from elopt.physics.bem3d.operators import dense_matrix
from elopt.physics.bem3d.panels import PanelSet, discretise
from elopt.physics.bem_axi.solve import solve_axisymmetric
from elopt.physics.errors import GeometryError
from elopt.physics.geometry import Arc, Curve
from elopt.physics.layout import EPS0_F_PER_M as EPS0
from elopt.physics.layout import Layout, driven
from elopt.physics.media import LayerStack, PlanarLayer

E_LO = 4.0
HALF = (PlanarLayer("lower", E_LO, -math.inf, 0.0),)
# A pad on a board over a ground plane under an air gap and a cover. Heights are powers of two
# so that the pad lies exactly on the board's face in both solvers.
BOARD, AIR, COVER, PAD_R = 2.0**-9, 2.0**-11, 2.0**-9, 2.0**-7
BOARD_STACK = (
    PlanarLayer("board", 4.4, 0.0, BOARD),
    PlanarLayer("cover", 3.0, BOARD + AIR, BOARD + AIR + COVER),
)


def _split_sphere(radius: float) -> Curve:
    """A sphere as two arcs meeting at the equator z = 0, so mesh edges follow the interface."""
    return Curve(
        (
            Arc((0.0, 0.0), radius, -math.pi / 2, 0.0),
            Arc((0.0, 0.0), radius, 0.0, math.pi / 2),
        )
    )


def _solve(layout: Layout, max_level: int = 1, **kw):
    return solve_3d(layout, rel_accuracy=1e-3, max_level=max_level, strict=False, **kw)


def test_sphere_centred_on_interface_of_two_half_spaces():
    # docs/references.md item 12: C = 2 pi (eps1 + eps2) eps0 R (exact).
    layout = Layout((driven("ball", _split_sphere(1.0), 1.0),), layers=HALF)
    sol = _solve(revolved_layout(layout, h_m=0.3))
    exact = 2 * math.pi * (1.0 + E_LO) * EPS0
    err = abs(sol.capacitance_matrix_F[0, 0] / exact - 1)
    assert err <= sol.rel_error_estimate
    assert abs(sol.capacitance_matrix_extrapolated_F[0, 0] / exact - 1) < 0.1 * err
    # the same item: the field V/R is radial and equal on both hemispheres while the free
    # charge differs in the ratio eps1 : eps2 (surface fields use the permittivity outside)
    samples = sol.surface_samples("ball")
    upper = samples.points_m[:, 2] > 0
    mean = {}
    for name, sel in (("upper", upper), ("lower", ~upper)):
        w = samples.area_m2[sel]
        field = np.average(samples.field_V_per_m[sel], weights=w)
        assert abs(field - 1.0) <= sol.rel_error_estimate
        mean[name] = np.average(samples.sigma_C_per_m2[sel], weights=w)
    assert abs(mean["lower"] / mean["upper"] / E_LO - 1) <= sol.rel_error_estimate


def test_thin_disk_in_interface_plane():
    # docs/references.md item 13: C = 4 (eps1 + eps2) eps0 R (exact for zero thickness).
    layout = Layout((driven("disk", geo.disk(1.0, 0.0), 1.0),), layers=HALF)
    sol = _solve(revolved_layout(layout, h_m=0.3))
    exact = 4 * (1.0 + E_LO) * EPS0
    assert abs(sol.capacitance_matrix_F[0, 0] / exact - 1) <= sol.rel_error_estimate


def _sphere_over_half_space_by_images(a: float, h: float, eps1: float, eps2: float) -> float:
    """Capacitance of a sphere (radius a, centre h above the interface) in eps1 over a
    half-space eps2: the charge q at the centre, its image -K q (K = (eps2 - eps1)/(eps2 +
    eps1), docs/references.md item 15) and the Kelvin image of every outside charge in the
    sphere, iterated (the image method of item 6, which it reproduces for K = 1)."""
    k = (eps2 - eps1) / (eps2 + eps1)
    q, b, total = 1.0, 0.0, 1.0
    for _ in range(400):
        d = 2 * h - b
        q, b = k * a * q / d, a * a / d
        total += q
    return 4 * math.pi * EPS0 * eps1 * a * total


def test_image_series_reproduces_the_grounded_plane_formula():
    # docs/references.md item 6: C = 4 pi eps0 R sinh(alpha) sum 1/sinh(n alpha) for K = 1.
    a, h = 1.0, 2.0
    alpha = math.acosh(h / a)
    item6 = (
        4 * math.pi * EPS0 * a * sum(math.sinh(alpha) / math.sinh(n * alpha) for n in range(1, 400))
    )
    assert _sphere_over_half_space_by_images(a, h, 1.0, 1e300) == pytest.approx(item6, rel=1e-12)


def test_sphere_above_dielectric_half_space_by_images():
    a, h = 1.0, 2.0
    exact = _sphere_over_half_space_by_images(a, h, 1.0, E_LO)
    sol = _solve(Layout((driven("ball", sphere(a, (0.0, 0.0, h)), 1.0),), layers=HALF))
    err = abs(sol.capacitance_matrix_F[0, 0] / exact - 1)
    assert err <= sol.rel_error_estimate
    # against the homogeneous answer the half-space matters far beyond the error
    assert abs(exact / (4 * math.pi * EPS0 * a) - 1) > 10 * sol.rel_error_estimate


@pytest.fixture(scope="module")
def pad_pair():
    layout = Layout(
        (driven("pad", geo.disk(PAD_R, BOARD), 1.0),), ground_plane=True, layers=BOARD_STACK
    )
    axi = solve_axisymmetric(layout, rel_accuracy=1e-6)
    sol3 = _solve(revolved_layout(layout, h_m=PAD_R / 4))
    return axi, sol3


@pytest.mark.slow
def test_pad_on_board_under_cover_agrees_with_axisymmetric(pad_pair):
    # Two independent discretisations of one layered problem (the axisymmetric layered solver
    # of this project, rings of high-order panels) agree within the 3-D estimate.
    axi, sol3 = pad_pair
    c_axi = axi.capacitance_matrix_F[0, 0]
    assert abs(sol3.capacitance_matrix_F[0, 0] / c_axi - 1) <= sol3.rel_error_estimate
    # potential and field at points in the board, the gap and the cover (the axisymmetric
    # solver evaluates no deeper)
    heights = [0.3 * BOARD, BOARD + 0.5 * AIR, BOARD + AIR + 0.7 * COVER]
    rz = np.array([[r * PAD_R, z] for z in heights for r in (0.3, 1.3, 2.5)])
    phi = 0.4
    xyz = np.column_stack([rz[:, 0] * math.cos(phi), rz[:, 0] * math.sin(phi), rz[:, 1]])
    v_gap = np.abs(sol3.potential_at(xyz) - axi.potential_at(rz))
    assert np.max(v_gap) <= sol3.rel_error_estimate
    e3 = sol3.field_at(xyz)
    e_axi = axi.field_at(rz)
    e_r3 = e3[:, 0] * math.cos(phi) + e3[:, 1] * math.sin(phi)
    scale = np.hypot(e_axi[:, 0], e_axi[:, 1])
    assert np.max(np.abs(e_r3 - e_axi[:, 0]) / scale) <= 3 * sol3.rel_error_estimate
    assert np.max(np.abs(e3[:, 2] - e_axi[:, 1]) / scale) <= 3 * sol3.rel_error_estimate


def _jumps(field, face_z: float, xy: np.ndarray, eps_below: float, eps_above: float):
    """Largest jumps of E_t and D_n across z = face_z relative to |E|, and of E_n (common
    practice, no source: a charge-free interface keeps tangential E and normal D continuous)."""
    step = 1e-10
    e_lo = field(np.column_stack([xy, np.full(len(xy), face_z - step)]))
    e_hi = field(np.column_stack([xy, np.full(len(xy), face_z + step)]))
    scale = np.linalg.norm(e_hi, axis=1)
    jump_t = np.linalg.norm(e_hi[:, :2] - e_lo[:, :2], axis=1) / scale
    jump_n = np.abs(eps_above * e_hi[:, 2] - eps_below * e_lo[:, 2]) / (eps_above * scale)
    jump_e = np.abs(e_hi[:, 2] - e_lo[:, 2]) / scale
    return float(np.max(jump_t)), float(np.max(jump_n)), float(np.max(jump_e))


def test_layered_kernel_is_continuous_across_the_faces_of_the_gap():
    # A point-like source (a 1e-7 m triangle) at several heights in the gap; on either side
    # of each face the potential, E_t and D_n agree to the remainder tables' accuracy.
    stack = LayerStack(BOARD_STACK, 1.0, True)
    rho = np.array([1e-4, 5e-4, 2e-3, 1e-2])
    xy = np.column_stack([rho * math.cos(0.7), rho * math.sin(0.7)])
    for z_src in (BOARD, BOARD + 0.3 * AIR, BOARD + AIR * 0.9):
        h = 1e-7
        vertices = np.array([[0, 0, z_src], [h, 0, z_src], [0, h, z_src]])
        panels = PanelSet(
            TriangleMesh(vertices, np.array([[0, 1, 2]]), False),
            np.zeros(1, dtype=np.int64),
            0,
            True,
            (False,),
            (None,),
        )
        background = LayeredBackground(stack, [(z_src, z_src, "source")], 0.01)
        ones = np.ones((1, 1))

        def field(pts, background=background, panels=panels, ones=ones):
            return -background.potential_and_gradient(panels, ones, pts)[1][:, :, 0]

        for face, below, above in (
            (BOARD, 4.4, 1.0),
            (BOARD + AIR, 1.0, 3.0),
            (BOARD + AIR + COVER, 3.0, 1.0),
        ):
            pot = [
                background.potential_and_gradient(
                    panels, ones, np.column_stack([xy, np.full(len(xy), face + s)])
                )[0][:, 0]
                for s in (-1e-10, 1e-10)
            ]
            assert np.max(np.abs(pot[1] / pot[0] - 1)) < 1e-5
            jump_t, jump_n, jump_e = _jumps(field, face, xy, below, above)
            assert jump_t < 3e-5
            assert jump_n < 3e-5
            assert jump_e > 0.1  # E_n itself jumps: the two sides are really different media


@pytest.mark.slow
def test_solved_fields_are_continuous_across_the_faces_of_the_gap(pad_pair):
    # The discrete solution: within its own error estimate (each side integrates its own
    # smooth remainder per panel, see elopt.physics.bem3d.layered_green.RULE_FACTORS).
    _, sol3 = pad_pair
    xy = np.array([[1.2, 0.3], [0.2, 0.1], [2.0, -1.5], [0.0, 3.0]]) * PAD_R
    outside = xy[np.hypot(xy[:, 0], xy[:, 1]) > 1.05 * PAD_R]
    for face, xy_face, below, above in (
        (BOARD, outside, 4.4, 1.0),
        (BOARD + AIR, xy, 1.0, 3.0),
        (BOARD + AIR + COVER, xy, 3.0, 1.0),
    ):
        jump_t, jump_n, jump_e = _jumps(sol3.field_at, face, xy_face, below, above)
        assert jump_t < sol3.rel_error_estimate
        assert jump_n < sol3.rel_error_estimate
        assert jump_e > 0.1


def test_field_continuity_across_a_half_space_interface():
    # two half-spaces: exact images, the same panel integrals on both sides
    sol = _solve(
        Layout((driven("ball", sphere(1.0, (0.3, 0.0, 1.5)), 1.0),), layers=HALF), max_level=0
    )
    xy = np.array([[0.0, 0.0], [1.0, 0.5], [-2.0, 1.0]])
    jump_t, jump_n, jump_e = _jumps(sol.field_at, 0.0, xy, E_LO, 1.0)
    assert jump_t < 1e-6
    assert jump_n < 1e-6
    assert jump_e > 0.5


@pytest.mark.slow
def test_points_below_the_ground_plane_are_refused(pad_pair):
    _, sol3 = pad_pair
    with pytest.raises(GeometryError, match="below the grounded plane"):
        sol3.potential_at(np.array([[0.0, 0.0, -1e-4]]))


def test_remainder_table_against_the_image_series_of_a_grounded_film():
    # A film (eps_f, thickness d) on a grounded plane, sources above it in air: the reflection
    # function minus its limit r is -(1 - r^2) sum_n r^n e^{-2 (n+1) k d}, so the remainder is
    # the image series -(1 - r^2) sum_n r^n / sqrt(rho^2 + (a + 2 (n + 1) d)^2) (images of
    # docs/references.md item 15 in the film's two faces, the plane's with coefficient -1).
    eps_f, d = 4.0, 1e-3
    stack = LayerStack((PlanarLayer("film", eps_f, 0.0, d),), 1.0, True)
    background = LayeredBackground(stack, [(2e-3, 4e-3, "test")], 0.02)
    s = int(background.conductor_slab[0])
    _, (placement,) = background.slab_terms(s, s)
    rho_max, a_min, a_max = 0.03, 2e-3, 6e-3
    table = build_table(placement.term, rho_max, a_min, a_max, 0.02)
    assert table.error <= TABLE_REL_TOL
    r = (1.0 - eps_f) / (1.0 + eps_f)
    rng = np.random.default_rng(7)
    rho = rng.uniform(0.0, rho_max, 4000)
    a = rng.uniform(a_min, a_max, 4000)
    n = np.arange(400)[:, None]
    dist = np.hypot(rho, a + 2 * (n + 1) * d)
    series = -(1 - r * r) * np.sum(r**n / dist, axis=0)
    d_rho = (1 - r * r) * np.sum(r**n * rho / dist**3, axis=0)
    d_a = (1 - r * r) * np.sum(r**n * (a + 2 * (n + 1) * d) / dist**3, axis=0)
    value, t_rho, t_a = table.evaluate(rho, a)
    scale = np.max(np.abs(series))
    # 1e-2 of the finest accuracy the solver is asked for (1e-5): interpolation below 1e-7
    assert np.max(np.abs(value - series)) / scale < 1e-7
    assert np.max(np.abs(t_rho - d_rho)) / np.max(np.abs(d_rho)) < 1e-5
    assert np.max(np.abs(t_a - d_a)) / np.max(np.abs(d_a)) < 1e-5


@pytest.mark.slow
def test_remainder_quadrature_per_panel_is_converged():
    # The smooth remainder is integrated per target-panel pair by a rule chosen from its
    # length; much finer rules must not move the collocation matrix beyond 1e-4 of its scale,
    # while the centroid alone (one point per panel) does move it on a coarse mesh.
    layout = revolved_layout(
        Layout(
            (driven("pad", geo.disk(PAD_R, BOARD), 1.0),), ground_plane=True, layers=BOARD_STACK
        ),
        h_m=PAD_R / 4,
    )
    panels = discretise(layout, 0)
    rhs = np.ones(panels.n)
    charge = {}
    for name, factors in (
        ("auto", None),
        ("fine", (64.0, 16.0, 6.0)),
        ("centroid", (0.0, 0.0, 0.0)),
    ):
        if factors is not None:
            panels.background.factors = factors
        sigma = np.linalg.solve(dense_matrix(panels), rhs)
        charge[name] = float(sigma @ panels.mesh.areas_m2)
    assert abs(charge["auto"] / charge["fine"] - 1) < 1e-4
    assert abs(charge["centroid"] / charge["fine"] - 1) > abs(charge["auto"] / charge["fine"] - 1)


def test_fast_method_with_layers_agrees_with_dense():
    # Self-consistency (common practice, no source): the compressed layered path
    # (tests/test_bem3d_layers_fast.py) moves C by a fraction of its tolerance 3e-4.
    layout = Layout((driven("ball", sphere(1.0, (0.0, 0.0, 2.0)), 1.0),), layers=HALF)
    c = [
        solve_3d(layout, method=m, max_level=0, strict=False).capacitance_matrix_F[0, 0]
        for m in ("fast", "dense")
    ]
    assert c[0] == pytest.approx(c[1], rel=3e-4)


def test_applied_field_with_layers_is_refused():
    layout = Layout(
        (driven("ball", sphere(1.0, (0.0, 0.0, 2.0)), 1.0),),
        layers=HALF,
        applied_field_V_per_m=1.0,
    )
    with pytest.raises(GeometryError, match="applied field"):
        solve_3d(layout, max_level=0, strict=False)


def test_conductor_across_an_interface_of_a_stack_is_refused():
    layout = Layout(
        (driven("ball", sphere(0.4e-3, (0.0, 0.0, BOARD)), 1.0),),
        ground_plane=True,
        layers=BOARD_STACK,
    )
    with pytest.raises(GeometryError, match="across the layer interface"):
        solve_3d(layout, max_level=0, strict=False)


def test_revolved_surface_is_used_for_the_pad():
    # guards the fixture: the pad is an open revolved sheet lying in the board's face
    layout = revolved_layout(
        Layout(
            (driven("pad", geo.disk(PAD_R, BOARD), 1.0),), ground_plane=True, layers=BOARD_STACK
        ),
        h_m=PAD_R / 4,
    )
    shape = layout.conductors[0].shape
    assert isinstance(shape, RevolvedSurface) and not shape.closed
    z = shape.mesh(0).vertices_m[:, 2]
    assert np.all(z == BOARD)


@pytest.mark.slow
def test_conductors_in_different_slabs_are_reciprocal():
    # A pad on the board under the cover and a grounded ball above the cover: the mutual
    # capacitances come from different kernel blocks (sources in the gap seen from the air
    # and the reverse); Green's reciprocity (any text) makes C symmetric, so any asymmetry is
    # discretisation only and must sit far below the solver's own estimate.
    top = BOARD + AIR + COVER
    layout = Layout(
        (
            driven("pad", geo.disk(PAD_R, BOARD), 1.0),
            driven("finger", geo.sphere(PAD_R, top + 1.5 * PAD_R), 0.0),
        ),
        ground_plane=True,
        layers=BOARD_STACK,
    )
    sol = _solve(revolved_layout(layout, h_m=PAD_R / 3))
    c = sol.capacitance_matrix_F
    assert c[0, 1] < 0
    assert abs(c[0, 1] - c[1, 0]) / math.sqrt(c[0, 0] * c[1, 1]) < 0.01 * sol.rel_error_estimate

"""Mirror-symmetric solves and the mirror-symmetric, equal-area meshes of rounded solids."""

from __future__ import annotations

import math

import numpy as np
import pytest

from elopt.physics.bem3d import BoxSurface, FrameSurface, solve_3d, sphere
from elopt.physics.bem3d.checks import check_surface
from elopt.physics.bem3d.generators import box_mesh, secant_factor
from elopt.physics.bem3d.hmatrix import HMatrix, MirrorFold, dense_rows
from elopt.physics.bem3d.panels import discretise
from elopt.physics.bem3d.symmetry import mirror_symmetry, orbit_fold, reduced_matrix
from elopt.physics.electrodes.target_tilt import tilted_layout
from elopt.physics.layout import EPS0_F_PER_M, Layout, driven

MM = 1e-3


def _pad_layout(tilt_rad: float = 0.0, center_x_m: float = 0.0) -> Layout:
    kw = {"fillet_m": 0.1 * MM, "arc_steps": 2, "secant": True, "centred": True}
    pad = BoxSurface(
        (2 * MM, 1.5 * MM, 0.4 * MM), 0.8 * MM, center_m=(center_x_m, 0, 0.7 * MM), **kw
    )
    guard = FrameSurface(
        (4.2 * MM, 3.7 * MM), (2.6 * MM, 2.1 * MM), 0.5 * MM, 0.4 * MM, 0.8 * MM, **kw
    )
    layout = Layout((driven("pad", pad, 1.0), driven("guard", guard, 1.0)), ground_plane=True)
    return tilted_layout(layout, tilt_rad, -1.0 * MM)


@pytest.mark.parametrize(("tilt_rad", "planes"), [(0.0, ("x", "y")), (math.radians(1.0), ("y",))])
def test_symmetric_solve_equals_the_full_solve(tilt_rad, planes):
    # The reduced system is the full one restricted to symmetric densities, which every
    # excitation here has: both solves must agree to round-off.
    layout = _pad_layout(tilt_rad)
    panels = discretise(layout, 0)
    sym = mirror_symmetry(panels)
    assert sym is not None and sym.planes == planes
    assert sym.n_reduced * len(sym.images) == panels.n
    full = solve_3d(layout, rel_accuracy=0.5, max_level=0, method="dense", symmetry=False)
    half = solve_3d(layout, rel_accuracy=0.5, max_level=0, method="dense")
    c = full.capacitance_matrix_F
    assert np.allclose(half.capacitance_matrix_F, c, rtol=1e-10, atol=1e-10 * abs(c[0, 0]))
    assert np.allclose(half.sigma_C_per_m2, full.sigma_C_per_m2, rtol=1e-8, atol=0)


def test_panels_on_a_mirror_plane_count_once():
    # The icosphere has faces that are their own mirror image: their orbit has fewer members
    # than the group. C of a sphere is 4 pi eps0 R (e.g. Jackson, Classical Electrodynamics,
    # 3rd ed., sec. 1.11); the symmetric solve must reproduce the full one on the same mesh.
    layout = Layout((driven("ball", sphere(0.02, subdivisions=2), 1.0),))
    sym = mirror_symmetry(discretise(layout, 0))
    assert sym is not None and sym.planes == ("x", "y")
    assert sym.n_reduced * 4 > discretise(layout, 0).n
    full = solve_3d(layout, rel_accuracy=0.5, max_level=0, method="dense", symmetry=False)
    half = solve_3d(layout, rel_accuracy=0.5, max_level=0, method="dense")
    assert half.capacitance_matrix_F[0, 0] == pytest.approx(
        full.capacitance_matrix_F[0, 0], rel=1e-11
    )
    assert half.capacitance_matrix_F[0, 0] == pytest.approx(
        4 * math.pi * EPS0_F_PER_M * 0.02, rel=5e-3
    )


def test_asymmetric_layouts_are_solved_in_full():
    # Pad off centre in x: only the y mirror remains.
    sym = mirror_symmetry(discretise(_pad_layout(center_x_m=0.05 * MM), 0))
    assert sym is not None and sym.planes == ("y",)
    # A tensor grid with an odd cell count across x = 0 splits its middle quads along one
    # diagonal: not mirror symmetric, so no reduction is made.
    box = BoxSurface((1.0, 0.8, 0.6), 0.7, center_m=(0.0, 0.0, 1.0))
    assert (
        mirror_symmetry(discretise(Layout((driven("b", box, 1.0),), ground_plane=True), 0)) is None
    )


def _rounded_box_volume(a: float, b: float, t: float, f: float) -> float:
    # Box a x b x t with every edge rounded by f: the box less (4 - pi) f^2 per unit length of
    # straight edge and 8 - 4 pi / 3 times f^3 for the corners (elementary geometry).
    edges = (4 - math.pi) * f**2 * ((a - 2 * f) + (b - 2 * f) + (t - 2 * f))
    return a * b * t - edges - (8 - 4 * math.pi / 3) * f**3


def test_equal_area_fillets_match_the_rounded_volume_far_better():
    a, b, t, f = 3.0, 2.0, 0.5, 0.2
    exact = _rounded_box_volume(a, b, t, f)
    errors = []
    for secant in (False, True):
        m = box_mesh((a, b, t), 0.5, 0, fillet_m=f, arc_steps=3, secant=secant, centred=True)
        check_surface(m, "box")
        errors.append(abs(m.volume_m3 - exact) / (a * b * t - exact))
    # Relative to the volume the rounding removes: the inscribed polygon cuts the arcs'
    # corners (4 % here), the equal-area one much less (0.6 %: the steps next to the arcs).
    assert errors[1] < 0.25 * errors[0]


def test_secant_factor_gives_chords_the_arc_area():
    # A quarter circle of radius 1 cut into m chords whose end vertices stay at radius 1 and
    # inner ones move to k: the fan of triangles (area r_i r_(i+1) sin(t) / 2 each, elementary
    # geometry) must have the quarter's area pi / 4.
    for m in (2, 3, 4, 8, 64):
        t = 0.5 * math.pi / m
        r = np.full(m + 1, secant_factor(t))
        r[[0, -1]] = 1.0
        assert 0.5 * math.sin(t) * np.sum(r[:-1] * r[1:]) == pytest.approx(math.pi / 4, rel=1e-12)


def test_centred_meshes_are_mirror_symmetric_at_every_level():
    for level in (0, 1):
        m = box_mesh((1.0, 0.7, 0.3), 0.45, level, fillet_m=0.05, centred=True, secant=True)
        c = m.centroids_m
        for axis in (0, 1):
            flip = np.ones(3)
            flip[axis] = -1
            d = np.linalg.norm(c[:, None, :] * flip - c[None, :, :], axis=2).min(axis=1)
            assert d.max() < 1e-12


def test_compressed_symmetric_solve_agrees_with_the_full_compressed_one():
    # Same compressed equations on the orbits and on every panel: agreement to the
    # compression and GMRES tolerances asked (1e-6 and 5e-6).
    layout = _pad_layout(math.radians(1.0))
    kw = {"rel_accuracy": 1e-4, "max_level": 0, "method": "fast", "aca_tol": 1e-6}
    full = solve_3d(layout, symmetry=False, **kw)
    half = solve_3d(layout, **kw)
    assert mirror_symmetry(discretise(layout, 0)) is not None  # so the orbits are solved
    assert half.levels[0].stats.n_panels == full.levels[0].stats.n_panels
    c = full.capacitance_matrix_F
    assert np.allclose(half.capacitance_matrix_F, c, rtol=0, atol=2e-5 * abs(c[0, 0]))


@pytest.mark.parametrize(
    ("layout", "tol"),
    [
        (_pad_layout(), 1e-4),
        (_pad_layout(math.radians(1.0)), 1e-4),
        (_pad_layout(math.radians(1.0)), 1e-6),
        (Layout((driven("ball", sphere(0.02, subdivisions=3), 1.0),)), 1e-6),
    ],
)
def test_folded_compressed_matrix_equals_the_dense_orbit_matrix(layout, tol):
    # The (R, R) compressed matrix with each orbit's columns summed in its entries (targets
    # and sources in one quadrant, mirrored targets) against the same entries formed densely
    # on every panel and summed per orbit afterwards (no reflection used). ACA + SVD
    # truncation to tol per block bound the error by tol ||A||_F in the Frobenius norm (ACA's
    # stopping test estimates it: measured up to 1.6 tol here, as without the fold). And
    # against the dense orbit matrix of another code path (reduced_matrix: other quadrature
    # rules far away, within about 5e-6 more).
    panels = discretise(layout, 0)
    sym = mirror_symmetry(panels)
    assert sym is not None
    centroids = panels.kernel_arrays[1]
    rows = sym.quadrant_members(centroids)
    axes = ["xy".index(p) for p in sym.planes]
    assert np.all(centroids[rows][:, axes] >= -1e-12)
    assert np.array_equal(sym.orbit[rows], np.arange(sym.n_reduced))
    fold = MirrorFold(rows, sym.reflection_signs(), sym.column_weights(rows))
    h = HMatrix(panels, tol=tol, targets=centroids[rows], fold=fold)
    assert (h.m, h.n) == (sym.n_reduced, sym.n_reduced)
    eye = np.eye(sym.n_reduced)
    compressed = np.stack([h.matvec(e) for e in eye], axis=1)
    assert np.allclose(np.stack([h.rmatvec(e) for e in eye]), compressed, rtol=0, atol=1e-15)
    same_entries = (orbit_fold(sym).T @ dense_rows(panels, centroids[rows]).T).T
    norm = np.linalg.norm(same_entries)
    assert np.linalg.norm(compressed - same_entries) < 2 * tol * norm
    other_path = reduced_matrix(panels, sym)
    assert np.linalg.norm(compressed - other_path) < (2 * tol + 1e-5) * norm


@pytest.mark.parametrize("tilt_rad", [0.0, math.radians(1.0)])
def test_plane_densities_on_one_point_per_orbit_equal_the_full_evaluation(tilt_rad):
    sol = solve_3d(_pad_layout(tilt_rad), rel_accuracy=0.5, max_level=0)
    xy, _ = sol.plane_quadrature()
    short = sol.plane_unit_charge_densities()
    full = sol._plane_unit_density(xy)
    assert np.allclose(short, full, rtol=1e-9, atol=1e-9 * np.abs(full).max())

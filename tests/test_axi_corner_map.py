"""Mapped corner panels of the conductors-only coarse rule (``mesh.KIND_MAPPED``).

At a right-angle edge (density ~ s^(-1/3)) and a free sheet edge (s^(-1/2)) the panel touching
the corner runs along its chord as u^3 / u^2 (u in [0, 1] from the corner), and interpolates
sigma times its length element, a polynomial in u there (Kress 1990; Elschner & Graham 1995,
docs/references.md item 22). The checks: the panel's nodes and weights, the thin disk's
capacitance and edge density (published), and, for right-angle edges where no published
value applies, agreement with the project's own tight solve (internal consistency only).
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from reference_values import disk_capacitance_F, disk_density_C_per_m2

from elopt.physics import geometry as geo
from elopt.physics.bem_axi.mesh import KIND_MAPPED, build_mesh, panel_geometry
from elopt.physics.bem_axi.solution import panel_densities
from elopt.physics.bem_axi.solve import (
    COARSE_ENTRY_ERROR,
    CONDUCTOR_COARSE_RULE,
    solve_axisymmetric,
    solve_level,
)
from elopt.physics.electrodes.guarded_disk import GuardedDisk, GuardedDiskParams
from elopt.physics.layout import Layout, driven
from elopt.physics.refinement import relative_change

RADIUS_M = 0.01


def _disk() -> Layout:
    return Layout((driven("disk", geo.disk(RADIUS_M), 1.0),))


@pytest.mark.parametrize("level", [0, 1])
def test_the_edge_panel_is_mapped_and_its_nodes_follow_the_map(level):
    mesh = build_mesh(_disk(), level, 4, CONDUCTOR_COARSE_RULE)
    (edge,) = np.nonzero(mesh.kind == KIND_MAPPED)[0]  # one free edge, one mapped panel
    assert mesh.at_corner[edge]
    nodes = slice(4 * edge, 4 * edge + 4)
    a, b = mesh.coef[edge, 0:2], mesh.coef[edge, 2:4]
    corner = b if mesh.coef[edge, 4] < 0 else a
    assert corner[0] == pytest.approx(RADIUS_M)
    # Chord fractions from the corner are u^2 at the Gauss nodes (project rule, exact map).
    x = np.polynomial.legendre.leggauss(4)[0]
    u = np.sort(0.5 * (1.0 + x))
    dist = np.sort(np.linalg.norm(mesh.points_m[nodes] - corner, axis=1))
    np.testing.assert_allclose(dist / np.linalg.norm(b - a), u**2, rtol=1e-12)
    assert mesh.weights_m[nodes].sum() == pytest.approx(np.linalg.norm(b - a), rel=1e-12)
    np.testing.assert_array_equal(mesh.interp_jac[nodes], mesh.jac_m[nodes])
    assert np.all(np.diff(mesh.arc_m[nodes]) > 0)


def test_thin_disk_capacitance_and_edge_density_on_the_mapped_panel():
    # C = 8 eps0 R, density over both faces 4 eps0 V / (pi sqrt(R^2 - r^2)) (docs/references.md
    # item 2). Level 0 of the mapped rule: 8 unknowns. Measured: C 3.0e-7 off (the graded rule
    # without the map: 1.2e-4 at 16 unknowns), the density on the edge panel 3.1e-4; sigma
    # itself interpolated there instead of sigma times the length element: C 0.86 off, the
    # density 0.41.
    layout = _disk()
    mesh = build_mesh(layout, 0, 4, CONDUCTOR_COARSE_RULE)
    assert mesh.n_nodes == 8
    level = solve_level(layout, mesh, COARSE_ENTRY_ERROR)
    assert level.capacitance_F[0, 0] == pytest.approx(disk_capacitance_F(RADIUS_M), rel=1e-6)
    (edge,) = np.nonzero(mesh.kind == KIND_MAPPED)[0]
    tau = np.linspace(-0.9, 0.9, 7)
    sigma = panel_densities(mesh, level.sigma_unit[:, 0], np.tile(tau, (mesh.n_panels, 1)))[edge]
    pts, _ = panel_geometry(mesh.kind[edge : edge + 1], mesh.coef[edge : edge + 1], tau[None])
    exact = disk_density_C_per_m2(pts[0, :, 0], RADIUS_M)
    np.testing.assert_allclose(sigma, exact, rtol=1e-3)
    # The swapped interpolation (sigma as the polynomial) is far off on the same nodes.
    wrong = dataclasses.replace(mesh, interp_jac=np.ones(mesh.n_nodes))
    assert (
        abs(
            solve_level(layout, wrong, COARSE_ENTRY_ERROR).capacitance_F[0, 0]
            / (disk_capacitance_F(RADIUS_M))
            - 1
        )
        > 0.1
    )


def test_right_angle_edges_agree_with_the_tight_solve():
    # Internal consistency only (no published value for a guarded probe): the sharp guarded
    # probe (six right-angle edges, twelve mapped panels) at levels 0 and 1 of the mapped rule
    # against the project's solve at 1e-9 (ratio-2 grading, 8 nodes per panel, no map).
    # Measured: 1.7e-5 (72 unknowns) and 1.3e-6 (144) of sqrt(C_ii C_jj).
    layout = GuardedDisk().build(
        GuardedDiskParams(
            sensor_radius_mm=2.0,
            guard_gap_mm=0.1,
            guard_width_mm=1.9,
            thickness_mm=0.5,
            fillet_mm=0.0,
            standoff_mm=0.5,
            drive_V=1.0,
        )
    )
    ref = solve_axisymmetric(layout, rel_accuracy=1e-9).capacitance_matrix_F
    errors = []
    for lv in (0, 1):
        mesh = build_mesh(layout, lv, 4, CONDUCTOR_COARSE_RULE)
        assert np.count_nonzero(mesh.kind == KIND_MAPPED) == 12
        c = solve_level(layout, mesh, COARSE_ENTRY_ERROR).capacitance_F
        errors.append(relative_change(c, ref))
    assert errors[0] < 5e-5 and errors[1] < 5e-6

"""The compressed (hierarchical) path for planar layers in the 3-D panel solver: agreement
with the dense layered path, a published closed form at a size only the fast path solves, its
memory estimate, and method selection."""

from __future__ import annotations

import numpy as np
import pytest
from test_bem3d_layers import BOARD, BOARD_STACK, E_LO, HALF, PAD_R

from elopt.physics import geometry as geo
from elopt.physics.bem3d import revolved_layout, solve_3d, sphere
from elopt.physics.bem3d.hmatrix_layered import (
    LayeredFastOperator,
    compressed_integrals,
    layered_fast_bytes,
)
from elopt.physics.bem3d.operators import SolveStats, dense_matrix
from elopt.physics.bem3d.panels import discretise
from elopt.physics.bem3d.solve import DENSE_MAX_PANELS, estimate_memory_bytes
from elopt.physics.errors import SolverError
from elopt.physics.layout import EPS0_F_PER_M as EPS0
from elopt.physics.layout import Layout, driven

TOL = 1e-5


def _pad_layout() -> Layout:
    # a pad on a board over a ground plane under an air gap and a cover, as test_bem3d_layers
    pad = Layout(
        (driven("pad", geo.disk(PAD_R, BOARD), 1.0),), ground_plane=True, layers=BOARD_STACK
    )
    return revolved_layout(pad, h_m=PAD_R / 4)


def _ball_layout() -> Layout:
    return Layout((driven("ball", sphere(0.5, (0.2, -0.1, 0.7)), 1.0),), layers=HALF)


@pytest.fixture(scope="module", params=["pad on a board stack", "ball over a half-space"])
def operator_pair(request):
    layout = _pad_layout() if request.param.startswith("pad") else _ball_layout()
    panels = discretise(layout, 1)
    return panels, dense_matrix(panels), LayeredFastOperator(panels, tol=TOL)


def test_compressed_product_agrees_with_the_dense_layered_matrix(operator_pair):
    # Self-consistency (common practice, no source): the compressed matrix approximates the
    # dense one blockwise to the relative tolerance TOL (measured: 1.2 TOL on the pad, whose
    # low-rank factors are stored in float32, 0.6 TOL on the ball).
    panels, a, op = operator_pair
    x = np.random.default_rng(3).standard_normal(panels.n)
    y = a @ x
    assert np.linalg.norm(op.matvec(x) - y) / np.linalg.norm(y) < 3 * TOL


def test_compressed_solve_agrees_with_the_dense_solve(operator_pair):
    # Self-consistency (common practice, no source): the total charge of both solves agrees
    # to the compression tolerance (measured: 6e-8 on the pad, 2e-7 on the ball).
    panels, a, op = operator_pair
    rhs = np.ones((panels.n, 1))
    dense = np.linalg.solve(a, rhs[:, 0]) @ panels.mesh.areas_m2
    fast = op.solve(rhs, 1e-8, SolveStats("fast", panels.n))[:, 0] @ panels.mesh.areas_m2
    assert abs(fast / dense - 1) < 10 * TOL


def test_fast_and_dense_solves_of_a_pad_agree():
    # Self-consistency (common practice, no source): solve_3d's capacitance moves by about
    # 0.03-0.06 times its compression tolerance (0.3 * 1e-3 here; solve.py's measurement).
    layout = _pad_layout()
    c = {
        m: solve_3d(layout, rel_accuracy=1e-3, start_level=1, max_level=1, strict=False, method=m)
        for m in ("dense", "fast")
    }
    assert c["fast"].levels[-1].stats.method == "fast"
    ratio = c["fast"].capacitance_matrix_F[0, 0] / c["dense"].capacitance_matrix_F[0, 0]
    assert abs(ratio - 1) < 3e-4


@pytest.mark.slow
def test_disk_in_interface_plane_on_the_fast_path():
    # docs/references.md item 13: C = 4 (eps1 + eps2) eps0 R (exact for zero thickness); the
    # finest level has more than DENSE_MAX_PANELS panels, so "auto" compresses it.
    layout = revolved_layout(Layout((driven("disk", geo.disk(1.0, 0.0), 1.0),), layers=HALF), 0.3)
    sol = solve_3d(layout, rel_accuracy=1e-3, start_level=1, max_level=2, strict=False)
    fine = sol.levels[-1]
    assert fine.panels.n > DENSE_MAX_PANELS
    assert fine.stats.method == "fast"
    exact = 4 * (1.0 + E_LO) * EPS0
    assert abs(sol.capacitance_matrix_F[0, 0] / exact - 1) <= sol.rel_error_estimate


def test_auto_chooses_dense_up_to_the_limit_and_fast_above():
    layout = _pad_layout()
    small = solve_3d(layout, rel_accuracy=1e-3, max_level=0, strict=False)
    assert small.levels[-1].stats.method == "dense"
    big = discretise(layout, 2)
    assert big.n > DENSE_MAX_PANELS
    # the estimate a fast level is planned with is the layered one, far below dense storage
    need = estimate_memory_bytes(big, "fast", 2)
    assert need >= layered_fast_bytes(big)
    assert need < 8 * big.n**2


def test_memory_estimate_bounds_the_stored_operator(operator_pair):
    # The estimate is made before anything is built and must not fall below what is stored.
    panels, _, op = operator_pair
    assert layered_fast_bytes(panels) > op.stored_bytes


def test_a_level_that_does_not_fit_is_refused_in_one_line():
    with pytest.raises(
        SolverError, match=r"would need about .*\(fast solve, planar layers\)"
    ) as info:
        solve_3d(_pad_layout(), max_level=0, method="fast", memory_limit_bytes=10**6, strict=False)
    assert "\n" not in str(info.value)


@pytest.mark.slow
def test_compressed_evaluation_agrees_with_the_direct_sums():
    # Self-consistency (common practice, no source): points just off both faces of the pad
    # (where the pad's own image on the board face is nearest) and above it; the compressed
    # sums at tolerance 1e-6 per block (measured: 3.5e-6 of the largest value at 2074 panels).
    panels = discretise(_pad_layout(), 0)
    c, d = panels.mesh.centroids_m, panels.mesh.diameters_m
    off = (0.05 * d)[:, None] * panels.mesh.normals
    pts = np.concatenate([c + off, c - off, c[:40] + [0.0, 0.0, 2 * BOARD]])
    dens = np.random.default_rng(5).standard_normal((panels.n, 2))
    pot, grad = panels.background.potential_and_gradient(panels, dens, pts)
    cpot, cgrad = compressed_integrals(panels, dens, pts, 1e-6)
    assert np.max(np.abs(cpot - pot)) < 3e-5 * np.max(np.abs(pot))
    assert np.max(np.abs(cgrad - grad)) < 3e-5 * np.max(np.abs(grad))
    dirs = np.concatenate(
        [panels.mesh.normals, -panels.mesh.normals, np.tile([0, 0, 1.0], (40, 1))]
    )
    along = compressed_integrals(panels, dens, pts, 1e-6, dirs)
    assert np.max(np.abs(along - np.einsum("mck,mc->mk", grad, dirs))) < 3e-5 * np.max(np.abs(grad))

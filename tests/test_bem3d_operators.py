"""Panel integrals, the dense and compressed operators, and the two solve paths."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate

from elopt.physics.bem3d import BoxSurface, solve_3d, sphere
from elopt.physics.bem3d import panel_integrals as pint
from elopt.physics.bem3d.hmatrix import HMatrix, apply_once, dense_rows
from elopt.physics.bem3d.operators import dense_matrix
from elopt.physics.bem3d.panels import discretise
from elopt.physics.layout import Layout, driven

TRI = np.array([[0.0, 0.0, 0.0], [1.0, 0.2, 0.1], [0.3, 0.9, -0.2]])


def _reference(p: np.ndarray) -> np.ndarray:
    """integral over TRI of (1/R, grad 1/R) by scipy's adaptive quadrature (Duffy map)."""
    a, b, c = TRI
    jac = np.linalg.norm(np.cross(b - a, c - a))

    def f(v, u, k):
        x = a + u * (b - a) + u * v * (c - b)
        d = p - x
        r = np.linalg.norm(d)
        g = 1.0 / r if k == 0 else -d[k - 1] / r**3
        return g * u * jac

    return np.array(
        [
            integrate.dblquad(f, 0.0, 1.0, 0.0, 1.0, args=(k,), epsabs=1e-12, epsrel=1e-10)[0]
            for k in range(4)
        ]
    )


@pytest.mark.parametrize(
    "point",
    [(0.4, 0.4, 0.5), (0.4, 0.3, 0.02), (2.0, 1.0, -0.3), (-0.5, 0.1, 0.05), (0.5, -0.05, 0.01)],
)
def test_closed_form_matches_adaptive_quadrature(point):
    # Closed form of Wilton et al. (1984) / Graglia (1993) against scipy.integrate.dblquad.
    p = np.array(point)
    out = np.empty(4)
    pint.analytic(p, TRI, out)
    assert np.allclose(out, _reference(p), rtol=1e-7, atol=1e-9)


def test_closed_form_on_the_panel_itself_and_its_edges():
    out = np.empty(4)
    # The self term at the centroid and at a vertex are finite; the principal-value gradient
    # in the plane has no normal part.
    for p in (TRI.mean(axis=0), TRI[1], 0.5 * (TRI[0] + TRI[2]), 2 * TRI[1] - TRI[0]):
        pint.analytic(p.copy(), TRI, out)
        assert np.isfinite(out[0]) and out[0] > 0
    pint.analytic(TRI.mean(axis=0), TRI, out)
    n = np.cross(TRI[1] - TRI[0], TRI[2] - TRI[0])
    assert abs(out[1:] @ n) < 1e-12 * np.linalg.norm(n)
    # Just above and below the centroid the normal field jumps by 4 pi (Gauss's law for a
    # unit density: the 1/(4 pi) is outside these raw integrals).
    un = n / np.linalg.norm(n)
    up, down = np.empty(4), np.empty(4)
    pint.analytic(TRI.mean(axis=0) + 1e-9 * un, TRI, up)
    pint.analytic(TRI.mean(axis=0) - 1e-9 * un, TRI, down)
    assert (down[1:] - up[1:]) @ un == pytest.approx(4 * math.pi, rel=1e-6)


@pytest.mark.parametrize(
    ("bary", "weights", "degree"),
    [(pint.RULE3_BARY, pint.RULE3_W, 2), (pint.RULE7_BARY, pint.RULE7_W, 5)],
)
def test_triangle_rules_are_exact_to_their_degree(bary, weights, degree):
    # integral over the unit triangle of x^i y^j = i! j! / (i + j + 2)! (common practice).
    x, y = bary[:, 1], bary[:, 2]
    for i in range(degree + 1):
        for j in range(degree + 1 - i):
            exact = math.factorial(i) * math.factorial(j) / math.factorial(i + j + 2)
            assert 0.5 * np.sum(weights * x**i * y**j) == pytest.approx(exact, rel=1e-12)


@pytest.mark.parametrize("ground_plane", [False, True])
def test_compressed_matrix_reproduces_the_dense_one(ground_plane):
    surface = BoxSurface((1.0, 1.0, 1.0), 0.25, center_m=(0.0, 0.0, 0.7))
    panels = discretise(Layout((driven("b", surface, 1.0),), ground_plane=ground_plane), 0)
    a = dense_matrix(panels)
    x = np.random.default_rng(3).standard_normal(panels.n)
    h = HMatrix(panels, tol=1e-6)
    assert np.linalg.norm(h.matvec(x) - a @ x) < 2e-6 * np.linalg.norm(a @ x)
    assert h.nbytes < 0.7 * a.nbytes
    # Bit-identical on repeat (a fixed split of the work between threads).
    assert np.array_equal(h.matvec(x), h.matvec(x))


def test_fast_and_dense_solves_agree():
    layout = Layout((driven("ball", sphere(1.0, subdivisions=3), 1.0),))
    dense = solve_3d(layout, method="dense", max_level=0, strict=False)
    fast = solve_3d(layout, method="fast", max_level=0, strict=False, rel_accuracy=1e-5)
    assert fast.levels[0].stats.method == "fast" and dense.levels[0].stats.method == "dense"
    assert fast.capacitance_matrix_F[0, 0] == pytest.approx(
        dense.capacitance_matrix_F[0, 0], rel=1e-6
    )
    assert np.allclose(fast.sigma_C_per_m2, dense.sigma_C_per_m2, rtol=1e-4)


@pytest.mark.parametrize("derivative", [False, True])
def test_one_shot_product_matches_the_uncompressed_rows(derivative):
    # Points on and above the ground plane, as the plane integrals and field maps use them;
    # the reference is every entry computed (dense_rows), the product of the same matrix.
    surface = BoxSurface((1.0, 1.0, 1.0), 0.25, center_m=(0.0, 0.0, 0.7))
    panels = discretise(Layout((driven("b", surface, 1.0),), ground_plane=True), 0)
    rng = np.random.default_rng(5)
    targets = np.column_stack([rng.uniform(-2, 2, (900, 2)), rng.uniform(0.0, 0.1, 900)])
    targets[:300, 2] = 0.0
    directions = rng.standard_normal((900, 3)) if derivative else None
    density = rng.standard_normal((panels.n, 2))
    exact = dense_rows(panels, targets, directions) @ density
    got = apply_once(panels, density, tol=1e-6, targets=targets, directions=directions)
    assert np.linalg.norm(got - exact) < 2e-6 * np.linalg.norm(exact)

"""The 2-D single-layer matrices (compiled kernels) against scipy quadrature and the closed
form of the periodic row kernel."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import quad

from elopt.physics.bem2d.mesh import build_panels
from elopt.physics.bem2d.operators import single_layer
from elopt.physics.bem2d.periodic import periodic_log, periodic_log_matrix
from elopt.physics.bem2d.shapes import Piece
from elopt.physics.quadrature import gauss_legendre

PERIOD = 3.0
LINE = Piece(0.2 + 0.1j, 1.4 + 0.5j, None, 2, 2)
ARC = Piece(1.0 + 0.0j, 0.0 + 1.0j, 0.0j, 1, 1)


def reference_column(panels, panel: int, node: int, x: complex, period: float | None) -> float:
    """int over the panel of the kernel at x times the node's Lagrange polynomial, by quad.

    The open kernel is -ln|x - y| / (2 pi); the periodic one is the closed form of the row of
    line charges (periodic_log: -(1/4 pi) ln[2 (cosh(2 pi dz / lam) - cos(2 pi dx / lam))],
    the lattice sum of the log kernel, common practice, no source).
    """
    gx, _ = gauss_legendre(panels.order)
    others = np.delete(gx, node)

    def lagrange(t: float) -> float:
        return float(np.prod((t - others) / (gx[node] - others)))

    if panels.is_arc[panel]:
        c, r = panels.center[panel], panels.radius[panel]
        tm, dl = panels.theta_mid[panel], panels.half_angle[panel]

        def y(t):
            return c + r * np.exp(1j * (tm + dl * t))

        speed = r * abs(dl)
    else:
        c, h, d = panels.center[panel], panels.half[panel], panels.direction[panel]

        def y(t):
            return c + h * t * d

        speed = h

    def f(t: float) -> float:
        dy = x - y(t)
        if period is None:
            k = -math.log(abs(dy)) / (2 * math.pi)
        else:
            k = float(periodic_log(np.array(dy.real), np.array(dy.imag), period))
        return k * lagrange(t) * speed

    # Split at the target's nearest parameter so that quad sees the log singularity at an end.
    ts = np.linspace(-1, 1, 4001)
    t0 = float(ts[np.argmin(np.abs(x - y(ts)))])
    cuts = sorted({-1.0, t0, 1.0})
    return sum(
        quad(f, a, b, limit=400, epsabs=1e-14, epsrel=1e-12)[0]
        for a, b in zip(cuts, cuts[1:], strict=False)
        if b > a
    )


@pytest.mark.parametrize("piece", [LINE, ARC], ids=["line", "arc"])
@pytest.mark.parametrize("period", [None, PERIOD], ids=["open", "periodic"])
def test_single_layer_matches_quadrature(piece, period):
    # Targets within the exact-split reach of panel p: on a node (the log singularity inside
    # the panel), just off it, off its end node, and (periodic) one period away.
    panels = build_panels([([piece], True)], 0.5, 0, 4)
    p = 2
    h = panels.half[p]
    node = panels.nodes[p, 1]
    normal = panels.normals[p, 1]
    shift = 0.0 if period is None else period
    targets = np.array(
        [node, node + 0.3 * h * normal, panels.nodes[p, 0] - 0.1 * h * normal, node + shift]
    )
    a = single_layer(panels, targets, period)
    # The log singularity is integrated exactly; the periodic kernel's smooth part S takes the
    # panel's own 4-node Gauss rule (measured 8e-7 relative on the arc panel of 0.19 half
    # length with the code before the compiled kernels as well), hence the looser tolerance.
    rel = 1e-9 if period is None else 2e-6
    for t, x in enumerate(targets):
        for k in range(panels.order):
            ref = reference_column(panels, p, k, complex(x), period)
            got = a[t, p * panels.order + k]
            assert got == pytest.approx(ref, rel=rel, abs=1e-12), (t, k)


def test_periodic_matrix_matches_closed_form_on_mirrored_pairs():
    # The compiled matrix fills one triangle and mirrors it when the targets are the sources
    # or their reflection in a horizontal line; every entry must equal the closed form.
    rng = np.random.default_rng(7)
    y = rng.uniform(-4.0, 4.0, 40) + 1j * rng.uniform(0.0, 0.6, 40)
    y[5] = y[4] + 1e-7  # a close pair
    w = rng.uniform(0.5, 1.5, 40)
    cases = {
        "self": y,
        "reflected": y.real + 1j * (1.3 - y.imag),
        "shifted": y + 0.4j,
        "other": rng.uniform(-5.0, 5.0, 40) + 1j * rng.uniform(-2.0, 3.0, 40),
    }
    for name, x in cases.items():
        got = periodic_log_matrix(x, y, w, PERIOD)
        d = x[:, None] - y[None, :]
        with np.errstate(divide="ignore"):
            ref = periodic_log(d.real, d.imag, PERIOD) * w[None, :]
        same = np.isinf(ref)
        assert np.array_equal(same, np.isinf(got)), name
        scale = np.abs(ref[~same]).max()
        assert np.abs(got[~same] - ref[~same]).max() < 1e-12 * scale, name

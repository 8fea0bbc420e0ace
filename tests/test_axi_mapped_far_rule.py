"""Collocation columns of mapped corner panels against adaptive quadrature (scipy).

A mapped panel (``mesh.KIND_MAPPED``) interpolates q = sigma times its length element in its
parameter t, so the entry of node i against its node k is interp_jac_k times the integral over
t in [-1, 1] of G(x_i, y(t)) l_k(t) dt, G the ring potential r' K(m) / (pi rho_plus) and l_k
the Lagrange basis of the panel's nodes; with the grounded plane, minus the same for the
panel's image in z = 0. The collocation matrix takes these columns from the panel's own
upsampled Gauss rule (``operators.mapped_far_rule``) and graded sub-rules for the targets
inside its Bernstein ellipse (Kress 1990, Elschner & Graham 1995 for the map; the Bernstein
ellipse: docs/references.md items 22, 23). The reference integrates the scipy form of the
kernel (``ring_kernels.ring_potential``, scipy.special.ellipkm1) with
scipy.integrate.quad_vec, split at the target's foot point.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import quad_vec
from test_axi_mesh_rules import _probe as guarded_probe

from elopt.physics.bem_axi import mesh as axi_mesh
from elopt.physics.bem_axi.operators import collocation_matrix, entry_tolerance
from elopt.physics.bem_axi.ring_kernels import ring_potential
from elopt.physics.bem_axi.ring_sums import foot_points
from elopt.physics.bem_axi.solve import COARSE_ENTRY_ERROR, CONDUCTOR_COARSE_RULE
from elopt.physics.quadrature import lagrange_matrix

ORDER = 4


@pytest.fixture(scope="module")
def sharp_mesh() -> axi_mesh.AxiMesh:
    """Level 0 of a sharp-cornered guarded probe (0.2 mm standoff) at the conductors-only
    coarse rule: every panel touching a right-angle edge is mapped (chord fraction u^3)."""
    return axi_mesh.build_mesh(guarded_probe(0.0), 0, ORDER, CONDUCTOR_COARSE_RULE)


def _reference_columns(
    mesh: axi_mesh.AxiMesh, i: int, panel: int, image: bool
) -> tuple[np.ndarray, float]:
    """The p entries of node i against mapped ``panel`` by quad_vec (its image's subtracted
    when ``image``), and the integral of |G| of the panel itself over its arc length (the
    scale of the entries' relative errors)."""
    r, z = mesh.points_m[i]
    kind, coef = mesh.kind[panel : panel + 1], mesh.coef[panel : panel + 1]
    tau, _ = foot_points(
        mesh.points_m[i : i + 1, 0].copy(), mesh.points_m[i : i + 1, 1].copy(), kind, coef, False
    )
    split = [float(tau[0])] if -1.0 < tau[0] < 1.0 else None
    jac = mesh.interp_jac[ORDER * panel : ORDER * (panel + 1)]

    def entries(t: float) -> np.ndarray:
        pts, der = axi_mesh.panel_geometry(kind, coef, np.array([[t]]))
        rs, zs = pts[0, 0]
        real = float(ring_potential(r, z, rs, zs))
        value = real - float(ring_potential(r, z, rs, -zs)) if image else real
        basis = lagrange_matrix(np.array(t), ORDER)
        return np.append(value * basis * jac, abs(real) * np.hypot(*der[0, 0]))

    out = quad_vec(entries, -1.0, 1.0, epsabs=0.0, epsrel=1e-12, limit=400, points=split)[0]
    return out[:ORDER], float(out[ORDER])


@pytest.mark.parametrize("ground_plane", [False, True])
@pytest.mark.parametrize("entry_error", [None, COARSE_ENTRY_ERROR])
def test_mapped_columns_match_adaptive_quadrature(sharp_mesh, ground_plane, entry_error):
    mesh = sharp_mesh
    a = collocation_matrix(mesh, ground_plane=ground_plane, entry_error=entry_error)
    mapped = np.flatnonzero(mesh.kind == axi_mesh.KIND_MAPPED)
    # The sensor's two mapped panels at its outer edge and one of the guard's: targets on
    # the adjacent panel across the corner, on the same face, on the other conductor, far.
    panels = mapped[[0, 1, len(mapped) - 1]]
    worst = 0.0
    distances = []
    for panel in panels:
        for i in range(0, mesh.n_nodes, 3):
            if i // ORDER == panel:
                continue  # the self rule's (tests/test_axi_collocation_entries.py)
            ref, scale = _reference_columns(mesh, i, panel, ground_plane)
            got = a[i, ORDER * panel : ORDER * (panel + 1)]
            worst = max(worst, float(np.max(np.abs(got - ref)) / scale))
            gap = np.hypot(*(mesh.center_m[panel] - mesh.points_m[i])) / mesh.length_m[panel]
            distances.append(gap)
    # Targets from the panel's corner out to many panel lengths.
    assert min(distances) < 0.6 and max(distances) > 3.0
    # Measured (Dec 2026): 3.1e-9 (1e-8 entries) and 5.4e-8 (1e-6) of the integral of |G| over
    # the panel; the panels' own 4-node rule in the far sum before: 3.3e-8 and 7.4e-6.
    tolerance = entry_tolerance(ORDER) if entry_error is None else entry_error
    assert worst < tolerance

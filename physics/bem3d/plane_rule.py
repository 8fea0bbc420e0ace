"""A quadrature rule on the ground plane z = 0 for integrals of induced-charge products.

The plane's charge density under a conductor varies on the scale of the conductor's height
above it, and decays like a dipole field (rho**-3) far away, so products of two densities
decay like rho**-6. The rule is a quadtree of squares, each refined until it is no larger
than three quarters of its centre's distance to the nearest panel, with a 4 x 4 Gauss-Legendre product
rule per leaf; it covers a square of half-width ``EXTENT`` times the layout's size, beyond
which less than about EXTENT**-4 (1e-6) of such an integral lies.
"""

from __future__ import annotations

import numpy as np
from scipy.spatial import cKDTree

from elopt.physics.bem3d.panels import PanelSet

EXTENT = 32.0
#: A leaf square is at most this fraction of its centre's distance to the surface.
CELL_FRACTION = 0.75
_GL_X, _GL_W = np.polynomial.legendre.leggauss(4)


def plane_rule(panels: PanelSet, *, max_leaves: int = 200_000) -> tuple[np.ndarray, np.ndarray]:
    """Points (Q, 2) in m and weights (Q,) in m^2 on z = 0 (see the module docstring)."""
    v = panels.mesh.vertices_m
    lo, hi = v[:, :2].min(axis=0), v[:, :2].max(axis=0)
    center = 0.5 * (lo + hi)
    size = max(0.5 * float(np.max(hi - lo)), float(v[:, 2].max()))
    tree = cKDTree(panels.mesh.centroids_m)
    half = np.array([EXTENT * size])
    cx, cy = np.array([center[0]]), np.array([center[1]])
    leaves_x, leaves_y, leaves_h = [], [], []
    while len(half):
        d, _ = tree.query(np.stack([cx, cy, np.zeros_like(cx)], axis=1))
        split = 2.0 * half > CELL_FRACTION * d
        keep = ~split
        leaves_x.append(cx[keep])
        leaves_y.append(cy[keep])
        leaves_h.append(half[keep])
        if sum(len(x) for x in leaves_x) + 4 * int(split.sum()) > max_leaves:
            # The layout is far from compact: keep what is split as leaves rather than grow.
            leaves_x.append(cx[split])
            leaves_y.append(cy[split])
            leaves_h.append(half[split])
            break
        h2 = 0.5 * half[split]
        sx, sy = cx[split], cy[split]
        cx = np.concatenate([sx - h2, sx + h2, sx - h2, sx + h2])
        cy = np.concatenate([sy - h2, sy - h2, sy + h2, sy + h2])
        half = np.concatenate([h2, h2, h2, h2])
    lx, ly, lh = (np.concatenate(a) for a in (leaves_x, leaves_y, leaves_h))
    gx, gy = np.meshgrid(_GL_X, _GL_X, indexing="ij")
    gw = np.outer(_GL_W, _GL_W)
    px = (lx[:, None] + lh[:, None] * gx.ravel()[None, :]).ravel()
    py = (ly[:, None] + lh[:, None] * gy.ravel()[None, :]).ravel()
    w = (lh[:, None] ** 2 * gw.ravel()[None, :]).ravel()
    return np.stack([px, py], axis=1), w

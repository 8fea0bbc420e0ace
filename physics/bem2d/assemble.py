"""The full 2-D collocation/evaluation matrix on a layer stack (free space, images, remainder).

For targets in slab i and sources in slab j the kernel is the sum of the exactly extracted log
terms of :meth:`Slabs.image_terms` (each a single-layer matrix at reflected/shifted targets,
near-singular parts split exactly) and, when a finite slab exists, the smooth remainder of
:mod:`elopt.physics.bem2d.remainder` sampled at the nodes.
"""

from __future__ import annotations

import numpy as np

from elopt.physics.bem2d.layered_green import Slabs
from elopt.physics.bem2d.mesh import Panels, subset
from elopt.physics.bem2d.operators import single_layer
from elopt.physics.bem2d.remainder import open_remainder, periodic_remainder


def potential_matrix(
    panels: Panels,
    slabs: Slabs,
    targets: np.ndarray,
    *,
    period: float | None,
    extent_m: float,
) -> np.ndarray:
    """A (T, N) in V per (C/m^2): potential at ``targets`` (complex) of unit nodal densities."""
    x = np.asarray(targets, dtype=complex)
    t_slab = slabs.index(x.imag)
    node_slab = slabs.index(panels.points.imag)
    panel_slab = node_slab.reshape(panels.n_panels, panels.order)[:, 0]
    a = np.zeros((len(x), panels.n))
    for j in np.unique(panel_slab):
        sub_p = panel_slab == j
        sub = subset(panels, sub_p)
        cols = np.nonzero(np.repeat(sub_p, panels.order))[0]
        ys = sub.points
        for i in np.unique(t_slab):
            rows = np.nonzero(t_slab == i)[0]
            xi = x[rows]
            terms = slabs.image_terms(int(i), int(j))
            block = np.zeros((len(rows), len(cols)))
            for c, s, t0 in terms:
                eff = xi.real + 1j * (t0 + s * xi.imag)
                block += c * single_layer(sub, eff, period)
            if slabs.layered:
                if period is None:
                    r = open_remainder(
                        slabs, int(i), int(j), xi.real, xi.imag, ys.real, ys.imag, extent_m
                    )
                else:
                    r = periodic_remainder(
                        slabs, period, int(i), int(j), xi.real, xi.imag, ys.real, ys.imag, terms
                    )
                block += r * sub.node_weights[None, :]
            a[np.ix_(rows, cols)] = block
    return a

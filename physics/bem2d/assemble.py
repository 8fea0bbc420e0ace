"""The full 2-D collocation/evaluation matrix on a layer stack (free space, images, remainder).

For targets in slab i and sources in slab j the kernel is the sum of the exactly extracted log
terms of :meth:`Slabs.image_terms` (each a single-layer matrix at reflected/shifted targets,
near-singular parts split exactly) and, when a finite slab exists, the smooth remainder of
:mod:`elopt.physics.bem2d.remainder` sampled at the nodes. Terms whose effective targets
coincide (an image in a face the targets lie on) share one single-layer matrix.
"""

from __future__ import annotations

import weakref

import numpy as np

from elopt.physics.bem2d.layered_green import Slabs
from elopt.physics.bem2d.mesh import Panels, subset
from elopt.physics.bem2d.operators import single_layer
from elopt.physics.bem2d.remainder import open_remainder, periodic_remainder

#: Per panel set: its panels split by source slab, and the remainder's source-side factors
#: (both depend only on the panels and the stack, so every evaluation on a level shares them).
_SOURCES: weakref.WeakKeyDictionary = weakref.WeakKeyDictionary()


def _source_groups(panels: Panels, slabs: Slabs) -> list:
    """[(slab j, sub-panels, columns, memo dict for the remainder)], cached per panels."""
    hit = _SOURCES.get(panels)
    if hit is not None and hit[0] is slabs:
        return hit[1]
    node_slab = slabs.index(panels.points.imag)
    panel_slab = node_slab.reshape(panels.n_panels, panels.order)[:, 0]
    groups = []
    for j in np.unique(panel_slab):
        sub_p = panel_slab == j
        cols = np.nonzero(np.repeat(sub_p, panels.order))[0]
        groups.append((int(j), subset(panels, sub_p), cols, {}))
    _SOURCES[panels] = (slabs, groups)
    return groups


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
    a = np.zeros((len(x), panels.n))
    for j, sub, cols, memo in _source_groups(panels, slabs):
        ys = sub.points
        for i in np.unique(t_slab):
            rows = np.nonzero(t_slab == i)[0]
            xi = x[rows]
            terms = slabs.image_terms(int(i), j)
            merged: list[tuple[float, np.ndarray]] = []
            for c, s, t0 in terms:
                eff = xi.real + 1j * (t0 + s * xi.imag)
                for k, (c_k, eff_k) in enumerate(merged):
                    if np.array_equal(eff, eff_k):
                        merged[k] = (c_k + c, eff_k)
                        break
                else:
                    merged.append((c, eff))
            block = np.zeros((len(rows), len(cols))) if not merged else None
            for c, eff in merged:
                term = c * single_layer(sub, eff, period)
                if block is None:
                    block = term
                else:
                    block += term
            if slabs.layered:
                if period is None:
                    r = open_remainder(
                        slabs, int(i), j, xi.real, xi.imag, ys.real, ys.imag, extent_m
                    )
                else:
                    r = periodic_remainder(
                        slabs,
                        period,
                        int(i),
                        j,
                        xi.real,
                        xi.imag,
                        ys.real,
                        ys.imag,
                        terms,
                        memo=memo,
                    )
                block += r * sub.node_weights[None, :]
            if len(rows) == len(x) and len(cols) == panels.n:
                return block  # one source slab, one target slab: the block is the matrix
            a[np.ix_(rows, cols)] = block
    return a

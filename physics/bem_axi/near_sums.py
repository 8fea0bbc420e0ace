"""Compiled near-field correction of the axisymmetric operators (numba), in one pass.

The far sums of :mod:`elopt.physics.bem_axi.ring_sums` give every (target, node) entry by the
source panel's own Gauss rule. For (target, panel) pairs closer than a reach, this pass swaps
that value for the graded sub-rule of ``ring_sums.near_rows``: it finds the pairs, their foot
points and grading depths, and adds (accurate - node rule) into the matrix, with no Python
between the steps (the per-call array work there cost as much as the rules themselves).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from elopt.physics.bem_axi.ring_sums import foot_points, near_rows, node_rows

#: Deepest grading of the near-field sub-rules (2^-44 of a panel).
MAX_LEVELS = 44


@njit(cache=True)
def _pairs(
    tr: np.ndarray,
    tz: np.ndarray,
    centre_r: np.ndarray,
    centre_z: np.ndarray,
    reach: np.ndarray,
    order: int,
    mirror: bool,
    exclude_self: bool,
) -> tuple[np.ndarray, np.ndarray]:
    """(target, panel) index pairs with the target closer than ``reach`` (P,) to the panel's
    centre (mirrored in z = 0 when ``mirror``); a node's own panel left out on request."""
    m, n_p = tr.shape[0], centre_r.shape[0]
    sgn = -1.0 if mirror else 1.0
    ti = np.empty(m * 8, np.int64)
    pj = np.empty(m * 8, np.int64)
    count = 0
    for i in range(m):
        for j in range(n_p):
            dr = tr[i] - centre_r[j]
            dz = tz[i] - sgn * centre_z[j]
            if dr * dr + dz * dz >= reach[j] * reach[j]:
                continue
            if exclude_self and i // order == j:
                continue
            if count == ti.shape[0]:
                ti = np.concatenate((ti, np.empty(count, np.int64)))
                pj = np.concatenate((pj, np.empty(count, np.int64)))
            ti[count] = i
            pj[count] = j
            count += 1
    return ti[:count], pj[:count]


@njit(cache=True)
def add_near_corrections(
    mat: np.ndarray,
    tr: np.ndarray,
    tz: np.ndarray,
    kind: np.ndarray,
    coef: np.ndarray,
    length: np.ndarray,
    centre_r: np.ndarray,
    centre_z: np.ndarray,
    reach: np.ndarray,
    sr: np.ndarray,
    sz: np.ndarray,
    w: np.ndarray,
    mirror: bool,
    exclude_self: bool,
    x: np.ndarray,
    bary: np.ndarray,
    xq: np.ndarray,
    wq: np.ndarray,
) -> None:
    """Add (graded rule - node rule) of near (target, panel) pairs into ``mat`` (M, N, ncomp)
    in place; image pairs (``mirror``) enter with a minus, as ``mat`` holds real-minus-image
    sums. Targets (M,) ``tr``, ``tz``; panels (P,) ``kind``, ``coef`` (P, 5), ``length``,
    centres, ``reach``; nodes (N,) ``sr``, ``sz``, ``w``; nodes per panel p = len(x)."""
    p = x.shape[0]
    ti, pj = _pairs(tr, tz, centre_r, centre_z, reach, p, mirror, exclude_self)
    n = ti.shape[0]
    if n == 0:
        return
    field = mat.shape[2] == 2
    pr = np.empty(n)
    pz = np.empty(n)
    kd = np.empty(n, np.int64)
    cf = np.empty((n, coef.shape[1]))
    cols = np.empty((n, p), np.int64)
    for b in range(n):
        pr[b] = tr[ti[b]]
        pz[b] = tz[ti[b]]
        kd[b] = kind[pj[b]]
        cf[b] = coef[pj[b]]
        for k in range(p):
            cols[b, k] = pj[b] * p + k
    tau_c, delta = foot_points(pr, pz, kd, cf, mirror)
    # Graded pieces (ratio 2 towards the foot) lie at least their own length from the target;
    # so does the innermost once it is no longer than the distance: one level beyond
    # log2(length / distance) gives every piece the same Bernstein-ellipse margin.
    levels = np.empty(n, np.int64)
    for b in range(n):
        ratio = length[pj[b]] / max(delta[b], 1e-300)
        lv = math.ceil(math.log2(max(ratio, 1.0))) + 1
        levels[b] = min(max(lv, 1), MAX_LEVELS)
    good = near_rows(pr, pz, kd, cf, tau_c, levels, mirror, field, x, bary, xq, wq)
    direct = node_rows(pr, pz, sr, sz, w, cols, mirror, field)
    sgn = -1.0 if mirror else 1.0
    for b in range(n):
        for k in range(p):
            for c in range(mat.shape[2]):
                mat[ti[b], cols[b, k], c] += sgn * (good[b, k, c] - direct[b, k, c])

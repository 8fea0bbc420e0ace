"""Compiled self-intersection test of a sampled generating curve (numba).

:func:`first_touching_chords` finds the first pair of chords (row-major in (i, j)) that
``geometry._first_self_intersection`` reports: chords (i, i + 1) and (j, j + 1) of the
polyline, j >= i + 2 (not the first and last of a closed one), whose bounding boxes widened by
``tol`` overlap, that cross properly or come within ``tol`` of each other, and that are joined
by more than 4 ``tol`` of curve. Every value is computed by the same formulas, in the same
order of operations, as the numpy version kept beside it in ``tests/test_geometry_kernels.py``,
which checks the two against each other. Compiled on first use (cached on disk);
``geometry.py`` imports this module only when it validates a curve.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from elopt.physics.kernel_cache import drop_stale_kernel_caches

drop_stale_kernel_caches()


@njit(cache=True)
def _orient(ur, uz, vr, vz, wr, wz):
    return (vr - ur) * (wz - uz) - (vz - uz) * (wr - ur)


@njit(cache=True)
def _touches(a, d, length2, u, v, tol):
    """Whether the start of chord ``u`` lies within ``tol`` of chord ``v``."""
    er = a[u, 0] - a[v, 0]
    ez = a[u, 1] - a[v, 1]
    t = (er * d[v, 0] + ez * d[v, 1]) / length2[v]
    t = min(max(t, 0.0), 1.0)
    gr = a[u, 0] - (a[v, 0] + t * d[v, 0])
    gz = a[u, 1] - (a[v, 1] + t * d[v, 1])
    return math.sqrt(gr * gr + gz * gz) <= tol


@njit(cache=True)
def first_touching_chords(pts: np.ndarray, tol: float, closed: bool) -> tuple[int, int]:
    """(i, j) of the first touching pair of chords of ``pts`` (M, 2) (module docs), or
    (-1, -1)."""
    m = pts.shape[0] - 1
    lo_r = np.empty(m)
    hi_r = np.empty(m)
    lo_z = np.empty(m)
    hi_z = np.empty(m)
    a = np.empty((m, 2))
    d = np.empty((m, 2))
    length2 = np.empty(m)
    along = np.empty(m + 1)
    along[0] = 0.0
    for k in range(m):
        r0, r1, z0, z1 = pts[k, 0], pts[k + 1, 0], pts[k, 1], pts[k + 1, 1]
        lo_r[k] = min(r0, r1) - tol
        hi_r[k] = max(r0, r1) + tol
        lo_z[k] = min(z0, z1) - tol
        hi_z[k] = max(z0, z1) + tol
        a[k, 0] = r0
        a[k, 1] = z0
        d[k, 0] = r1 - r0
        d[k, 1] = z1 - z0
        length2[k] = max(d[k, 0] * d[k, 0] + d[k, 1] * d[k, 1], 1e-300)
        along[k + 1] = along[k] + math.sqrt(length2[k])
    for i in range(m):
        for j in range(i + 2, m):
            if lo_r[i] > hi_r[j] or lo_r[j] > hi_r[i]:
                continue
            if lo_z[i] > hi_z[j] or lo_z[j] > hi_z[i]:
                continue
            if closed and m > 2 and i == 0 and j == m - 1:
                continue
            stretch = along[j] - along[i + 1]
            if closed:
                stretch = min(stretch, along[m] - along[j + 1] + along[i])
            if not stretch > 4.0 * tol:
                continue
            ar, az, br, bz = pts[i, 0], pts[i, 1], pts[i + 1, 0], pts[i + 1, 1]
            cr, cz, dr, dz = pts[j, 0], pts[j, 1], pts[j + 1, 0], pts[j + 1, 1]
            o1 = _orient(ar, az, br, bz, cr, cz)
            o2 = _orient(ar, az, br, bz, dr, dz)
            o3 = _orient(cr, cz, dr, dz, ar, az)
            o4 = _orient(cr, cz, dr, dz, br, bz)
            if (o1 * o2 < 0 and o3 * o4 < 0) or _touches(a, d, length2, i, j, tol):
                return i, j
            if _touches(a, d, length2, j, i, tol):
                return i, j
    return -1, -1

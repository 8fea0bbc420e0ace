"""Near pairs of targets and panels: every (i, j) with |x_i - c_j| < r_j (compiled).

Targets are binned in a uniform grid (counting sort); each panel scans the cells its ball
overlaps. Two passes (count, fill) keep memory at exactly the number of pairs.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit, prange

from elopt.physics.kernel_cache import drop_stale_kernel_caches

drop_stale_kernel_caches()


def near_pairs(
    targets: np.ndarray, centers: np.ndarray, radii: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Pairs (ti, tj) (P,) int64 with |targets[ti] - centers[tj]| < radii[tj], sorted by tj."""
    targets = np.ascontiguousarray(targets, dtype=np.float64)
    centers = np.ascontiguousarray(centers, dtype=np.float64)
    radii = np.ascontiguousarray(radii, dtype=np.float64)
    if len(targets) == 0 or len(centers) == 0:
        return np.empty(0, np.int64), np.empty(0, np.int64)
    lo = targets.min(axis=0)
    span = np.maximum(targets.max(axis=0) - lo, 1e-300)
    cell = float(np.median(radii))
    # Keep the grid at most a few cells per target.
    while np.prod(np.floor(span / cell) + 1) > 4 * len(targets) + 64:
        cell *= 1.5
    dims = (np.floor(span / cell) + 1).astype(np.int64)
    key = _cell_keys(targets, lo, cell, dims)
    order = np.argsort(key, kind="stable").astype(np.int64)
    starts = np.searchsorted(key[order], np.arange(int(np.prod(dims)) + 1)).astype(np.int64)
    counts = _count(targets, centers, radii, lo, cell, dims, order, starts)
    offsets = np.concatenate([[0], np.cumsum(counts)]).astype(np.int64)
    ti = np.empty(offsets[-1], np.int64)
    tj = np.empty(offsets[-1], np.int64)
    _fill(targets, centers, radii, lo, cell, dims, order, starts, offsets, ti, tj)
    return ti, tj


def _cell_keys(p: np.ndarray, lo: np.ndarray, cell: float, dims: np.ndarray) -> np.ndarray:
    idx = np.clip(np.floor((p - lo) / cell).astype(np.int64), 0, dims - 1)
    return (idx[:, 0] * dims[1] + idx[:, 1]) * dims[2] + idx[:, 2]


@njit(cache=True, inline="always")
def _range(c: float, r: float, lo: float, cell: float, dim: int) -> tuple[int, int]:
    a = int(math.floor((c - r - lo) / cell))
    b = int(math.floor((c + r - lo) / cell))
    return max(a, 0), min(b, dim - 1)


@njit(cache=True, parallel=True)
def _count(targets, centers, radii, lo, cell, dims, order, starts):
    n = centers.shape[0]
    counts = np.zeros(n, np.int64)
    for j in prange(n):
        c = centers[j]
        r = radii[j]
        r2 = r * r
        x0, x1 = _range(c[0], r, lo[0], cell, dims[0])
        y0, y1 = _range(c[1], r, lo[1], cell, dims[1])
        z0, z1 = _range(c[2], r, lo[2], cell, dims[2])
        k = 0
        for ix in range(x0, x1 + 1):
            for iy in range(y0, y1 + 1):
                for iz in range(z0, z1 + 1):
                    key = (ix * dims[1] + iy) * dims[2] + iz
                    for s in range(starts[key], starts[key + 1]):
                        t = targets[order[s]]
                        dx = t[0] - c[0]
                        dy = t[1] - c[1]
                        dz = t[2] - c[2]
                        if dx * dx + dy * dy + dz * dz < r2:
                            k += 1
        counts[j] = k
    return counts


@njit(cache=True, parallel=True)
def _fill(targets, centers, radii, lo, cell, dims, order, starts, offsets, ti, tj):
    n = centers.shape[0]
    for j in prange(n):
        c = centers[j]
        r = radii[j]
        r2 = r * r
        x0, x1 = _range(c[0], r, lo[0], cell, dims[0])
        y0, y1 = _range(c[1], r, lo[1], cell, dims[1])
        z0, z1 = _range(c[2], r, lo[2], cell, dims[2])
        k = offsets[j]
        for ix in range(x0, x1 + 1):
            for iy in range(y0, y1 + 1):
                for iz in range(z0, z1 + 1):
                    key = (ix * dims[1] + iy) * dims[2] + iz
                    for s in range(starts[key], starts[key + 1]):
                        i = order[s]
                        t = targets[i]
                        dx = t[0] - c[0]
                        dy = t[1] - c[1]
                        dz = t[2] - c[2]
                        if dx * dx + dy * dy + dz * dz < r2:
                            ti[k] = i
                            tj[k] = j
                            k += 1

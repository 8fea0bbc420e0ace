"""Compiled passes of the level-0 grading of one curve's panels (segments and arcs).

Panels are flat arrays (n,): ``piece`` (index into the curve's pieces), parameters ``t0`` <
``t1``; per piece: ``kind`` (``mesh.KIND_SEGMENT`` 0 or ``mesh.KIND_ARC`` 1), ``spec`` (n, 5)
(``mesh._piece_spec``) and arc length ``piece_length`` (m). :func:`balance_panels` splits
panels until neighbours differ in length by at most ``ratio``; :func:`refine_gap_panels` then
splits panels longer than ``gap_factor`` times their distance to a cloud of points (the other
conductors' and the images' samples) and balances again, testing only panels new since the
last test (an unchanged panel passed it before). Every value is computed by the same formulas,
in the same order of operations, as the numpy functions of ``mesh.py`` (``_curve_lengths``,
``_curve_midpoints``, ``_CurvePanels.split``), so the panels are theirs bit for bit
(``tests/test_axi_grading_kernels.py``; the arcs' cos and sin are the C library's, which
numpy's matched on 200,000 random angles on the project machine). The nearest cloud point is
searched through boxes of CHUNK points; a box is skipped only when a lower bound of its
points' rounded squared distances is not below the least found so far, so the minimum is the
plain one exactly. Curves with ellipse arcs (lengths by quadrature) stay on the numpy path.
Compiled on first use (cached on disk); ``mesh.py`` imports this module only when it grades a
curve.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from elopt.physics.kernel_cache import drop_stale_kernel_caches

drop_stale_kernel_caches()


@njit(cache=True)
def _lengths(piece_length, piece, t0, t1):
    out = np.empty(len(piece))
    for i in range(len(piece)):
        out[i] = piece_length[piece[i]] * (0.5 * (t1[i] - t0[i]))
    return out


@njit(cache=True)
def _split(piece, t0, t1, fresh, mask, count):
    """The panels with the ``count`` panels of ``mask`` halved in parameter; the halves are
    flagged fresh, the other panels keep their flag."""
    n = len(piece) + count
    p2 = np.empty(n, np.int64)
    a2 = np.empty(n)
    b2 = np.empty(n)
    f2 = np.empty(n, np.bool_)
    j = 0
    for i in range(len(piece)):
        if mask[i]:
            mid = 0.5 * (t0[i] + t1[i])
            p2[j] = piece[i]
            a2[j] = t0[i]
            b2[j] = mid
            f2[j] = True
            p2[j + 1] = piece[i]
            a2[j + 1] = mid
            b2[j + 1] = t1[i]
            f2[j + 1] = True
            j += 2
        else:
            p2[j] = piece[i]
            a2[j] = t0[i]
            b2[j] = t1[i]
            f2[j] = fresh[i]
            j += 1
    return p2, a2, b2, f2


@njit(cache=True)
def _balance(piece_length, piece, t0, t1, fresh, closed, ratio):
    while True:
        lengths = _lengths(piece_length, piece, t0, t1)
        n = len(lengths)
        mask = np.zeros(n, np.bool_)
        count = 0
        for a in range(n - 1 + int(closed)):
            b = (a + 1) % n
            la, lb = lengths[a], lengths[b]
            if la > ratio * lb * (1 + 1e-9) and not mask[a]:
                mask[a] = True
                count += 1
            if lb > ratio * la * (1 + 1e-9) and not mask[b]:
                mask[b] = True
                count += 1
        if count == 0:
            return piece, t0, t1, fresh
        piece, t0, t1, fresh = _split(piece, t0, t1, fresh, mask, count)


@njit(cache=True)
def balance_panels(piece_length, piece, t0, t1, closed, ratio):
    """Panels (piece, t0, t1) split until neighbours differ by at most a factor ``ratio``
    (``closed``: the last panel neighbours the first)."""
    fresh = np.zeros(len(piece), np.bool_)
    piece, t0, t1, fresh = _balance(piece_length, piece, t0, t1, fresh, closed, ratio)
    return piece, t0, t1


@njit(cache=True)
def _midpoint(kind, s, m):
    """Point (r, z) at parameter ``m`` of a segment or arc piece with spec row ``s``."""
    if kind == 0:
        w0 = 0.5 * (1 - m)
        w1 = 0.5 * (1 + m)
        return w0 * s[0] + w1 * s[2], w0 * s[1] + w1 * s[3]
    ang = s[3] + 0.5 * (m + 1) * s[4]
    return s[0] + s[2] * math.cos(ang), s[1] + s[2] * math.sin(ang)


#: Cloud points per box of the nearest-point search.
CHUNK = 16


@njit(cache=True)
def _chunks(cloud_r, cloud_z, skip_lo, skip_hi):
    """Boxes of runs of at most CHUNK cloud points outside [skip_lo, skip_hi): rows (start,
    stop) (k, 2) and (r_min, r_max, z_min, z_max) (k, 4)."""
    n = len(cloud_r)
    k = (skip_lo + CHUNK - 1) // CHUNK + (n - skip_hi + CHUNK - 1) // CHUNK
    ends = np.empty((k, 2), np.int64)
    box = np.empty((k, 4))
    c = 0
    for lo, hi in ((0, skip_lo), (skip_hi, n)):
        for a in range(lo, hi, CHUNK):
            b = min(a + CHUNK, hi)
            ends[c, 0], ends[c, 1] = a, b
            box[c, 0] = cloud_r[a:b].min()
            box[c, 1] = cloud_r[a:b].max()
            box[c, 2] = cloud_z[a:b].min()
            box[c, 3] = cloud_z[a:b].max()
            c += 1
    return ends, box


@njit(cache=True)
def _box_bound2(c, lo, hi):
    """A lower bound of (c - x)**2 as rounded for every x in [lo, hi] (rounding is monotonic,
    so the nearest edge's rounded square is not above any member's)."""
    if c > hi:
        d = c - hi
    elif c < lo:
        d = c - lo
    else:
        return 0.0
    return d * d


@njit(cache=True)
def _nearest2(cr, cz, cloud_r, cloud_z, ends, box, bound):
    """The least squared distance (m^2) from (cr, cz) to the boxed cloud points, exactly as
    the plain minimum over all of them: a box is skipped only when its lower bound is not
    below the least distance found so far (``bound``: scratch (k,))."""
    if len(ends) == 0:
        return np.inf
    first = 0
    for c in range(len(ends)):
        bound[c] = _box_bound2(cr, box[c, 0], box[c, 1]) + _box_bound2(cz, box[c, 2], box[c, 3])
        if bound[c] < bound[first]:
            first = c
    best = np.inf
    for k in range(-1, len(ends)):
        c = first if k < 0 else k
        if (k >= 0 and c == first) or bound[c] >= best:
            continue
        for j in range(ends[c, 0], ends[c, 1]):
            dr = cr - cloud_r[j]
            dz = cz - cloud_z[j]
            d2 = dr * dr + dz * dz
            if d2 < best:
                best = d2
    return best


@njit(cache=True)
def refine_gap_panels(
    kind,
    spec,
    piece_length,
    piece,
    t0,
    t1,
    closed,
    ratio,
    cloud_r,
    cloud_z,
    skip_lo,
    skip_hi,
    gap_factor,
    rounds,
):
    """Panels split (and balanced within ``ratio``) until none is longer than ``gap_factor``
    times the distance from its parameter midpoint to the nearest cloud point (m) outside
    indices [``skip_lo``, ``skip_hi``) (the curve's own samples), at most ``rounds`` times."""
    fresh = np.ones(len(piece), np.bool_)
    ends, box = _chunks(cloud_r, cloud_z, skip_lo, skip_hi)
    bound = np.empty(len(ends))
    for _ in range(rounds):
        lengths = _lengths(piece_length, piece, t0, t1)
        mask = np.zeros(len(piece), np.bool_)
        count = 0
        for i in range(len(piece)):
            if not fresh[i]:
                continue
            cr, cz = _midpoint(kind[piece[i]], spec[piece[i]], 0.5 * (t0[i] + t1[i]))
            best = _nearest2(cr, cz, cloud_r, cloud_z, ends, box, bound)
            if lengths[i] > gap_factor * math.sqrt(best):
                mask[i] = True
                count += 1
        if count == 0:
            break
        fresh = np.zeros(len(piece), np.bool_)
        piece, t0, t1, fresh = _split(piece, t0, t1, fresh, mask, count)
        piece, t0, t1, fresh = _balance(piece_length, piece, t0, t1, fresh, closed, ratio)
    return piece, t0, t1

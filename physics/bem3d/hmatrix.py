"""Hierarchical-matrix form of the collocation operator: O(N log N) memory and product.

Targets (collocation centroids) and sources (panels) are split into a binary cluster tree by
bisection along the longest side of each cluster's bounding box, down to leaves of at most
``LEAF`` panels. A block of target cluster t and source cluster s is *admissible* when
max(diam t, diam s) <= ETA * dist(t, s): the kernel is smooth there and the block is
replaced by a low-rank product U V found by adaptive cross approximation (ACA with partial
pivoting, Bebendorf, Numer. Math. 86, 565 (2000)) and recompressed by a truncated SVD, both
to the relative tolerance ``tol`` of the block. The cross approximation ends when
:data:`ACA_CONFIRM` crosses in a row are small against the approximation and the residuals
at :data:`ACA_CHECK_ENTRIES` sampled entries agree (else the worst of them is the next
pivot): the small crosses alone can miss part of a block. Inadmissible leaf blocks are stored dense,
with every entry from the accurate panel integrals. Entries of admissible blocks use the
same distance-chosen rule (:mod:`.panel_integrals`), so the compressed matrix approximates
exactly the dense one. Dense blocks and low-rank factors are stored in float32 (their
relative rounding, 6e-8, is far below the tolerances used; on the guarded-pad demo's 6,448
panels the scaled C moved by 4e-10 against float64 dense blocks).

With a :class:`MirrorFold` (a mirror-symmetric solve, :mod:`.symmetry`) the columns are the
sums over each orbit of panels: an entry adds the panel's integral at the target's mirror
images (the integral over an image panel equals the one over the panel at the reflected
target), so the orbit matrix (R, R) is stored instead of the representatives' rows (R, N).

:func:`apply_once` forms the same blocks batch by batch and applies each as it is made, for a
product or two at targets that will not be reused: nothing is stored, and the low-rank factors
are not recompressed (storage is all recompression buys).

The product runs on one core, in a fixed order of the work, so repeated products are
bit-identical: it reads each stored entry once, and waiting for a second thread cost more
than it saved (measured: 6 ms of CPU on one thread, 39 ms on two, for the 3,224 orbits of the
guarded-pad demo's middle level on a loaded 2-core machine).
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass

import numba
import numpy as np
from numba import njit, prange

from elopt.physics.bem3d import panel_integrals as pint
from elopt.physics.bem3d.panels import PanelSet
from elopt.physics.kernel_cache import drop_stale_kernel_caches

drop_stale_kernel_caches()

FOUR_PI = 4.0 * math.pi
#: Leaf size and admissibility: on the guarded-pad demo's finest level (12,896 orbits) 16 / 4
#: built in 3.4 s of CPU with 14 MB of dense blocks, 32 / 3 in 3.3 s with 35 MB (float32).
LEAF = 16
ETA = 4.0
MAX_RANK = 48
#: A cross approximation may end after this many consecutive crosses below the tolerance ...
ACA_CONFIRM = 1
#: ... when the residuals of this many sampled entries in unused rows confirm it: the squared
#: Frobenius error extrapolated from them (times m n / entries) below tol^2 times the
#: approximation's, else the row of the worst of them is the next pivot. The small cross
#: alone missed parts of blocks (the board-pad demo's touch solve, 3108 panels: a 740 x 814
#: finger-copper remainder block estimated 7e-5 after one cross, still 1.2e-2 off; at 11852
#: panels a 1370 x 1370 finger block 18 tol off even after three small crosses). With the
#: check every block at 11852 panels is within 2.7 tol (within 2.3 tol with two small
#: crosses asked for, which cost the guarded-pad demo 1 s more CPU; measured 3 Dec 2026,
#: tests/test_bem3d_layers_aca.py).
ACA_CHECK_ENTRIES = 32
#: Entries with the target farther than this many panel sizes use the 3-point rule inline
#: (its error there is below 1e-4 of the entry; measured effect on C below 1e-6).
FAR_RULE_FACTOR = 4.0
_BATCH = 2048
#: Largest scratch of one batch of cross approximations (float64 entries): bounds the peak
#: memory, which whole batches of wide blocks at full rank otherwise dominate.
_BATCH_SCRATCH = 500_000


@dataclass(frozen=True)
class ClusterTree:
    """Binary cluster tree over points; cluster c holds perm[start[c]:end[c]]."""

    perm: np.ndarray
    start: np.ndarray
    end: np.ndarray
    lo: np.ndarray
    hi: np.ndarray
    child: np.ndarray
    level: np.ndarray


def cluster_tree(
    points: np.ndarray, lo_ext: np.ndarray, hi_ext: np.ndarray, leaf: int = LEAF
) -> ClusterTree:
    """Tree over ``points`` (n, 3); boxes bound [lo_ext, hi_ext] (n, 3) of every member."""
    n = len(points)
    perm = np.arange(n)
    starts, ends, los, his, children, levels = [], [], [], [], [], []
    stack = [(0, n, 0, -1, 0)]
    while stack:
        s, e, lvl, parent, slot = stack.pop()
        c = len(starts)
        idx = perm[s:e]
        starts.append(s)
        ends.append(e)
        los.append(lo_ext[idx].min(axis=0))
        his.append(hi_ext[idx].max(axis=0))
        children.append([-1, -1])
        levels.append(lvl)
        if parent >= 0:
            children[parent][slot] = c
        if e - s <= leaf:
            continue
        p = points[idx]
        axis = int(np.argmax(p.max(axis=0) - p.min(axis=0)))
        order = np.argsort(p[:, axis], kind="stable")
        perm[s:e] = idx[order]
        mid = s + (e - s) // 2
        stack.append((mid, e, lvl + 1, c, 1))
        stack.append((s, mid, lvl + 1, c, 0))
    return ClusterTree(
        perm=perm,
        start=np.asarray(starts, np.int64),
        end=np.asarray(ends, np.int64),
        lo=np.asarray(los),
        hi=np.asarray(his),
        child=np.asarray(children, np.int64),
        level=np.asarray(levels, np.int64),
    )


@njit(cache=True)
def _partition(t_lo, t_hi, t_child, t_size, s_lo, s_hi, s_child, s_size, eta):
    """Admissible (far) and leaf (near) block pairs of the two trees."""
    cap = 1024
    stack = np.empty((cap, 2), np.int64)
    far = np.empty((cap, 2), np.int64)
    near = np.empty((cap, 2), np.int64)
    nf = 0
    nn = 0
    top = 0
    stack[0, 0] = 0
    stack[0, 1] = 0
    top = 1
    while top > 0:
        top -= 1
        t = stack[top, 0]
        s = stack[top, 1]
        dt = 0.0
        ds = 0.0
        dist2 = 0.0
        for c in range(3):
            dt += (t_hi[t, c] - t_lo[t, c]) ** 2
            ds += (s_hi[s, c] - s_lo[s, c]) ** 2
            gap = max(0.0, max(t_lo[t, c] - s_hi[s, c], s_lo[s, c] - t_hi[t, c]))
            dist2 += gap * gap
        diam = math.sqrt(max(dt, ds))
        if diam <= eta * math.sqrt(dist2):
            if nf == far.shape[0]:
                far = _grow(far)
            far[nf, 0] = t
            far[nf, 1] = s
            nf += 1
            continue
        t_leaf = t_child[t, 0] < 0
        s_leaf = s_child[s, 0] < 0
        if t_leaf and s_leaf:
            if nn == near.shape[0]:
                near = _grow(near)
            near[nn, 0] = t
            near[nn, 1] = s
            nn += 1
            continue
        split_t = (not t_leaf) and (s_leaf or t_size[t] >= s_size[s])
        if top + 2 > stack.shape[0]:
            stack = _grow(stack)
        if split_t:
            for k in range(2):
                stack[top, 0] = t_child[t, k]
                stack[top, 1] = s
                top += 1
        else:
            for k in range(2):
                stack[top, 0] = t
                stack[top, 1] = s_child[s, k]
                top += 1
    return far[:nf].copy(), near[:nn].copy()


@njit(cache=True)
def _grow(a):
    b = np.empty((2 * a.shape[0], a.shape[1]), a.dtype)
    b[: a.shape[0]] = a
    return b


@njit(cache=True, inline="always")
def _rule3(x0, x1, x2, d0, d1, d2, deriv, gp, j, sign_z, area):
    """3-point rule of 1/r (or of d . grad 1/r when ``deriv``) over panel j or its image.

    Scalars only: array views in this innermost loop cost more than the arithmetic.
    """
    v = 0.0
    for q in range(3):
        dx = x0 - gp[j, q, 0]
        dy = x1 - gp[j, q, 1]
        dz = x2 - sign_z * gp[j, q, 2]
        r2 = dx * dx + dy * dy + dz * dz
        inv = 1.0 / math.sqrt(r2)
        if deriv:
            v -= (d0 * dx + d1 * dy + d2 * dz) * inv / r2
        else:
            v += inv
    return v * area / 3.0


@njit(cache=True, inline="always")
def _pick(buf, d0, d1, d2, deriv):
    if deriv:
        return d0 * buf[1] + d1 * buf[2] + d2 * buf[3]
    return buf[0]


@njit(cache=True, inline="always")
def _entry(
    i,
    targets,
    dirs,
    deriv,
    j,
    corners,
    centroids,
    areas,
    diams,
    gp,
    image,
    r3,
    w3,
    r7,
    w7,
    buf,
    tri,
    cen,
):
    """(1/4 pi) times the integral over panel j (minus its image) of 1/r at target i, or of its
    derivative along dirs[i] when ``deriv``.

    Far pairs take the 3-point rule inline (the bulk of the entries); near ones the
    distance-chosen rule of :func:`panel_integrals.panel_integral`.
    """
    x0 = targets[i, 0]
    x1 = targets[i, 1]
    x2 = targets[i, 2]
    d0 = d1 = d2 = 0.0
    if deriv:
        d0 = dirs[i, 0]
        d1 = dirs[i, 1]
        d2 = dirs[i, 2]
    if image and x2 == 0.0:
        # On the plane itself the image doubles the normal derivative and cancels the rest.
        if not deriv:
            return 0.0
        d0 = 0.0
        d1 = 0.0
        d2 = 2.0 * d2
        image = False
    lim = (FAR_RULE_FACTOR * diams[j]) ** 2
    dx = x0 - centroids[j, 0]
    dy = x1 - centroids[j, 1]
    dz = x2 - centroids[j, 2]
    if dx * dx + dy * dy + dz * dz >= lim:
        v = _rule3(x0, x1, x2, d0, d1, d2, deriv, gp, j, 1.0, areas[j])
    else:
        pint.panel_integral(
            targets[i], corners[j], centroids[j], areas[j], diams[j], r3, w3, r7, w7, buf
        )
        v = _pick(buf, d0, d1, d2, deriv)
    if image:
        dz = x2 + centroids[j, 2]
        if dx * dx + dy * dy + dz * dz >= lim:
            v -= _rule3(x0, x1, x2, d0, d1, d2, deriv, gp, j, -1.0, areas[j])
        else:
            for a in range(3):
                tri[a, 0] = corners[j, a, 0]
                tri[a, 1] = corners[j, a, 1]
                tri[a, 2] = -corners[j, a, 2]
            cen[0] = centroids[j, 0]
            cen[1] = centroids[j, 1]
            cen[2] = -centroids[j, 2]
            pint.panel_integral(targets[i], tri, cen, areas[j], diams[j], r3, w3, r7, w7, buf)
            v -= _pick(buf, d0, d1, d2, deriv)
    return v / (4.0 * math.pi)


@njit(cache=True, inline="always")
def _mirror_terms(
    i,
    targets,
    dirs,
    deriv,
    j,
    corners,
    centroids,
    areas,
    diams,
    gp,
    image,
    mirror_w,
    r3,
    w3,
    r7,
    w7,
    buf,
    tri,
    cen,
):
    """What the mirror images of panel j add to :func:`_entry` at target i: targets (G M, 3)
    hold the M targets reflected by each of the G group elements (element 0 the identity),
    and the integral over the image of panel j under element g is that over panel j at the
    reflected target, weighted by ``mirror_w[g, j]`` (0 for an image already counted).
    Called only when G > 1, so that the unfolded entries keep :func:`_entry` inline."""
    n_group = mirror_w.shape[0]
    m = targets.shape[0] // n_group
    v = 0.0
    for g in range(1, n_group):
        w = mirror_w[g, j]
        if w != 0.0:
            v += w * _entry(
                g * m + i,
                targets,
                dirs,
                deriv,
                j,
                corners,
                centroids,
                areas,
                diams,
                gp,
                image,
                r3,
                w3,
                r7,
                w7,
                buf,
                tri,
                cen,
            )
    return v


@njit(cache=True, parallel=True)
def _near_blocks(
    blocks,
    t_start,
    t_end,
    s_start,
    s_end,
    t_perm,
    s_perm,
    offsets,
    targets,
    dirs,
    deriv,
    corners,
    centroids,
    areas,
    diams,
    gp,
    image,
    mirror_w,
    r3,
    w3,
    r7,
    w7,
):
    out = np.empty(offsets[-1], np.float32)
    folded = mirror_w.shape[0] > 1
    for b in prange(blocks.shape[0]):
        buf = np.empty(4)
        tri = np.empty((3, 3))
        cen = np.empty(3)
        t = blocks[b, 0]
        s = blocks[b, 1]
        k = offsets[b]
        for ii in range(t_start[t], t_end[t]):
            i = t_perm[ii]
            for jj in range(s_start[s], s_end[s]):
                v = _entry(
                    i,
                    targets,
                    dirs,
                    deriv,
                    s_perm[jj],
                    corners,
                    centroids,
                    areas,
                    diams,
                    gp,
                    image,
                    r3,
                    w3,
                    r7,
                    w7,
                    buf,
                    tri,
                    cen,
                )
                if folded:
                    v += _mirror_terms(
                        i,
                        targets,
                        dirs,
                        deriv,
                        s_perm[jj],
                        corners,
                        centroids,
                        areas,
                        diams,
                        gp,
                        image,
                        mirror_w,
                        r3,
                        w3,
                        r7,
                        w7,
                        buf,
                        tri,
                        cen,
                    )
                out[k] = v
                k += 1
    return out


@njit(cache=True, parallel=True)
def _dense_entries(
    targets, dirs, deriv, corners, centroids, areas, diams, gp, image, r3, w3, r7, w7
):
    m = targets.shape[0]
    out = np.empty((m, corners.shape[0]))
    for i in prange(m):
        buf = np.empty(4)
        tri = np.empty((3, 3))
        cen = np.empty(3)
        for j in range(corners.shape[0]):
            out[i, j] = _entry(
                i,
                targets,
                dirs,
                deriv,
                j,
                corners,
                centroids,
                areas,
                diams,
                gp,
                image,
                r3,
                w3,
                r7,
                w7,
                buf,
                tri,
                cen,
            )
    return out


def dense_rows(
    panels: PanelSet, targets: np.ndarray, directions: np.ndarray | None = None
) -> np.ndarray:
    """(M, N) every entry of the (uncompressed) matrix :class:`HMatrix` approximates: the
    potential at ``targets`` (M, 3), or its derivative along ``directions`` (M, 3)."""
    corners, centroids, areas, diams = panels.kernel_arrays
    deriv = directions is not None
    dirs = np.ascontiguousarray(directions if deriv else np.zeros((1, 3)), dtype=float)
    gp = np.ascontiguousarray(np.einsum("qk,tkc->tqc", pint.RULE3_BARY, corners))
    return _dense_entries(
        np.ascontiguousarray(targets, dtype=float),
        dirs,
        deriv,
        corners,
        centroids,
        areas,
        diams,
        gp,
        panels.ground_plane,
        *pint.rules(),
    )


@njit(cache=True)
def _aca_row_pivot(row, ubuf, vbuf, i_star, k, n, used_c):
    """ACA step, row half: subtract the k crosses found so far from ``row`` (n,), the block's
    row ``i_star``, in place; return the unused column of its largest residual, or -1 when
    the residual row is zero (already represented). Shared by every entry kernel."""
    for q in range(k):
        u = ubuf[q, i_star]
        for j in range(n):
            row[j] -= u * vbuf[q, j]
    j_star = -1
    best = 0.0
    for j in range(n):
        if not used_c[j] and abs(row[j]) > best:
            best = abs(row[j])
            j_star = j
    return j_star


@njit(cache=True)
def _first_unused(used):
    """Index of the first False in ``used``, or -1."""
    for i in range(used.shape[0]):
        if not used[i]:
            return i
    return -1


@njit(cache=True)
def _aca_take_cross(ubuf, vbuf, col, row, piv, j_star, k, m, n, used_r):
    """ACA step, column half: subtract the k crosses from ``col`` (m,), the block's column
    ``j_star``, in place, store cross k (U^T row col, V row row / piv), and return
    (|u_k|^2 |v_k|^2, the growth of the approximation's squared Frobenius norm, the unused
    row of col's largest entry or -1)."""
    for q in range(k):
        v = vbuf[q, j_star]
        for i in range(m):
            col[i] -= ubuf[q, i] * v
    uu = 0.0
    for i in range(m):
        ubuf[k, i] = col[i]
        uu += col[i] * col[i]
    vv = 0.0
    for j in range(n):
        vbuf[k, j] = row[j] / piv
        vv += vbuf[k, j] * vbuf[k, j]
    cross = 0.0
    for q in range(k):
        a = 0.0
        for i in range(m):
            a += ubuf[q, i] * col[i]
        c = 0.0
        for j in range(n):
            c += vbuf[q, j] * vbuf[k, j]
        cross += a * c
    best = -1.0
    i_next = -1
    for i in range(m):
        if not used_r[i] and abs(col[i]) > best:
            best = abs(col[i])
            i_next = i
    return uu * vv, uu * vv + 2.0 * cross, i_next


#: What a cross approximation does after a cross (:func:`_after_cross`).
ACA_GO_ON, ACA_STOP, ACA_CHECK = 0, 1, 2


@njit(cache=True, inline="always")
def _after_cross(last, grow, norm2, k, tol, small, i_next):
    """Book a cross whose squared size is ``last`` (the approximation's squared Frobenius
    norm grows by ``grow`` from ``norm2``; k crosses before it; ``small`` small crosses in a
    row before it; ``i_next`` the next pivot row, -1 for none). Returns (norm2, k, small,
    :data:`ACA_GO_ON` / :data:`ACA_STOP` / :data:`ACA_CHECK`: check sampled rows)."""
    norm2 += grow
    small = small + 1 if last <= tol * tol * norm2 else 0
    if i_next < 0:
        return norm2, k + 1, small, ACA_STOP
    return norm2, k + 1, small, ACA_CHECK if small >= ACA_CONFIRM else ACA_GO_ON


@njit(cache=True)
def _check_entries(m: int, n: int, used_r: np.ndarray, k: int) -> tuple[np.ndarray, np.ndarray]:
    """Rows and columns of :data:`ACA_CHECK_ENTRIES` entries of an (m, n) block in rows not
    yet used as pivots, spread over it (tree order is spatial) by the two-dimensional
    golden-ratio sequence from step k (a later check reads others); none when every row is
    used."""
    rows = np.empty(ACA_CHECK_ENTRIES, np.int64)
    cols = np.empty(ACA_CHECK_ENTRIES, np.int64)
    for q in range(ACA_CHECK_ENTRIES):
        t = k * ACA_CHECK_ENTRIES + q + 1
        x = 0.5 + t * 0.7548776662466927
        y = 0.5 + t * 0.5698402909980532
        i = int((x - math.floor(x)) * m)
        for _ in range(m):
            if not used_r[i]:
                break
            i = (i + 1) % m
        if used_r[i]:
            return rows[:0], cols[:0]
        rows[q] = i
        cols[q] = int((y - math.floor(y)) * n)
    return rows, cols


@njit(cache=True)
def _check_verdict(vals, rows, cols, ubuf, vbuf, k, m, n, norm2, tol) -> int:
    """-1 when the residuals at the sampled entries (``vals`` at ``rows``, ``cols``, P of
    them) confirm the k crosses: the squared Frobenius error extrapolated from them (times
    m n / P) below tol^2 ``norm2``; else the row of the largest residual (the next pivot)."""
    total = 0.0
    worst = -1.0
    i_worst = -1
    for q in range(len(rows)):
        v = vals[q]
        for c in range(k):
            v -= ubuf[c, rows[q]] * vbuf[c, cols[q]]
        total += v * v
        if v * v > worst:
            worst = v * v
            i_worst = rows[q]
    if total * m * n <= tol * tol * norm2 * max(len(rows), 1):
        return -1
    return i_worst


@njit(cache=True, inline="always")
def _block_entry(
    i, j, targets, dirs, deriv, corners, centroids, areas, diams, gp, image, mirror_w, r3, w3,
    r7, w7, buf, tri, cen,
):  # fmt: skip
    """:func:`_entry` of target i and panel j plus its mirror terms when folded (the sampled
    entries of a check; the cross's rows and columns spell it out for speed)."""
    v = _entry(
        i, targets, dirs, deriv, j, corners, centroids, areas, diams, gp, image, r3, w3, r7,
        w7, buf, tri, cen,
    )  # fmt: skip
    if mirror_w.shape[0] > 1:
        v += _mirror_terms(
            i, targets, dirs, deriv, j, corners, centroids, areas, diams, gp, image, mirror_w,
            r3, w3, r7, w7, buf, tri, cen,
        )  # fmt: skip
    return v


@njit(cache=True)
def _aca_block(
    rows,
    cols,
    targets,
    dirs,
    deriv,
    corners,
    centroids,
    areas,
    diams,
    gp,
    image,
    mirror_w,
    r3,
    w3,
    r7,
    w7,
    tol,
    max_rank,
    recompress,
    ubuf,
    vbuf,
):
    """ACA with partial pivoting (+ SVD recompression when ``recompress``), ended by
    :data:`ACA_CONFIRM` small crosses and a passed check of sampled entries
    (:func:`_check_entries`). Returns the rank k; U^T in ubuf[:k, :m], V in vbuf[:k, :n]."""
    m = rows.shape[0]
    n = cols.shape[0]
    folded = mirror_w.shape[0] > 1
    buf = np.empty(4)
    tri = np.empty((3, 3))
    cen = np.empty(3)
    used_r = np.zeros(m, np.bool_)
    used_c = np.zeros(n, np.bool_)
    row = np.empty(n)
    col = np.empty(m)
    checked = np.empty(ACA_CHECK_ENTRIES)
    norm2 = 0.0
    small = 0
    k = 0
    i_star = 0
    kmax = min(max_rank, m, n)
    while k < kmax:
        used_r[i_star] = True
        # Rows and columns spell out _block_entry: through the inline helper the guarded-pad
        # demo took 12.5 s CPU instead of 10.8 (bench_bem3d.py --pad-only, 3 Dec 2026).
        for j in range(n):
            v = _entry(
                rows[i_star], targets, dirs, deriv, cols[j], corners, centroids, areas, diams,
                gp, image, r3, w3, r7, w7, buf, tri, cen,
            )  # fmt: skip
            if folded:
                v += _mirror_terms(
                    rows[i_star], targets, dirs, deriv, cols[j], corners, centroids, areas,
                    diams, gp, image, mirror_w, r3, w3, r7, w7, buf, tri, cen,
                )  # fmt: skip
            row[j] = v
        j_star = _aca_row_pivot(row, ubuf, vbuf, i_star, k, n, used_c)
        if j_star < 0:
            # This row is already represented; try the next unused row.
            i_star = _first_unused(used_r)
            if i_star < 0:
                break
            continue
        used_c[j_star] = True
        piv = row[j_star]
        for i in range(m):
            v = _entry(
                rows[i], targets, dirs, deriv, cols[j_star], corners, centroids, areas, diams,
                gp, image, r3, w3, r7, w7, buf, tri, cen,
            )  # fmt: skip
            if folded:
                v += _mirror_terms(
                    rows[i], targets, dirs, deriv, cols[j_star], corners, centroids, areas,
                    diams, gp, image, mirror_w, r3, w3, r7, w7, buf, tri, cen,
                )  # fmt: skip
            col[i] = v
        last, grow, i_star = _aca_take_cross(ubuf, vbuf, col, row, piv, j_star, k, m, n, used_r)
        norm2, k, small, step = _after_cross(last, grow, norm2, k, tol, small, i_star)
        if step == ACA_STOP:
            break
        if step == ACA_GO_ON:
            continue
        ci, cj = _check_entries(m, n, used_r, k)
        for q in range(len(ci)):
            checked[q] = _block_entry(
                rows[ci[q]], cols[cj[q]], targets, dirs, deriv, corners, centroids, areas, diams,
                gp, image, mirror_w, r3, w3, r7, w7, buf, tri, cen,
            )  # fmt: skip
        i_star = _check_verdict(checked, ci, cj, ubuf, vbuf, k, m, n, norm2, tol)
        if i_star < 0:
            break
        small = 0
    if k <= 1 or not recompress:
        return k
    return _recompress(ubuf, vbuf, k, m, n, tol)


@njit(cache=True)
def _orthonormalise(rows: np.ndarray, k: int, length: int) -> np.ndarray:
    """Modified Gram-Schmidt, twice, on rows[:k, :length] in place; returns R (k, k) with
    rows_before = R^T Q (Q the new rows; a dependent row becomes zero)."""
    r = np.zeros((k, k))
    for q in range(k):
        for _ in range(2):
            for p in range(q):
                dot = 0.0
                for i in range(length):
                    dot += rows[p, i] * rows[q, i]
                r[p, q] += dot
                for i in range(length):
                    rows[q, i] -= dot * rows[p, i]
        nrm = 0.0
        for i in range(length):
            nrm += rows[q, i] * rows[q, i]
        nrm = math.sqrt(nrm)
        r[q, q] = nrm
        inv = 1.0 / nrm if nrm > 0.0 else 0.0
        for i in range(length):
            rows[q, i] *= inv
    return r


@njit(cache=True)
def _recompress(ubuf, vbuf, k, m, n, tol):
    """Truncate U V (U^T in ubuf[:k, :m], V in vbuf[:k, :n]) to the singular values above
    tol * the largest: U = Qu Ru, V^T = Qv Rv by Gram-Schmidt (no LAPACK call per block,
    whose overhead dominated), then the SVD of the small core Ru Rv^T = W S Z^T."""
    ru = _orthonormalise(ubuf, k, m)
    rv = _orthonormalise(vbuf, k, n)
    w, sv, zt = np.linalg.svd(ru @ rv.T)
    r = 0
    while r < k and sv[r] > tol * sv[0]:
        r += 1
    r = max(r, 1)
    # New U^T rows: (W S)^T Qu; new V rows: Z^T Qv.
    un = np.zeros((r, m))
    vn = np.zeros((r, n))
    for a in range(r):
        for q in range(k):
            cu = w[q, a] * sv[a]
            cv = zt[a, q]
            for i in range(m):
                un[a, i] += cu * ubuf[q, i]
            for j in range(n):
                vn[a, j] += cv * vbuf[q, j]
    for a in range(r):
        for i in range(m):
            ubuf[a, i] = un[a, i]
        for j in range(n):
            vbuf[a, j] = vn[a, j]
    return r


@njit(cache=True, parallel=True)
def _aca_batch(
    blocks,
    t_start,
    t_end,
    s_start,
    s_end,
    t_perm,
    s_perm,
    targets,
    dirs,
    deriv,
    corners,
    centroids,
    areas,
    diams,
    gp,
    image,
    mirror_w,
    r3,
    w3,
    r7,
    w7,
    tol,
    max_rank,
    recompress,
    uoff,
    voff,
    ubig,
    vbig,
    ranks,
):
    for b in prange(blocks.shape[0]):
        t = blocks[b, 0]
        s = blocks[b, 1]
        m = t_end[t] - t_start[t]
        n = s_end[s] - s_start[s]
        kmax = min(max_rank, m, n)
        ubuf = ubig[uoff[b] : uoff[b] + m * kmax].reshape((kmax, m))
        vbuf = vbig[voff[b] : voff[b] + kmax * n].reshape((kmax, n))
        rows = t_perm[t_start[t] : t_end[t]]
        cols = s_perm[s_start[s] : s_end[s]]
        ranks[b] = _aca_block(
            rows,
            cols,
            targets,
            dirs,
            deriv,
            corners,
            centroids,
            areas,
            diams,
            gp,
            image,
            mirror_w,
            r3,
            w3,
            r7,
            w7,
            tol,
            max_rank,
            recompress,
            ubuf,
            vbuf,
        )


@njit(cache=True)
def _matvec(
    x,
    n_t,
    near_blocks,
    near_off,
    t_start,
    t_end,
    s_start,
    s_end,
    near_vals,
    far_blocks,
    far_uoff,
    far_voff,
    far_rank,
    u,
    v,
):
    """The product A x (tree order)."""
    y = np.zeros(n_t)
    for b in range(near_blocks.shape[0]):
        t = near_blocks[b, 0]
        s = near_blocks[b, 1]
        k = near_off[b]
        for i in range(t_start[t], t_end[t]):
            a = 0.0
            for j in range(s_start[s], s_end[s]):
                a += near_vals[k] * x[j]
                k += 1
            y[i] += a
    z = np.zeros(MAX_RANK)
    for b in range(far_blocks.shape[0]):
        t = far_blocks[b, 0]
        s = far_blocks[b, 1]
        r = far_rank[b]
        n = s_end[s] - s_start[s]
        m = t_end[t] - t_start[t]
        vo = far_voff[b]
        uo = far_uoff[b]
        for q in range(r):
            a = 0.0
            base = vo + q * n
            for j in range(n):
                a += v[base + j] * x[s_start[s] + j]
            z[q] = a
        for i in range(m):
            a = 0.0
            base = uo + i * r
            for q in range(r):
                a += u[base + q] * z[q]
            y[t_start[t] + i] += a
    return y


@njit(cache=True)
def _rmatvec(
    w,
    n_s,
    near_blocks,
    near_off,
    t_start,
    t_end,
    s_start,
    s_end,
    near_vals,
    far_blocks,
    far_uoff,
    far_voff,
    far_rank,
    u,
    v,
):
    """The transposed product w^T A (tree order); serial (it is needed once per level)."""
    out = np.zeros(n_s)
    for b in range(near_blocks.shape[0]):
        t = near_blocks[b, 0]
        s = near_blocks[b, 1]
        k = near_off[b]
        for i in range(t_start[t], t_end[t]):
            wi = w[i]
            for j in range(s_start[s], s_end[s]):
                out[j] += near_vals[k] * wi
                k += 1
    for b in range(far_blocks.shape[0]):
        t = far_blocks[b, 0]
        s = far_blocks[b, 1]
        r = far_rank[b]
        n = s_end[s] - s_start[s]
        m = t_end[t] - t_start[t]
        z = np.zeros(r)
        for i in range(m):
            wi = w[t_start[t] + i]
            base = far_uoff[b] + i * r
            for q in range(r):
                z[q] += u[base + q] * wi
        for q in range(r):
            base = far_voff[b] + q * n
            for j in range(n):
                out[s_start[s] + j] += z[q] * v[base + j]
    return out


def _batches(far: np.ndarray, tsz: np.ndarray, ssz: np.ndarray) -> list[tuple[int, int]]:
    """Consecutive runs of far blocks, at most _BATCH blocks and about _BATCH_SCRATCH scratch
    entries each (at least one block)."""
    m, n = tsz[far[:, 0]], ssz[far[:, 1]]
    need = np.cumsum((m + n) * np.minimum(np.minimum(m, n), MAX_RANK))
    out, b0 = [], 0
    while b0 < len(far):
        base = need[b0 - 1] if b0 else 0
        b1 = int(np.searchsorted(need, base + _BATCH_SCRATCH, side="right"))
        b1 = min(max(b1, b0 + 1), b0 + _BATCH)
        out.append((b0, b1))
        b0 = b1
    return out


@dataclass(frozen=True)
class _Blocks:
    """The block partition of one matrix and its data in tree order (what the kernels take)."""

    targets: ClusterTree
    sources: ClusterTree
    near: np.ndarray
    far: np.ndarray
    kernel_args: tuple

    @property
    def tsz(self) -> np.ndarray:
        return self.targets.end - self.targets.start

    @property
    def ssz(self) -> np.ndarray:
        return self.sources.end - self.sources.start

    @property
    def tree_args(self) -> tuple:
        t, s = self.targets, self.sources
        ident_t = np.arange(len(t.perm), dtype=np.int64)
        ident_s = np.arange(len(s.perm), dtype=np.int64)
        return t.start, t.end, s.start, s.end, ident_t, ident_s


@dataclass(frozen=True)
class MirrorFold:
    """Columns summed over mirror images: column r is the sum over the group elements g of
    ``weights[g, r]`` times the column of the image under g of panel ``sources[r]`` (R,).
    ``signs`` (G, 3): each element's reflection of coordinates (row 0 the identity, all +1).

    Valid in a compressed matrix when the targets and the ``sources`` lie in one closed
    quadrant of the mirror planes: a reflected target is then at least as far from a source
    cluster as the target itself, so a block admissible for the target is so for its images.
    """

    sources: np.ndarray
    signs: np.ndarray
    weights: np.ndarray


def _partition_blocks(
    panels: PanelSet,
    targets: np.ndarray | None,
    directions: np.ndarray | None,
    eta: float,
    leaf: int,
    fold: MirrorFold | None = None,
) -> _Blocks:
    corners, centroids, areas, diams = panels.kernel_arrays
    pts = centroids if targets is None else np.ascontiguousarray(targets, dtype=float)
    deriv = directions is not None
    dirs = np.ascontiguousarray(directions if deriv else np.zeros((1, 3)), dtype=float)
    if fold is None:
        signs, weights = np.ones((1, 3)), np.ones((1, len(corners)))
    else:
        k = fold.sources
        corners, centroids, areas, diams = corners[k], centroids[k], areas[k], diams[k]
        signs, weights = np.asarray(fold.signs, float), np.asarray(fold.weights, float)
    tt = cluster_tree(pts, pts, pts, leaf)
    src = cluster_tree(centroids, corners.min(axis=1), corners.max(axis=1), leaf)
    far, near = _partition(
        tt.lo,
        tt.hi,
        tt.child,
        tt.end - tt.start,
        src.lo,
        src.hi,
        src.child,
        src.end - src.start,
        eta,
    )
    # Order blocks by target cluster start so that chunks touch few rows.
    near = near[np.lexsort((near[:, 1], tt.start[near[:, 0]]))]
    far = far[np.lexsort((far[:, 1], tt.start[far[:, 0]]))]
    # Panel and target data in tree order: the kernels then read memory in sequence
    # (scattered reads cost several times the arithmetic of a far entry).
    sp, tp = src.perm, tt.perm
    corners = np.ascontiguousarray(corners[sp])
    gp = np.ascontiguousarray(np.einsum("qk,tkc->tqc", pint.RULE3_BARY, corners))
    # Targets (and directions) reflected by each group element, one after the other.
    kernel_args = (
        np.ascontiguousarray(np.concatenate([pts[tp] * g for g in signs])),
        np.ascontiguousarray(np.concatenate([dirs[tp] * g for g in signs])) if deriv else dirs,
        deriv,
        corners,
        np.ascontiguousarray(centroids[sp]),
        np.ascontiguousarray(areas[sp]),
        np.ascontiguousarray(diams[sp]),
        gp,
        panels.ground_plane,
        np.ascontiguousarray(weights[:, sp]),
        *pint.rules(),
    )
    return _Blocks(tt, src, near, far, kernel_args)


def _near_values(bl: _Blocks, near: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Offsets (B + 1,) and float32 entries of the dense blocks ``near`` (B, 2), row-major."""
    sizes = bl.tsz[near[:, 0]] * bl.ssz[near[:, 1]]
    off = np.concatenate([[0], np.cumsum(sizes)]).astype(np.int64)
    with numba.parallel_chunksize(1):
        return off, _near_blocks(near, *bl.tree_args, off, *bl.kernel_args)


def _cross_batches(bl: _Blocks, tol: float, recompress: bool):
    """Per batch of far blocks (:func:`_batches`): (first, last, m, n, kmax, uoff, voff, U^T,
    V, ranks), block b's U^T in ubig[uoff[b]:uoff[b + 1]] as (kmax[b], m[b]) rows, V
    likewise."""
    tsz, ssz = bl.tsz, bl.ssz
    batches = _batches(bl.far, tsz, ssz)
    # One scratch for every batch (rows beyond a block's rank are never read): fresh arrays
    # per batch left the heap fragmented, 50 MB above the stored blocks on the pad demo.
    kall = np.minimum(np.minimum(tsz[bl.far[:, 0]], ssz[bl.far[:, 1]]), MAX_RANK)
    need_u = np.concatenate([[0], np.cumsum(tsz[bl.far[:, 0]] * kall)])
    need_v = np.concatenate([[0], np.cumsum(ssz[bl.far[:, 1]] * kall)])
    ubuf = np.empty(max((int(need_u[b1] - need_u[b0]) for b0, b1 in batches), default=0))
    vbuf = np.empty(max((int(need_v[b1] - need_v[b0]) for b0, b1 in batches), default=0))
    for b0, b1 in batches:
        blk = bl.far[b0:b1]
        m = tsz[blk[:, 0]]
        n = ssz[blk[:, 1]]
        kmax = kall[b0:b1]
        uoff = (need_u[b0 : b1 + 1] - need_u[b0]).astype(np.int64)
        voff = (need_v[b0 : b1 + 1] - need_v[b0]).astype(np.int64)
        ubig = ubuf[: uoff[-1]]
        vbig = vbuf[: voff[-1]]
        rk = np.zeros(len(blk), np.int64)
        with numba.parallel_chunksize(1):
            _aca_batch(
                blk,
                *bl.tree_args,
                *bl.kernel_args,
                tol,
                MAX_RANK,
                recompress,
                uoff,
                voff,
                ubig,
                vbig,
                rk,
            )
        yield b0, b1, m, n, kmax, uoff, voff, ubig, vbig, rk


@njit(cache=True)
def _compact(m, n, kmax, uoff, voff, ubig, vbig, ranks, u32, v32):
    """One batch's factors at their ranks into u32, v32, as the product reads them: U (m, r)
    and V (r, n) of each block in turn, row-major."""
    pu = 0
    pv = 0
    for b in range(ranks.shape[0]):
        r = ranks[b]
        for i in range(m[b]):
            for q in range(r):
                u32[pu] = ubig[uoff[b] + q * m[b] + i]
                pu += 1
        for q in range(r):
            for j in range(n[b]):
                v32[pv] = vbig[voff[b] + q * n[b] + j]
                pv += 1


#: Dense-block entries formed per step of :func:`apply_once` (float32: 4 bytes each).
_NEAR_STEP = 2_000_000


def apply_once(
    panels: PanelSet,
    density: np.ndarray,
    *,
    tol: float,
    targets: np.ndarray,
    directions: np.ndarray | None = None,
    eta: float = ETA,
    leaf: int = LEAF,
) -> np.ndarray:
    """(M, K): the product of the matrix :class:`HMatrix` would store for ``targets`` (M, 3)
    (and ``directions``) with ``density`` (N, K), its blocks made and applied batch by batch
    (module docstring); memory beyond the result is one batch."""
    bl = _partition_blocks(panels, targets, directions, eta, leaf)
    dens = np.asarray(density, dtype=float)
    x = np.ascontiguousarray(dens.reshape(len(dens), -1)[bl.sources.perm])
    y = np.zeros((len(bl.targets.perm), x.shape[1]))
    ends = bl.tree_args[:4]
    no_blocks, no_off = np.zeros((0, 2), np.int64), np.zeros(1, np.int64)
    no_vals = np.zeros(0, np.float32)
    sizes = bl.tsz[bl.near[:, 0]] * bl.ssz[bl.near[:, 1]]
    cut = np.searchsorted(np.cumsum(sizes), np.arange(_NEAR_STEP, sizes.sum(), _NEAR_STEP))
    for part in np.split(bl.near, np.unique(cut + 1)):
        if len(part):
            off, vals = _near_values(bl, part)
            far = (no_blocks, no_off[:0], no_off[:0], no_off[:0], no_vals, no_vals)
            for c in range(x.shape[1]):
                y[:, c] += _matvec(x[:, c].copy(), len(y), part, off, *ends, vals, *far)
    for b0, b1, m, n, kmax, uoff, voff, ubig, vbig, rk in _cross_batches(bl, tol, False):
        u32 = np.empty(int(np.sum(m * rk)), np.float32)
        v32 = np.empty(int(np.sum(n * rk)), np.float32)
        _compact(m, n, kmax, uoff, voff, ubig, vbig, rk, u32, v32)
        uo = np.concatenate([[0], np.cumsum(m * rk)[:-1]]).astype(np.int64)
        vo = np.concatenate([[0], np.cumsum(n * rk)[:-1]]).astype(np.int64)
        far = (bl.far[b0:b1], uo, vo, rk, u32, v32)
        for c in range(x.shape[1]):
            y[:, c] += _matvec(x[:, c].copy(), len(y), no_blocks, no_off, *ends, no_vals, *far)
    out = np.empty_like(y)
    out[bl.targets.perm] = y
    return out


class HMatrix:
    """The collocation matrix of a panel set, or the (M, N) matrix of the potential (or of
    its derivative along ``directions`` (M, 3)) at arbitrary ``targets`` (M, 3); entries are
    (1/4 pi) integral 1/r dA' (see the module docstring).

    ``recompress`` truncates each cross approximation by SVD (default). Without it a matrix
    for a product or two builds about 20 % faster but stores about 30 % more (measured on the
    guarded-pad demo's plane rule). With a ``fold`` the columns are the R (< N) orbit sums
    of :class:`MirrorFold` (the matrix is then (M, R)).
    """

    def __init__(
        self,
        panels: PanelSet,
        *,
        tol: float,
        targets: np.ndarray | None = None,
        directions: np.ndarray | None = None,
        eta: float = ETA,
        leaf: int = LEAF,
        recompress: bool = True,
        fold: MirrorFold | None = None,
    ) -> None:
        t0 = time.perf_counter()
        bl = _partition_blocks(panels, targets, directions, eta, leaf, fold)
        self.n = len(bl.sources.perm)
        self.m = len(bl.targets.perm)
        self.tol = tol
        self.targets = bl.targets
        self.sources = bl.sources
        near, far = bl.near, bl.far
        tsz, ssz = bl.tsz, bl.ssz
        self.near_blocks = near
        self.near_off, self.near_vals = _near_values(bl, near)
        self.time_near_s = time.perf_counter() - t0
        u, v = np.empty(0, np.float32), np.empty(0, np.float32)
        ranks = []
        for _, _, m, n, kmax, uoff, voff, ubig, vbig, rk in _cross_batches(bl, tol, recompress):
            at_u, at_v = len(u), len(v)
            # In place (realloc): a list of parts joined at the end peaked at twice the size.
            u.resize(at_u + int(np.sum(m * rk)), refcheck=False)
            v.resize(at_v + int(np.sum(n * rk)), refcheck=False)
            _compact(m, n, kmax, uoff, voff, ubig, vbig, rk, u[at_u:], v[at_v:])
            ranks.append(rk)
        self.far_blocks = far
        self.far_rank = np.concatenate(ranks) if ranks else np.zeros(0, np.int64)
        self.u = u
        self.v = v
        self.far_uoff = np.concatenate([[0], np.cumsum(tsz[far[:, 0]] * self.far_rank)])[
            :-1
        ].astype(np.int64)
        self.far_voff = np.concatenate([[0], np.cumsum(ssz[far[:, 1]] * self.far_rank)])[
            :-1
        ].astype(np.int64)
        self.setup_s = time.perf_counter() - t0

    @property
    def nbytes(self) -> int:
        return int(self.near_vals.nbytes + self.u.nbytes + self.v.nbytes)

    @property
    def _blocks(self) -> tuple:
        """The stored blocks as the product kernels take them."""
        return (
            self.near_blocks,
            self.near_off,
            self.targets.start,
            self.targets.end,
            self.sources.start,
            self.sources.end,
            self.near_vals,
            self.far_blocks,
            self.far_uoff,
            self.far_voff,
            self.far_rank,
            self.u,
            self.v,
        )

    def rmatvec(self, w: np.ndarray) -> np.ndarray:
        """w^T A (N,) for weights ``w`` (M,) on the targets."""
        ws = np.ascontiguousarray(np.asarray(w, dtype=float)[self.targets.perm])
        yp = _rmatvec(ws, self.n, *self._blocks)
        y = np.empty(self.n)
        y[self.sources.perm] = yp
        return y

    def matvec(self, x: np.ndarray) -> np.ndarray:
        xs = np.ascontiguousarray(np.asarray(x, dtype=float)[self.sources.perm])
        yp = _matvec(xs, self.m, *self._blocks)
        y = np.empty(self.m)
        y[self.targets.perm] = yp
        return y

"""Compressed (hierarchical) form of the layered operator of :mod:`.layered_green`.

The layered kernel of a target slab t and a source slab s is a sum of exact images, each
``coef`` / |x - x*| with the source panel mapped to z* = c0 + m z' (the direct term is the
identity map), plus a smooth remainder read from bicubic tables. Every part keeps the
machinery of the homogeneous fast path:

- an image part is the homogeneous kernel with the *mapped panels* as sources, compressed by
  :class:`elopt.physics.bem3d.hmatrix.HMatrix` unchanged: its near blocks (an image lying on
  or near the targets, e.g. a pad resting on a layer face and its own image) get the accurate
  panel integrals, its admissible blocks cross approximation; an image far from every target
  is one admissible block of low rank;
- the remainder part (:class:`RemainderHMatrix`) is compressed the same way (cluster trees,
  the same admissibility, ACA with SVD recompression), its entries the compiled table lookup
  of :mod:`.layered_green` with the same length-chosen rules as the dense path; its blocks
  are stored as sparse matrices (products by scipy), which depends on nothing of
  :class:`HMatrix`'s storage.

The operator is the weighted sum of the parts over every (target slab, source slab) pair, so
it approximates exactly the dense layered matrix, to the compression tolerance. Conductor rows
only: dielectric bodies in a layered background are solved densely.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from numba import njit, prange

from elopt.physics.bem3d import panel_integrals as pint
from elopt.physics.bem3d.hmatrix import (
    ACA_CHECK_ENTRIES,
    ACA_GO_ON,
    ACA_STOP,
    ETA,
    LEAF,
    MAX_RANK,
    HMatrix,
    _aca_row_pivot,
    _aca_take_cross,
    _after_cross,
    _batches,
    _check_entries,
    _check_verdict,
    _first_unused,
    _partition,
    _recompress,
    cluster_tree,
)
from elopt.physics.bem3d.layered_green import (
    LayeredBackground,
    _distinct_images,
    _mapped,
    _panel,
    _Part,
    source_rules,
)
from elopt.physics.bem3d.near_pairs import near_pairs
from elopt.physics.bem3d.operators import (
    PRECONDITIONER_FACTOR,
    FastOperator,
    incomplete_lu,
)
from elopt.physics.errors import SolverError
from elopt.physics.kernel_cache import drop_stale_kernel_caches

drop_stale_kernel_caches()

FOUR_PI = 4.0 * math.pi
#: Neighbours within this many panel sizes measure how much of a part is stored densely.
NEAR_SHARE_FACTOR = 8.0


@dataclass(frozen=True)
class _Sources:
    """Panels (or their images) as :class:`HMatrix` takes them (no ground-plane image: the
    stack's grounded plane is one of its images here)."""

    kernel_arrays: tuple
    n: int
    ground_plane: bool = False


@njit(cache=True)
def _remainder_entry(i, j, targets, dirs, deriv, rules, factors, tabs, prm, buf, res, acc):
    """The remainder of panel j at target i (its derivative along dirs[i] when ``deriv``)."""
    _panel(targets[i], j, rules, factors, tabs, prm, buf, res, acc, not deriv)
    if deriv:
        return acc[1] * dirs[i, 0] + acc[2] * dirs[i, 1] + acc[3] * dirs[i, 2]
    return acc[0]


@njit(cache=True, parallel=True)
def _remainder_near(
    blocks, t_start, t_end, s_start, s_end, offsets, targets, dirs, deriv, rules, factors, tabs, prm
):
    out = np.empty(offsets[-1])
    for b in prange(blocks.shape[0]):
        buf = np.empty(3)
        res = np.empty(3)
        acc = np.empty(4)
        t = blocks[b, 0]
        s = blocks[b, 1]
        k = offsets[b]
        for i in range(t_start[t], t_end[t]):
            for j in range(s_start[s], s_end[s]):
                out[k] = _remainder_entry(
                    i, j, targets, dirs, deriv, rules, factors, tabs, prm, buf, res, acc
                )
                k += 1
    return out


@njit(cache=True)
def _cross(r0, r1, c0, c1, targets, dirs, deriv, rules, factors, tabs, prm, tol, ubuf, vbuf):
    """ACA with partial pivoting of the remainder block rows r0:r1, panels c0:c1 (tree
    order), ended as :func:`elopt.physics.bem3d.hmatrix._aca_block` (small crosses and a
    check of sampled entries), then SVD recompression. Returns the rank k; U^T in ubuf[:k, :m],
    V in vbuf[:k, :n]."""
    m = r1 - r0
    n = c1 - c0
    buf = np.empty(3)
    res = np.empty(3)
    acc = np.empty(4)
    used_r = np.zeros(m, np.bool_)
    used_c = np.zeros(n, np.bool_)
    norm2 = 0.0
    small = 0
    k = 0
    i_star = 0
    row = np.empty(n)
    col = np.empty(m)
    checked = np.empty(ACA_CHECK_ENTRIES)
    kmax = min(MAX_RANK, m, n)
    while k < kmax:
        used_r[i_star] = True
        for j in range(n):
            row[j] = _remainder_entry(
                r0 + i_star, c0 + j, targets, dirs, deriv, rules, factors, tabs, prm, buf, res, acc
            )
        j_star = _aca_row_pivot(row, ubuf, vbuf, i_star, k, n, used_c)
        if j_star < 0:
            i_star = _first_unused(used_r)
            if i_star < 0:
                break
            continue
        used_c[j_star] = True
        piv = row[j_star]
        for i in range(m):
            col[i] = _remainder_entry(
                r0 + i, c0 + j_star, targets, dirs, deriv, rules, factors, tabs, prm, buf, res, acc
            )
        last, grow, i_star = _aca_take_cross(ubuf, vbuf, col, row, piv, j_star, k, m, n, used_r)
        norm2, k, small, step = _after_cross(last, grow, norm2, k, tol, small, i_star)
        if step == ACA_STOP:
            break
        if step == ACA_GO_ON:
            continue
        ci, cj = _check_entries(m, n, used_r, k)
        for q in range(len(ci)):
            checked[q] = _remainder_entry(
                r0 + ci[q], c0 + cj[q], targets, dirs, deriv, rules, factors, tabs, prm, buf,
                res, acc,
            )  # fmt: skip
        i_star = _check_verdict(checked, ci, cj, ubuf, vbuf, k, m, n, norm2, tol)
        if i_star < 0:
            break
        small = 0
    if k <= 1:
        return k
    return _recompress(ubuf, vbuf, k, m, n, tol)


@njit(cache=True, parallel=True)
def _remainder_far(
    blocks, t_start, t_end, s_start, s_end, targets, dirs, deriv, rules, factors, tabs, prm,
    tol, uoff, voff, ubig, vbig, ranks,
):  # fmt: skip
    for b in prange(blocks.shape[0]):
        t = blocks[b, 0]
        s = blocks[b, 1]
        m = t_end[t] - t_start[t]
        n = s_end[s] - s_start[s]
        kmax = min(MAX_RANK, m, n)
        ubuf = ubig[uoff[b] : uoff[b] + m * kmax].reshape((kmax, m))
        vbuf = vbig[voff[b] : voff[b] + kmax * n].reshape((kmax, n))
        ranks[b] = _cross(
            t_start[t], t_end[t], s_start[s], s_end[s], targets, dirs, deriv, rules, factors,
            tabs, prm, tol, ubuf, vbuf,
        )  # fmt: skip


@njit(cache=True)
def _block_entries(blocks, ranks, t_start, t_end, s_start, s_end, t_perm, s_perm):
    """Row and column indices (int32: they only address one part's rows, panels and ranks)
    of stored entries, in their storage order: without ``ranks``
    (empty) the dense blocks (row-major); else the factors U (m, r) of every block, then its
    V (r, n), the rank index counted over all blocks."""
    low = ranks.shape[0] > 0
    n_u = 0
    n_v = 0
    for b in range(blocks.shape[0]):
        m = t_end[blocks[b, 0]] - t_start[blocks[b, 0]]
        n = s_end[blocks[b, 1]] - s_start[blocks[b, 1]]
        r = ranks[b] if low else n
        n_u += m * r
        n_v += r * n if low else 0
    ur = np.empty(n_u, np.int32)
    uc = np.empty(n_u, np.int32)
    vr = np.empty(n_v, np.int32)
    vc = np.empty(n_v, np.int32)
    ku = 0
    kv = 0
    base = 0
    for b in range(blocks.shape[0]):
        t = blocks[b, 0]
        s = blocks[b, 1]
        r = ranks[b] if low else 0
        for i in range(t_start[t], t_end[t]):
            if low:
                for q in range(r):
                    ur[ku] = t_perm[i]
                    uc[ku] = base + q
                    ku += 1
            else:
                for j in range(s_start[s], s_end[s]):
                    ur[ku] = t_perm[i]
                    uc[ku] = s_perm[j]
                    ku += 1
        for q in range(r):
            for j in range(s_start[s], s_end[s]):
                vr[kv] = base + q
                vc[kv] = s_perm[j]
                kv += 1
        base += r
    return ur, uc, vr, vc


class RemainderHMatrix:
    """The (M, N) matrix of the tabulated remainder at ``targets`` (M, 3) (its derivative
    along ``directions`` (M, 3)) of the panels ``part``, compressed as :class:`HMatrix` (same
    trees, admissibility, ACA with SVD recompression). Entries are those of
    :func:`elopt.physics.bem3d.layered_green.remainder_matrix` (not divided by 4 pi). The
    dense blocks are kept as one sparse matrix, the low-rank factors as two (float32)."""

    def __init__(
        self,
        part: _Part,
        targets: np.ndarray,
        directions: np.ndarray | None,
        tabs: np.ndarray,
        prm: np.ndarray,
        factors: np.ndarray,
        *,
        tol: float,
    ) -> None:
        t0 = time.perf_counter()
        pts = np.ascontiguousarray(targets, dtype=float)
        deriv = directions is not None
        dirs = np.ascontiguousarray(directions if deriv else np.zeros((1, 3)), dtype=float)
        n, m = len(part.areas), len(pts)
        tt = cluster_tree(pts, pts, pts, LEAF)
        src = cluster_tree(part.centroids, part.corners.min(axis=1), part.corners.max(axis=1), LEAF)
        tsz, ssz = tt.end - tt.start, src.end - src.start
        far, near = _partition(tt.lo, tt.hi, tt.child, tsz, src.lo, src.hi, src.child, ssz, ETA)
        rules = source_rules(part, float(np.min(prm[:, 10])))
        rules = tuple(np.ascontiguousarray(r[src.perm]) for r in rules)
        pts = np.ascontiguousarray(pts[tt.perm])
        if deriv:
            dirs = np.ascontiguousarray(dirs[tt.perm])
        kernel = (pts, dirs, deriv, rules, factors, tabs, prm)
        trees = (tt.start, tt.end, src.start, src.end)
        offsets = np.concatenate([[0], np.cumsum(tsz[near[:, 0]] * ssz[near[:, 1]])])
        vals = _remainder_near(near, *trees, offsets.astype(np.int64), *kernel)
        none = np.zeros(0, np.int64)
        rows, cols, _, _ = _block_entries(near, none, *trees, tt.perm, src.perm)
        self.near = sp.csr_matrix((vals, (rows, cols)), shape=(m, n))
        self.time_near_s = time.perf_counter() - t0
        us, vs, ranks = [], [], []
        for b0, b1 in _batches(far, tsz, ssz):
            blk = far[b0:b1]
            bm, bn = tsz[blk[:, 0]], ssz[blk[:, 1]]
            kmax = np.minimum(np.minimum(bm, bn), MAX_RANK)
            uoff = np.concatenate([[0], np.cumsum(bm * kmax)]).astype(np.int64)
            voff = np.concatenate([[0], np.cumsum(bn * kmax)]).astype(np.int64)
            ubig, vbig = np.zeros(uoff[-1]), np.zeros(voff[-1])
            rk = np.zeros(len(blk), np.int64)
            _remainder_far(blk, *trees, *kernel, tol, uoff, voff, ubig, vbig, rk)
            for b in range(len(blk)):
                r = int(rk[b])
                ub = ubig[uoff[b] : uoff[b + 1]].reshape(kmax[b], bm[b])[:r].T
                vb = vbig[voff[b] : voff[b + 1]].reshape(kmax[b], bn[b])[:r]
                us.append(np.ascontiguousarray(ub, dtype=np.float32).ravel())
                vs.append(np.ascontiguousarray(vb, dtype=np.float32).ravel())
                ranks.append(r)
        rk = np.asarray(ranks, np.int64)
        ur, uc, vr, vc = _block_entries(far, rk, *trees, tt.perm, src.perm)
        total = int(rk.sum())
        u = np.concatenate(us) if us else np.zeros(0, np.float32)
        v = np.concatenate(vs) if vs else np.zeros(0, np.float32)
        self.u = sp.csr_matrix((u, (ur, uc)), shape=(m, total))
        self.v = sp.csr_matrix((v, (vr, vc)), shape=(total, n))
        self.setup_s = time.perf_counter() - t0

    @property
    def nbytes(self) -> int:
        return sum(
            a.data.nbytes + a.indices.nbytes + a.indptr.nbytes for a in (self.near, self.u, self.v)
        )

    def matvec(self, x: np.ndarray) -> np.ndarray:
        return self.near @ x + self.u @ (self.v @ x)

    def rmatvec(self, w: np.ndarray) -> np.ndarray:
        return self.near.T @ w + self.v.T @ (self.u.T @ w)


@dataclass(frozen=True)
class ImagePart:
    """Targets ``rows`` see the panels ``cols`` mapped to (corners (n, 3, 3), centroids
    (n, 3)) with weight ``weight`` on the homogeneous entries (1/4 pi) integral 1/r."""

    rows: np.ndarray
    cols: np.ndarray
    weight: float
    corners: np.ndarray
    centroids: np.ndarray


@dataclass(frozen=True)
class RemainderPart:
    """Targets ``rows`` see the remainder of the panels ``cols`` (tables ``tabs``, ``prm`` of
    :meth:`LayeredBackground._tables`) with weight ``weight`` on its integrals."""

    rows: np.ndarray
    cols: np.ndarray
    weight: float
    tabs: np.ndarray
    prm: np.ndarray


def kernel_parts(
    bg: LayeredBackground,
    panels,
    pts: np.ndarray,
    slabs: np.ndarray | None = None,
    tables: bool = True,
) -> list[ImagePart | RemainderPart]:
    """The parts whose weighted sum is the layered potential integral at ``pts`` (M, 3) in
    the units of :meth:`LayeredBackground.potential_and_gradient` (the image parts' entries
    being :class:`HMatrix`'s, the remainder's those of its tables). ``slabs`` (M,): the target slab of each point (default: where it lies; the
    collocation rows pass their panels' slabs). Without ``tables`` the remainder parts carry
    no tables (for estimates)."""
    corners, centroids, areas, diams = panels.kernel_arrays
    parts: list[ImagePart | RemainderPart] = []
    if bg.kind == "two_half_spaces":
        st, ss = bg._side(pts[:, 2]), bg._side(centroids[:, 2])
        mirrored = _mapped(corners, centroids, 2.0 * bg.z_i, -1.0)
        for a in np.unique(st):
            rows = np.nonzero(st == a)[0]
            for b in np.unique(ss):
                cols = np.nonzero(ss == b)[0]
                wd, wi = bg._half_space_weights(int(a), int(b))
                parts.append(ImagePart(rows, cols, wd, corners[cols], centroids[cols]))
                if wi != 0.0:
                    parts.append(ImagePart(rows, cols, wi, mirrored[0][cols], mirrored[1][cols]))
        return parts
    slabs = bg.target_slabs(pts) if slabs is None else slabs
    for rows, cols, tgt, part, t, s in bg._slab_pairs(panels, pts, slabs):
        images, placements = bg.slab_terms(t, s)
        for coef, (c, m) in _distinct_images(images, part):
            parts.append(ImagePart(rows, cols, coef * bg.eps_medium, c, m))
        if placements:
            tabs, prm = (
                bg._tables(placements, tgt, part.corners.reshape(-1, 3)) if tables else (None, None)
            )
            parts.append(RemainderPart(rows, cols, bg.eps_medium / FOUR_PI, tabs, prm))
    return parts


class LayeredHMatrix:
    """The (M, N) layered matrix at ``targets`` (M, 3) (the derivative along ``directions``
    (M, 3)) in the units of :meth:`LayeredBackground.dense_matrix`: the weighted sum of one
    compressed matrix per kernel part (:func:`kernel_parts`). Products as :class:`HMatrix`."""

    def __init__(
        self,
        panels,
        *,
        tol: float,
        targets: np.ndarray,
        directions: np.ndarray | None = None,
        slabs: np.ndarray | None = None,
    ) -> None:
        t0 = time.perf_counter()
        bg = panels.background
        _, _, areas, diams = panels.kernel_arrays
        pts = np.ascontiguousarray(targets, dtype=float)
        self.n, self.m = panels.n, len(pts)
        self.terms: list[tuple[np.ndarray, np.ndarray, float, HMatrix | RemainderHMatrix]] = []
        factors = np.array(bg.factors)
        for p in kernel_parts(bg, panels, pts, slabs):
            dirs = None if directions is None else directions[p.rows]
            if isinstance(p, ImagePart):
                src = _Sources((p.corners, p.centroids, areas[p.cols], diams[p.cols]), len(p.cols))
                h = HMatrix(src, tol=tol, targets=pts[p.rows], directions=dirs)
            else:
                c, g, a, d = (arr[p.cols] for arr in panels.kernel_arrays)
                h = RemainderHMatrix(
                    _Part(c, g, a, d), pts[p.rows], dirs, p.tabs, p.prm, factors, tol=tol
                )
            self.terms.append((p.rows, p.cols, p.weight, h))
        self.setup_s = time.perf_counter() - t0

    @property
    def nbytes(self) -> int:
        return sum(h.nbytes for *_, h in self.terms)

    def matvec(self, x: np.ndarray) -> np.ndarray:
        y = np.zeros(self.m)
        for rows, cols, w, h in self.terms:
            y[rows] += w * h.matvec(x[cols])
        return y

    def rmatvec(self, w: np.ndarray) -> np.ndarray:
        out = np.zeros(self.n)
        for rows, cols, wt, h in self.terms:
            out[cols] += wt * h.rmatvec(w[rows])
        return out


def compressed_integrals(
    panels, dens: np.ndarray, pts: np.ndarray, tol: float, directions: np.ndarray | None = None
) -> tuple[np.ndarray, np.ndarray] | np.ndarray:
    """Potential integrals (M, K) and gradients (M, 3, K) of densities (N, K) at points
    (M, 3) as :meth:`LayeredBackground.potential_and_gradient`, by :class:`LayeredHMatrix`
    (relative tolerance ``tol`` per block); with ``directions`` (M, 3) only the derivatives
    along them (M, K)."""
    m, k = len(pts), dens.shape[1]
    wanted = (
        [None, *(np.tile(e, (m, 1)) for e in np.eye(3))] if directions is None else [directions]
    )
    out = np.empty((m, len(wanted), k))
    for c, dirs in enumerate(wanted):
        h = LayeredHMatrix(panels, tol=tol, targets=pts, directions=dirs)
        for q in range(k):
            out[:, c, q] = h.matvec(dens[:, q])
        del h
    if directions is not None:
        return out[:, 0]
    return out[:, 0], out[:, 1:]


def layered_near_matrix(panels, near_factor: float) -> sp.csr_matrix:
    """Sparse (N, N) of the accurate image entries of the conductor rows for pairs whose
    (mapped) panel lies within ``near_factor`` diameters (the remainder, smooth, is left
    out): the GMRES preconditioner's matrix."""
    bg = panels.background
    _, centroids, areas, diams = panels.kernel_arrays
    slabs = None if bg.kind == "two_half_spaces" else bg.source_slabs(panels)
    rows, cols, vals = [], [], []
    for p in kernel_parts(bg, panels, centroids, slabs):
        if not isinstance(p, ImagePart):
            continue
        tgt = np.ascontiguousarray(centroids[p.rows])
        ti, tj = near_pairs(tgt, p.centroids, near_factor * diams[p.cols])
        v = pint.pair_integrals(
            tgt, p.corners, p.centroids, areas[p.cols], diams[p.cols], ti, tj, False,
            *pint.rules(),
        )  # fmt: skip
        rows.append(p.rows[ti])
        cols.append(p.cols[tj])
        vals.append(v[:, 0] * (p.weight / FOUR_PI))
    return sp.csr_matrix(
        (np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))),
        shape=(panels.n, panels.n),
    )


class LayeredFastOperator(FastOperator):
    """:class:`elopt.physics.bem3d.operators.FastOperator` for a layered background
    (conductors only): the same products and preconditioned GMRES, on :class:`LayeredHMatrix`
    and the layered near field."""

    def __init__(self, panels, *, tol: float) -> None:
        t0 = time.perf_counter()
        if panels.n_conductor_panels != panels.n:
            raise SolverError("the layered compressed operator takes conductor panels only")
        self.panels = panels
        self.n = panels.n
        self.n_potential_rows = panels.n
        bg = panels.background
        _, centroids, _, _ = panels.kernel_arrays
        slabs = None if bg.kind == "two_half_spaces" else bg.source_slabs(panels)
        self.hmatrix = LayeredHMatrix(panels, tol=tol, targets=centroids, slabs=slabs)
        self.derivative_hmatrix = None
        near = layered_near_matrix(panels, PRECONDITIONER_FACTOR).tocsc()
        self.ilu = incomplete_lu(near)
        self.setup_s = time.perf_counter() - t0
        self.stored_bytes = self.hmatrix.nbytes + int(near.nnz * 12)


def layered_fast_bytes(panels) -> int:
    """Bytes of :class:`LayeredFastOperator` for ``panels``, estimated before it is built.

    Per kernel part with R target rows and C source panels, as the homogeneous estimate of
    :func:`elopt.physics.bem3d.solve.estimate_memory_bytes` (5 kB of near blocks per row, 0.5
    kB per tree level of low-rank factors): the near blocks scaled by how many of a sample of
    targets' near neighbours (within :data:`NEAR_SHARE_FACTOR` panel sizes) the part's
    (mapped) panels give, relative to the unmapped panels (an image far from every target
    has none), and the factors by (R + C) / 2; the preconditioner by its near pairs.
    """
    bg = panels.background
    _, centroids, _, diams = panels.kernel_arrays
    n = panels.n
    levels = max(1.0, math.log2(max(n, 64) / 32.0))
    slabs = None if bg.kind == "two_half_spaces" else bg.source_slabs(panels)
    rng = np.random.default_rng(0)
    total = 0.0
    for p in kernel_parts(bg, panels, centroids, slabs, tables=False):
        pick = p.rows[rng.choice(len(p.rows), size=min(len(p.rows), 500), replace=False)]
        tgt = centroids[pick]
        own, _ = near_pairs(tgt, centroids[p.cols], NEAR_SHARE_FACTOR * diams[p.cols])
        share, pre = 1.0, 0.0
        if isinstance(p, ImagePart):
            mine, _ = near_pairs(tgt, p.centroids, NEAR_SHARE_FACTOR * diams[p.cols])
            share = len(mine) / max(len(own), 1)
            ti, _ = near_pairs(tgt, p.centroids, PRECONDITIONER_FACTOR * diams[p.cols])
            pre = len(ti) * len(p.rows) / len(pick)
        rows = len(p.rows)
        total += rows * share * 5000 + 0.5 * (rows + len(p.cols)) * 500 * levels
        total += pre * (56 + 12 * 6)
    return int(total)

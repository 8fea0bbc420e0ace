"""Compiled near-field correction of the axisymmetric operators (numba).

The far sums of :mod:`elopt.physics.bem_axi.ring_sums` give every (target, node) entry by the
source panel's own Gauss rule (a mapped panel's in the collocation matrix: its upsampled rule,
``operators.mapped_far_rule``). For (target, panel) pairs closer than a reach, this pass swaps
that value for the graded sub-rule of ``ring_sums.near_rows``: it finds the pairs, their foot
points and grading depths in one compiled call, and adds (accurate - far rule) into the
matrix; the potential's evaluations (node rule and sub-rules alike) go through the batched
``ring_sums.scaled_k`` and ``ring_sums.lagrange_rows``.
"""

from __future__ import annotations

import cmath
import math

import numpy as np
from numba import njit

from elopt.physics.bem_axi.ring_sums import (
    foot_points,
    graded_piece,
    lagrange_sums,
    near_rows,
    node_rows,
    panel_coefs,
    ring_m1_scale,
    straight_jac,
    subrule_point,
)
from elopt.physics.kernel_cache import drop_stale_kernel_caches

drop_stale_kernel_caches()

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
    cz = -centre_z if mirror else centre_z
    reach2 = reach * reach
    close = np.empty(n_p, np.bool_)
    ti = np.empty(m * 8 + n_p, np.int64)
    pj = np.empty(m * 8 + n_p, np.int64)
    count = 0
    for i in range(m):
        if count + n_p > ti.shape[0]:
            ti = np.concatenate((ti, np.empty(ti.shape[0], np.int64)))
            pj = np.concatenate((pj, np.empty(pj.shape[0], np.int64)))
        # The test over every panel first (a loop the compiler vectorises), then the few
        # close ones listed: 1.7 - 2.8 times as fast as listing within the test.
        r, z = tr[i], tz[i]
        for j in range(n_p):
            dr = r - centre_r[j]
            dz = z - cz[j]
            close[j] = dr * dr + dz * dz < reach2[j]
        if exclude_self:
            close[i // order] = False
        for j in range(n_p):
            if close[j]:
                ti[count] = i
                pj[count] = j
                count += 1
    return ti[:count], pj[:count]


@njit(cache=True)
def near_zones(
    kind: np.ndarray,
    coef: np.ndarray,
    length: np.ndarray,
    centre: np.ndarray,
    factor: float,
    u_max: float,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Centres (P,) r, z and radii (P,) of the near discs of panels (P,) ``kind``, ``coef``,
    ``length``, ``centre`` (P, 2): the centre and (``factor`` + 1/2) lengths; a mapped panel's
    (kind 3, chord fraction u^m) its corner and ``u_max``^m chord lengths."""
    n = kind.shape[0]
    cr, cz, reach = np.empty(n), np.empty(n), np.empty(n)
    for j in range(n):
        c = panel_coefs(coef, j)
        if kind[j] == 3:
            at_start = c[4] > 0
            cr[j] = c[0] if at_start else c[2]
            cz[j] = c[1] if at_start else c[3]
            reach[j] = u_max ** abs(c[4]) * length[j]
        else:
            cr[j], cz[j] = centre[j, 0], centre[j, 1]
            reach[j] = (factor + 0.5) * length[j]
    return cr, cz, reach


@njit(cache=True)
def mapped_preimage(r: float, z: float, c: np.ndarray) -> complex:
    """The complex parameter tau of a mapped panel (coefficients ``c``, ``mesh.KIND_MAPPED``)
    where the kernel of the point (r, z) is singular nearest the parameter interval: its
    chord fraction u^m equals the point's complex chord coordinate (principal root)."""
    w = complex(*_chord_coordinate(r, z, c))
    u = cmath.exp(cmath.log(w) / abs(c[4])) if abs(w) > 1e-300 else 0.0j
    return 2.0 * u - 1.0 if c[4] > 0 else 1.0 - 2.0 * u


@njit(cache=True)
def _chord_coordinate(r: float, z: float, c: np.ndarray) -> tuple[float, float]:
    """Real and imaginary part (>= 0) of the point (r, z) in units of a mapped panel's chord
    from its corner (the chord along the real axis; coefficients ``c``)."""
    if c[4] > 0:
        o_r, o_z, f_r, f_z = c[0], c[1], c[2], c[3]
    else:
        o_r, o_z, f_r, f_z = c[2], c[3], c[0], c[1]
    dr, dz = f_r - o_r, f_z - o_z
    inv = 1.0 / (dr * dr + dz * dz)
    return ((r - o_r) * dr + (z - o_z) * dz) * inv, abs((r - o_r) * dz - (z - o_z) * dr) * inv


#: Relative margin by which :func:`_surely_outside` keeps clear of the focal-sum bound: far
#: above the rounding of its own bound and of the exact test's focal sum (a few units in
#: the last place), so that every pair it drops the exact test drops too.
SURE_MARGIN = 1e-6


@njit(cache=True)
def _surely_outside(w_re: float, w_im: float, m: float, edge: float) -> bool:
    """Whether the preimage t = +-(2 u - 1), u = w^(1/m) the principal root of the chord
    coordinate w (``w_im`` >= 0, m = 2 or 3; other m: False), has a focal sum
    |t - 1| + |t + 1| = 2 (|u| + |u - 1|) certainly above ``edge`` (by SURE_MARGIN), without
    the complex logarithm and exponential of :func:`mapped_preimage` (a third of the time).

    With R = |u| and c >= cos(arg u): |u - 1|^2 >= R^2 - 2 R c + 1, so |u| + |u - 1| >=
    R + sqrt(R^2 - 2 R c + 1), increasing in R and equal to E at R* = (E^2 - 1) / (2 (E - c));
    so R > R*, i.e. |w| > R*^m, puts the sum above E = edge (1 + SURE_MARGIN) / 2. c is
    cos(arg(w) / 2) for m = 2; for m = 3 three Newton steps on 4 c^3 - 3 c = cos(arg w) from
    c = 1, which stay above the root (the cubic is convex and increasing above 1/2, and the
    root cos(arg(w) / 3) is at least 1/2)."""
    size = math.sqrt(w_re * w_re + w_im * w_im)
    if size == 0.0:
        return False
    x = w_re / size
    if m == 2.0:
        c = math.sqrt(0.5 * (1.0 + x))
    elif m == 3.0:
        c = 1.0
        for _ in range(3):
            c -= (4.0 * c * c * c - 3.0 * c - x) / (12.0 * c * c - 3.0)
    else:
        return False
    e = 0.5 * edge * (1.0 + SURE_MARGIN)
    radius = (e * e - 1.0) / (2.0 * (e - c))
    return size > (radius * radius if m == 2.0 else radius * radius * radius)


@njit(cache=True)
def bernstein_rho(t: complex) -> float:
    """Bernstein-ellipse parameter (>= 1) of [-1, 1] through the complex point ``t``."""
    root = cmath.sqrt(t - 1.0) * cmath.sqrt(t + 1.0)
    return max(abs(t + root), abs(t - root))


#: Relative margin around a Bernstein bound within which :func:`_rho_at_least` asks
#: :func:`bernstein_rho` itself (both formulas err by a few units in the last place).
FOCAL_MARGIN = 1e-9


@njit(cache=True)
def _rho_at_least(t: complex, focal: float, bound: float) -> bool:
    """``bernstein_rho(t) >= bound`` (> 1) with the focal sum ``focal`` = |t - 1| + |t + 1| of
    ``t``: the ellipse through t with foci -1 and 1 has rho + 1/rho = focal, increasing in rho
    (rho >= 1), so a focal sum outside a relative FOCAL_MARGIN of bound + 1/bound decides it
    without the two complex square roots; one inside it takes :func:`bernstein_rho`."""
    edge = bound + 1.0 / bound
    if focal > edge * (1.0 + FOCAL_MARGIN):
        return True
    if focal < edge * (1.0 - FOCAL_MARGIN):
        return False
    return bernstein_rho(t) >= bound


@njit(cache=True)
def _near_plan(
    tr: np.ndarray,
    tz: np.ndarray,
    kind: np.ndarray,
    coef: np.ndarray,
    length: np.ndarray,
    centre_r: np.ndarray,
    centre_z: np.ndarray,
    reach: np.ndarray,
    order: int,
    mirror: bool,
    exclude_self: bool,
    rho_near: float,
    rho_whole: float,
):
    """Near (target, panel) pairs (B,) ``ti``, ``pj``, the target points, the panels' kinds and
    coefficients, the foot-point parameters and the grading depths (:func:`_pairs`; a mapped
    panel's pairs only where the Bernstein parameter of :func:`mapped_preimage` is below
    ``rho_near``)."""
    ti, pj = _pairs(tr, tz, centre_r, centre_z, reach, order, mirror, exclude_self)
    sgn = -1.0 if mirror else 1.0
    edge_near = rho_near + 1.0 / rho_near
    keep = 0
    pre = np.empty(ti.shape[0], np.complex128)
    whole = np.zeros(ti.shape[0], np.bool_)  # a mapped pair's preimage beyond rho_whole
    for b in range(ti.shape[0]):
        j = pj[b]
        if kind[j] == 3:
            c = panel_coefs(coef, j)
            w_re, w_im = _chord_coordinate(tr[ti[b]], sgn * tz[ti[b]], c)
            if _surely_outside(w_re, w_im, abs(c[4]), edge_near):
                continue
            t = mapped_preimage(tr[ti[b]], sgn * tz[ti[b]], c)
            focal = abs(t - 1.0) + abs(t + 1.0)
            if _rho_at_least(t, focal, rho_near):
                continue
            pre[keep] = t
            whole[keep] = _rho_at_least(t, focal, rho_whole)
        ti[keep] = ti[b]
        pj[keep] = j
        keep += 1
    ti, pj = ti[:keep], pj[:keep]
    n = ti.shape[0]
    pr = np.empty(n)
    pz = np.empty(n)
    kd = np.empty(n, np.int64)
    cf = np.empty((n, coef.shape[1]))
    for b in range(n):
        pr[b] = tr[ti[b]]
        pz[b] = tz[ti[b]]
        kd[b] = kind[pj[b]]
        for k in range(coef.shape[1]):
            cf[b, k] = coef[pj[b], k]
    tau_c, delta = foot_points(pr, pz, kd, cf, mirror)
    # Graded pieces (ratio 2 towards the foot) lie at least their own length from the target;
    # so does the innermost once it is no longer than the distance: one level beyond
    # log2(length / distance) gives every piece the same Bernstein-ellipse margin.
    # A mapped panel grades towards its preimage's nearest parameter instead, by the
    # preimage's parameter distance (a panel's parameter length is 2); where the preimage
    # lies outside the Bernstein ellipse ``rho_whole``, the sub-rules' Gauss rule on the
    # whole panel (cut at its end, one level) is as accurate as the node rule at ``rho_near``.
    levels = np.empty(n, np.int64)
    for b in range(n):
        ratio = length[pj[b]] / max(delta[b], 1e-300)
        if kd[b] == 3:
            if whole[b]:
                tau_c[b] = -1.0
                levels[b] = 1
                continue
            tau_c[b] = min(max(pre[b].real, -1.0), 1.0)
            ratio = 2.0 / max(abs(pre[b] - tau_c[b]), 1e-300)
        lv = math.ceil(math.log2(max(ratio, 1.0))) + 1
        levels[b] = min(max(lv, 1), MAX_LEVELS)
    return ti, pj, pr, pz, kd, cf, tau_c, levels


@njit(cache=True)
def _add_field_rows(
    mat, ti, pj, pr, pz, kd, cf, tau_c, levels, sr, sz, w, scale, mirror, x, bary, xq, wq
) -> None:
    """(graded rule, its columns times ``scale`` (N,) - node rule) of the field of the pairs
    into ``mat`` (M, N, 2)."""
    p = x.shape[0]
    n = ti.shape[0]
    cols = np.empty((n, p), np.int64)
    for b in range(n):
        for k in range(p):
            cols[b, k] = pj[b] * p + k
    good = near_rows(pr, pz, kd, cf, tau_c, levels, mirror, True, x, bary, xq, wq)
    direct = node_rows(pr, pz, sr, sz, w, cols, mirror, True)
    sgn = -1.0 if mirror else 1.0
    for b in range(n):
        for k in range(p):
            for c in range(2):
                mat[ti[b], cols[b, k], c] += sgn * (
                    good[b, k, c] * scale[cols[b, k]] - direct[b, k, c]
                )


@njit(cache=True, error_model="numpy")
def _potential_params(
    b0, b1, start, pj, pr, pz, kd, cf, tau_c, levels, sr, sz, w, mirror, x, xq, wq, xf, wf
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """m1, scale (K(1 - m1) times it is the value) and parameter tau of every evaluation of
    pairs b0..b1-1 (from ``start[b]``): first the far rule the far sum holds, negated (taken
    out): the p nodes of the panel at tau = x_k, or on a mapped panel with a far rule of its
    own (``xf``, ``wf`` not empty) that rule's points; then the points of the graded sub-rule
    of :func:`ring_sums.subrule_points`, computed here in the same order and by the same
    formulas without its point arrays (half the time)."""
    p = x.shape[0]
    nq = xq.shape[0]
    total = start[b1] - start[b0]
    m1, scale, tau_out = np.empty(total), np.empty(total), np.empty(total)
    sgn = -1.0 if mirror else 1.0
    for b in range(b0, b1):
        e = start[b] - start[b0]
        t_r, t_z = pr[b], pz[b]
        kind, c, tc, lv = kd[b], panel_coefs(cf, b), tau_c[b], levels[b]
        if kind == 3 and xf.shape[0] > 0:
            for k in range(xf.shape[0]):
                rs, zs, _ = subrule_point(kind, c, xf[k], 0.0)
                m1[e], scale[e] = ring_m1_scale(t_r, t_z, rs, sgn * zs, -rs * wf[k])
                tau_out[e] = xf[k]
                e += 1
        else:
            for k in range(p):
                j = pj[b] * p + k
                m1[e], scale[e] = ring_m1_scale(t_r, t_z, sr[j], sgn * sz[j], -sr[j] * w[j])
                tau_out[e] = x[k]
                e += 1
        jac = straight_jac(kind, c)
        for side in (1.0, -1.0):
            span = 1.0 - tc if side > 0 else tc + 1.0
            if span <= 0.0:
                continue
            for k in range(lv):
                mid, half = graded_piece(k, lv, span)
                for q in range(nq):
                    t = tc + side * (mid + half * xq[q])
                    rs, zs, jac = subrule_point(kind, c, t, jac)
                    factor = rs * (wq[q] * half * jac)
                    m1[e], scale[e] = ring_m1_scale(t_r, t_z, rs, sgn * zs, factor)
                    tau_out[e] = t
                    e += 1
    return m1, scale, tau_out


@njit(cache=True)
def _images_out_of_reach(tz: np.ndarray, centre_z: np.ndarray, reach: np.ndarray) -> bool:
    """Whether targets (M,) ``tz`` (some) all lie above z = 0 and every panel's image centre
    (P,) -``centre_z`` is out of ``reach`` of the lowest (a compiled test: the numpy one
    took 4 us)."""
    if tz.shape[0] == 0:
        return False
    low = tz.min()
    if low < 0.0:
        return False
    for j in range(centre_z.shape[0]):
        if low + centre_z[j] < reach[j]:
            return False
    return True


@njit(cache=True)
def _eval_counts(
    kd: np.ndarray, tau_c: np.ndarray, levels: np.ndarray, p: int, n_q: int, n_far: int
) -> tuple[np.ndarray, np.ndarray]:
    """Evaluations (B,) of each pair of :func:`_potential_params` and their start (B + 1,):
    the far rule's points (``n_far`` on a mapped panel, else the p nodes), then ``n_q`` per
    graded piece on each side of the cut with room (one numpy expression per step took
    five times as long)."""
    n = kd.shape[0]
    counts = np.empty(n, np.int64)
    start = np.empty(n + 1, np.int64)
    start[0] = 0
    for b in range(n):
        sides = (tau_c[b] < 1.0) + (tau_c[b] > -1.0)
        counts[b] = (n_far if kd[b] == 3 else p) + n_q * levels[b] * sides
        start[b + 1] = start[b] + counts[b]
    return counts, start


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
    scale: np.ndarray,
    mirror: bool,
    exclude_self: bool,
    rho_near: float,
    x: np.ndarray,
    bary: np.ndarray,
    xq: np.ndarray,
    wq: np.ndarray,
    mapped_far: tuple[np.ndarray, np.ndarray] | None = None,
) -> None:
    """Add (graded rule - far rule) of near (target, panel) pairs into ``mat`` (M, N, ncomp)
    in place; image pairs (``mirror``) enter with a minus, as ``mat`` holds real-minus-image
    sums. Targets (M,) ``tr``, ``tz``; panels (P,) ``kind``, ``coef`` (P, 5), ``length``,
    centres, ``reach``; nodes (N,) ``sr``, ``sz``, ``w``, ``scale`` (``mesh.interp_jac``: a
    mapped panel's sub-rules interpolate sigma times it); nodes per panel p = len(x).
    The far rule ``mat`` holds is the node rule; a mapped panel's is the Gauss rule
    ``mapped_far`` (points, weights in its parameter, of the interpolated quantity) where
    given (the potential only). A mapped panel's pairs within ``reach`` are near where the
    Bernstein parameter of :func:`mapped_preimage` is below ``rho_near`` (that far rule's
    bound).

    The potential's evaluations go through ``ring_sums.scaled_k`` in batches (vectorised
    logarithm); the field keeps the scalar loops of ``ring_sums.near_rows``."""
    p = x.shape[0]
    if mirror and _images_out_of_reach(tz, centre_z, reach):
        return
    n_far = p if mapped_far is None else len(mapped_far[0])
    # The sub-rules' q-point Gauss rule errs like rho^(-2q) where the mapped panels' n-point
    # far rule errs like rho_near^(-2n): equal at rho_near^(n/q) (none with n >= q).
    rho_whole = rho_near ** (n_far / len(xq))
    plan = _near_plan(
        tr,
        tz,
        kind,
        coef,
        length,
        centre_r,
        centre_z,
        reach,
        p,
        mirror,
        exclude_self,
        rho_near,
        rho_whole,
    )
    ti, pj, pr, pz, kd, cf, tau_c, levels = plan
    if len(ti) == 0:
        return
    if mat.shape[2] == 2:
        if mapped_far is not None:
            raise ValueError("the field's far sums hold the node rule of every panel")
        _add_field_rows(mat, *plan, sr, sz, w, scale, mirror, x, bary, xq, wq)
        return
    counts, start = _eval_counts(kd, tau_c, levels, p, len(xq), n_far)
    w_interp = w / scale  # the node rule's weights of the interpolated quantity
    xf, wf = mapped_far if mapped_far is not None else (np.empty(0), np.empty(0))

    def params(b0: int, b1: int, start: np.ndarray):
        return _potential_params(
            b0,
            b1,
            start,
            pj,
            pr,
            pz,
            kd,
            cf,
            tau_c,
            levels,
            sr,
            sz,
            w_interp,
            mirror,
            x,
            xq,
            wq,
            xf,
            wf,
        )

    sgn = -1.0 if mirror else 1.0
    lagrange_sums(params, counts, start, x, bary, mat[..., 0], ti, pj, scale, sgn)

"""Compiled sums of the ring kernels (numba): the hot loops of the solver.

``potential_sum`` and ``field_sum`` fill target-by-source matrices with the ring kernels of
:mod:`elopt.physics.bem_axi.ring_kernels`, real sources minus their images in z = 0 when
asked, times the source quadrature weights. K comes from Moshier's rational-log
approximation, E with K from the arithmetic-geometric mean,
E(m) = K(m) (1 - sum 2^(n-1) c_n^2) (DLMF 19.8.6). Coincident target and source give 0 (the
caller supplies the singular self terms).

The potential of the collocation matrix (``collocation_sum``, the self rows here and the
near rows of :mod:`near_sums`) is evaluated in batches instead: a compiled pass lists each
evaluation's m1 and scale, numpy's vectorised logarithm and a loop the compiler vectorises
give ``scaled_k``, and a last pass sums the values into the matrix or into Lagrange rows (a
scalar logarithm per value cost as much as the rest of the kernel together). The near-field
rules of the field loop over graded sub-pieces without padded temporaries;
``tests/benchmarks/bench_axi.py`` compares the far sum with the vectorised scipy form.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from elopt.physics.kernel_cache import drop_stale_kernel_caches

drop_stale_kernel_caches()

_SMALL_M = 1e-7


# Rational-log approximation K(m) = P(m1) - ln(m1) Q(m1), relative error below 3e-16 on
# [0, 1] (Moshier, Methods and Programs for Mathematical Functions, 1989, routine ellpk;
# the same approximation as scipy.special.ellipkm1). Coefficients highest degree first.
_K_P = np.array(
    [
        1.37982864606273237150e-4, 2.28025724005875567385e-3, 7.97404013220415179367e-3,
        9.85821379021226008714e-3, 6.87489687449949877925e-3, 6.18901033637687613229e-3,
        8.79078273952743772254e-3, 1.49380448916805252718e-2, 3.08851465246711995998e-2,
        9.65735902811690126535e-2, 1.38629436111989062502e0,
    ]
)  # fmt: skip
_K_Q = np.array(
    [
        2.94078955048598507511e-5, 9.14184723865917226571e-4, 5.94058303753167793257e-3,
        1.54850516649762399335e-2, 2.39089602715924892727e-2, 3.01204715227604046988e-2,
        3.73774314173823228969e-2, 4.88280347570998239232e-2, 7.03124996963957469739e-2,
        1.24999999999870820058e-1, 4.99999999999999999821e-1,
    ]
)  # fmt: skip
_LN4 = 1.3862943611198906188


@njit(cache=True)
def _ellip_k(m1: float) -> float:
    """K(1 - m1) for 0 < m1 <= 1 (complete elliptic integral, complementary parameter)."""
    if m1 < 1.1102230246251565e-16:
        return _LN4 - 0.5 * math.log(m1)
    p = _K_P[0]
    q = _K_Q[0]
    for i in range(1, 11):
        p = p * m1 + _K_P[i]
        q = q * m1 + _K_Q[i]
    return p - math.log(m1) * q


@njit(cache=True)
def _ellip_ke(m1: float) -> tuple[float, float]:
    """(K, E) at parameter 1 - m1 by the arithmetic-geometric mean (DLMF 19.8.1, 19.8.6)."""
    a = 1.0
    b = math.sqrt(m1)
    s = 0.5 * (1.0 - m1)
    scale = 0.5
    for _ in range(60):
        if a - b <= 1e-15 * a:
            break
        c = 0.5 * (a - b)
        a, b = 0.5 * (a + b), math.sqrt(a * b)
        scale *= 2.0
        s += scale * c * c
    k = math.pi / (a + b)
    return k, k * (1.0 - s)


@njit(cache=True)
def _ring_phi(r: float, z: float, rs: float, zs: float) -> float:
    dz = z - zs
    a = r + rs
    b = r - rs
    rp2 = a * a + dz * dz
    rm2 = b * b + dz * dz
    if rm2 == 0.0:
        return 0.0
    return rs * _ellip_k(rm2 / rp2) / (math.pi * math.sqrt(rp2))


@njit(cache=True)
def _ring_e(r: float, z: float, rs: float, zs: float) -> tuple[float, float]:
    dz = z - zs
    rp2 = (r + rs) ** 2 + dz * dz
    rm2 = (r - rs) ** 2 + dz * dz
    if rm2 == 0.0:
        return 0.0, 0.0
    m1 = rm2 / rp2
    k, e = _ellip_ke(m1)
    rp = math.sqrt(rp2)
    ez = rs * dz * e / (math.pi * rp * rm2)
    if 1.0 - m1 < _SMALL_M:
        rho2 = rs * rs + dz * dz
        er = r * rs * (2 * dz * dz - rs * rs) / (4 * rho2**2.5)
    else:
        er = rs * (k - e * (rs * rs - r * r + dz * dz) / rm2) / (2 * math.pi * r * rp)
    return er, ez


@njit(cache=True)
def potential_sum(
    tr: np.ndarray, tz: np.ndarray, sr: np.ndarray, sz: np.ndarray, w: np.ndarray, image: bool
) -> np.ndarray:
    """(M, N): w_n [G(t_m, s_n) - image * G(t_m, s_n mirrored)], G the ring potential."""
    out = np.empty((tr.shape[0], sr.shape[0]))
    for i in range(tr.shape[0]):
        for j in range(sr.shape[0]):
            v = _ring_phi(tr[i], tz[i], sr[j], sz[j])
            if image:
                v -= _ring_phi(tr[i], tz[i], sr[j], -sz[j])
            out[i, j] = v * w[j]
    return out


#: Most (target, source) pairs per batch of the vectorised sums: temporaries of 64 kB
#: however large the mesh, below the C library's threshold for fresh pages (measured on the
#: guarded probes: batches of 2^16 pairs made the 344-node collocation sum twice as slow,
#: their fresh pages faulting in on every call; 2^13 beat 2^14 by 10 % per solve).
BATCH_PAIRS = 1 << 13
_INV_PI = 1.0 / math.pi


def scaled_k(m1: np.ndarray, scale: np.ndarray) -> np.ndarray:
    """``scale * K(1 - m1)`` elementwise for m1 (B,) in (0, 1].

    The rational-log form of :func:`_ellip_k` (no asymptotic branch: below 1.1e-16 the
    polynomials equal their values at 0 to the last bit), with numpy's vectorised logarithm and
    a compiled loop the compiler vectorises; about ten times faster per value than the scalar
    function in a loop. The loop's Horner steps fuse multiply and add (``contract``: 1.7 times
    as fast, the values within 4e-16 of the unfused ones)."""
    return _scaled_k(m1, np.log(m1), scale)


@njit(cache=True, error_model="numpy", fastmath={"contract"})
def _scaled_k(m1: np.ndarray, log_m1: np.ndarray, scale: np.ndarray) -> np.ndarray:
    out = np.empty_like(m1)
    for c in range(m1.shape[0]):
        x = m1[c]
        p = _K_P[0]
        q = _K_Q[0]
        for i in range(1, 11):
            p = p * x + _K_P[i]
            q = q * x + _K_Q[i]
        out[c] = (p - log_m1[c] * q) * scale[c]
    return out


@njit(cache=True)
def ring_m1_scale(r: float, z: float, rs: float, zs: float, factor: float):
    """m1 = rho_minus^2 / rho_plus^2 and factor / (pi rho_plus): the ring potential is
    K(1 - m1) times the second (0 for a coincident point: m1 = 1, scale 0)."""
    dz = z - zs
    a = r + rs
    b = r - rs
    inv = 1.0 / (a * a + dz * dz)
    rm2 = b * b + dz * dz
    if rm2 == 0.0:
        return 1.0, 0.0
    return rm2 * inv, factor * math.sqrt(inv) * _INV_PI


@njit(cache=True, error_model="numpy")
def _collocation_params(
    r: np.ndarray, z: np.ndarray, image: bool, i0: int, i1: int
) -> tuple[np.ndarray, np.ndarray]:
    """m1 and 1 / (pi rho_plus) (B,) of the node pairs of rows i0..i1-1: per row i the
    sources j > i, then (``image``) the mirrored sources j >= i. A coincident pair gets
    m1 = 1 and a zero scale (value 0)."""
    n = r.shape[0]
    total = 0
    for i in range(i0, i1):
        total += n - 1 - i + (n - i if image else 0)
    m1 = np.empty(total)
    scale = np.empty(total)
    c = 0
    for i in range(i0, i1):
        ri = r[i]
        zi = z[i]
        for j in range(i + 1, n):
            k = c + j - i - 1
            dz = zi - z[j]
            a = ri + r[j]
            b = ri - r[j]
            inv = 1.0 / (a * a + dz * dz)
            rm2 = b * b + dz * dz
            m1[k] = rm2 * inv if rm2 > 0.0 else 1.0
            scale[k] = math.sqrt(inv) * _INV_PI if rm2 > 0.0 else 0.0
        c += n - 1 - i
        if image:
            for j in range(i, n):
                k = c + j - i
                dz = zi + z[j]
                a = ri + r[j]
                b = ri - r[j]
                inv = 1.0 / (a * a + dz * dz)
                m1[k] = (b * b + dz * dz) * inv
                scale[k] = math.sqrt(inv) * _INV_PI
            c += n - i
    return m1, scale


@njit(cache=True, error_model="numpy")
def _collocation_fill(
    m1: np.ndarray,
    log_m1: np.ndarray,
    scale: np.ndarray,
    r: np.ndarray,
    w: np.ndarray,
    image: bool,
    own_run: int,
    i0: int,
    i1: int,
    out: np.ndarray,
) -> None:
    """Rows and columns i0..i1-1 of :func:`collocation_sum` from the pairs' m1, ln(m1) and
    scale (order of :func:`_collocation_params`; values as :func:`scaled_k`)."""
    n = r.shape[0]
    v = _scaled_k(m1, log_m1, scale)
    c = 0
    for i in range(i0, i1):
        rw_i = r[i] * w[i]
        img = c + n - 1 - i
        out[i, i] = -v[img] * rw_i if image else 0.0
        own_end = (i // own_run + 1) * own_run if own_run > 0 else i + 1
        for j in range(i + 1, n):
            x = v[c + j - i - 1] if j >= own_end else 0.0
            if image:
                x -= v[img + j - i]
            out[i, j] = x * r[j] * w[j]
            out[j, i] = x * rw_i
        c = img + (n - i if image else 0)


def batch_edges(counts: np.ndarray) -> np.ndarray:
    """Edges (k + 1,) cutting items with ``counts`` (n,) values each into consecutive batches
    of about ``BATCH_PAIRS`` values (at least one item per batch): a batch ends before the
    item whose running count passes the next multiple of ``BATCH_PAIRS`` (read here at each
    call, so that tests can make batches small)."""
    return _batch_edges(counts, BATCH_PAIRS)


@njit(cache=True)
def _batch_edges(counts: np.ndarray, batch: int) -> np.ndarray:
    """:func:`batch_edges` with batches of about ``batch`` values (compiled: the numpy form
    with cumsum and searchsorted took 5 - 7 us per call, a few calls per level)."""
    n = counts.shape[0]
    edges = np.empty(n + 1, np.int64)
    edges[0] = 0
    n_edges = 1
    running = 0
    bound = batch
    for i in range(n):
        running += counts[i]
        while running > bound:
            if i > edges[n_edges - 1]:
                edges[n_edges] = i
                n_edges += 1
            bound += batch
    if n > edges[n_edges - 1]:
        edges[n_edges] = n
        n_edges += 1
    return edges[:n_edges].copy()


def collocation_sum(
    r: np.ndarray, z: np.ndarray, w: np.ndarray, image: bool, own_run: int = 0
) -> np.ndarray:
    """(N, N): :func:`potential_sum` with the nodes as both targets and sources; with
    ``own_run`` > 0, nodes in runs of that many (a panel's) leave out their own run's real
    pairs (the self rule replaces them) and keep the images.

    The kernel divided by r' is symmetric, so each pair is evaluated once: half the work. The
    pairs go through :func:`scaled_k`'s batched form in batches of about ``BATCH_PAIRS``.
    """
    out = np.empty((r.shape[0], r.shape[0]))
    edges = batch_edges(_collocation_counts(r.shape[0], image)).tolist()
    for i0, i1 in zip(edges[:-1], edges[1:], strict=True):
        m1, scale = _collocation_params(r, z, image, i0, i1)
        _collocation_fill(m1, np.log(m1), scale, r, w, image, own_run, i0, i1, out)
    return out


@njit(cache=True)
def _collocation_counts(n: int, image: bool) -> np.ndarray:
    """Pairs (n,) of each row of :func:`_collocation_params` among n nodes."""
    out = np.empty(n, np.int64)
    for i in range(n):
        out[i] = n - 1 - i + (n - i if image else 0)
    return out


@njit(cache=True, error_model="numpy")
def _point_params(
    tr: np.ndarray,
    tz: np.ndarray,
    sr: np.ndarray,
    sz: np.ndarray,
    order: int,
    panels: np.ndarray,
    n_own: int,
    i0: int,
    i1: int,
) -> tuple[np.ndarray, np.ndarray]:
    """m1 and r' / (pi rho_plus) (B,) of targets i0..i1-1 against the points (J * n,), row by
    row; the first ``n_own`` points of the target's own panel (one of ``panels`` (J,); a
    target's panel is its index // ``order``) take m1 = 1 and a zero scale (value 0). Other
    panels' points never meet a target node (Gauss points lie inside their panel, images
    below z = 0), so the loop has no branch."""
    n_pts = sr.shape[0]
    n_u = n_pts // panels.shape[0]
    m1 = np.empty((i1 - i0) * n_pts)
    scale = np.empty((i1 - i0) * n_pts)
    for i in range(i0, i1):
        e = (i - i0) * n_pts
        for u in range(n_pts):
            dz = tz[i] - sz[u]
            a = tr[i] + sr[u]
            b = tr[i] - sr[u]
            inv = 1.0 / (a * a + dz * dz)
            m1[e + u] = (b * b + dz * dz) * inv
            scale[e + u] = sr[u] * math.sqrt(inv) * _INV_PI
        for j in range(panels.shape[0]):
            if panels[j] == i // order:
                for u in range(j * n_u, j * n_u + n_own):
                    m1[e + u] = 1.0
                    scale[e + u] = 0.0
    return m1, scale


@njit(cache=True)
def _point_fill(
    v: np.ndarray,
    rule: np.ndarray,
    panels: np.ndarray,
    n_own: int,
    i0: int,
    i1: int,
    mat: np.ndarray,
) -> None:
    """Rows i0..i1-1 of :func:`panel_rule_columns` from the values ``v`` (order of
    :func:`_point_params`) and the rule (J, n, p): the sum over a panel's first ``n_own``
    points, minus that over the rest."""
    n_pan, n_u, p = rule.shape
    own = np.empty(p)
    image = np.empty(p)
    for i in range(i0, i1):
        e = (i - i0) * n_pan * n_u
        for j in range(n_pan):
            base = e + j * n_u
            if p == 4:
                own[0], own[1], own[2], own[3] = _rule_sums4(v, rule, j, base, 0, n_own)
                image[0], image[1], image[2], image[3] = _rule_sums4(v, rule, j, base, n_own, n_u)
            else:
                own[:] = 0.0
                image[:] = 0.0
                for u in range(n_u):
                    for k in range(p):
                        if u < n_own:
                            own[k] += v[base + u] * rule[j, u, k]
                        else:
                            image[k] += v[base + u] * rule[j, u, k]
            for k in range(p):
                col = panels[j] * p + k
                mat[i, col] = 0.0 + own[k]
                if n_own < n_u:
                    mat[i, col] = mat[i, col] + -1.0 * image[k]


@njit(cache=True)
def _rule_sums4(v: np.ndarray, rule: np.ndarray, j: int, base: int, u0: int, u1: int):
    """sum_u v[base + u] rule[j, u, k] over u0 <= u < u1 for k = 0..3 (:func:`_point_fill`
    with four nodes), each summed in the order of u in registers: half the time of the sums
    one k at a time (their loads of v and of the rule dominated), the same bits."""
    a0 = a1 = a2 = a3 = 0.0
    for u in range(u0, u1):
        x = v[base + u]
        a0 += x * rule[j, u, 0]
        a1 += x * rule[j, u, 1]
        a2 += x * rule[j, u, 2]
        a3 += x * rule[j, u, 3]
    return a0, a1, a2, a3


def panel_rule_columns(
    mat: np.ndarray,
    tr: np.ndarray,
    tz: np.ndarray,
    sr: np.ndarray,
    sz: np.ndarray,
    rule: np.ndarray,
    order: int,
    panels: np.ndarray,
    n_own: int,
) -> None:
    """Set the node columns of J panels in ``mat`` (M, N) to their potential at targets (M,)
    ``tr``, ``tz`` (the nodes, ``order`` per panel), each panel integrated by its own points
    (J * n,) ``sr``, ``sz`` (panel-major) with the node columns' weights ``rule`` (J, n, p):
    column panels[j] * p + k takes sum_u G(t, s_(j, u)) rule[j, u, k], G the ring potential
    (times r'), the sum over the panel's first ``n_own`` points minus that over the others
    (its image's, real minus image as the far sum holds them). Targets on panel
    ``panels[j]`` leave its first ``n_own`` points out (the self rule's). Values in batches
    of about ``BATCH_PAIRS`` through :func:`scaled_k`."""
    m = tr.shape[0]
    rule = np.ascontiguousarray(rule)
    edges = batch_edges(np.full(m, len(sr)))
    for i0, i1 in zip(edges[:-1], edges[1:], strict=True):
        m1, scale = _point_params(tr, tz, sr, sz, order, panels, n_own, int(i0), int(i1))
        _point_fill(scaled_k(m1, scale), rule, panels, n_own, int(i0), int(i1), mat)


@njit(cache=True)
def mapped_rule_points(
    kind: np.ndarray,
    coef: np.ndarray,
    panels: np.ndarray,
    density_scale: np.ndarray,
    tau: np.ndarray,
    basis: np.ndarray,
    image_tau: np.ndarray,
    image_basis: np.ndarray,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Points (J * n,) r, z and weights (J, n, p) of :func:`panel_rule_columns` for panels
    ``panels`` (J,): per panel its points at parameters ``tau`` (n0,), then its image's in
    z = 0 at ``image_tau`` (n1,) (n = n0 + n1), each weighted by ``basis`` (n0, p) or
    ``image_basis`` (n1, p) times the panel's nodes' ``density_scale`` (N,)."""
    n0, p = basis.shape
    n1 = image_tau.shape[0]
    n = n0 + n1
    sr = np.empty(panels.shape[0] * n)
    sz = np.empty(panels.shape[0] * n)
    rule = np.empty((panels.shape[0], n, p))
    for j in range(panels.shape[0]):
        c = panel_coefs(coef, panels[j])
        for u in range(n):
            image = u >= n0
            t = image_tau[u - n0] if image else tau[u]
            sr[j * n + u], zs, _ = panel_point(kind[panels[j]], c, t)
            sz[j * n + u] = -zs if image else zs
            for k in range(p):
                b = image_basis[u - n0, k] if image else basis[u, k]
                rule[j, u, k] = b * density_scale[panels[j] * p + k]
    return sr, sz, rule


@njit(cache=True)
def node_rows(
    tr: np.ndarray,
    tz: np.ndarray,
    sr: np.ndarray,
    sz: np.ndarray,
    w: np.ndarray,
    cols: np.ndarray,
    mirror: bool,
    field: bool,
) -> np.ndarray:
    """(B, p, ncomp): the node rule's values of target b against nodes cols[b] (B, p), as the
    far sums hold them (source mirrored in z = 0 when ``mirror``; no image subtracted)."""
    n_pairs, p = cols.shape
    ncomp = 2 if field else 1
    out = np.empty((n_pairs, p, ncomp))
    sgn = -1.0 if mirror else 1.0
    for b in range(n_pairs):
        for k in range(p):
            j = cols[b, k]
            if field:
                er, ez = _ring_e(tr[b], tz[b], sr[j], sgn * sz[j])
                out[b, k, 0] = er * w[j]
                out[b, k, 1] = ez * w[j]
            else:
                out[b, k, 0] = _ring_phi(tr[b], tz[b], sr[j], sgn * sz[j]) * w[j]
    return out


@njit(cache=True)
def _ring_e_net(r: float, z: float, rs: float, zs: float, image: bool) -> tuple[float, float]:
    """(E_r, E_z) of a ring, minus that of its image in z = 0 when ``image``."""
    er, ez = _ring_e(r, z, rs, zs)
    if image:
        er2, ez2 = _ring_e(r, z, rs, -zs)
        er -= er2
        ez -= ez2
    return er, ez


@njit(cache=True)
def field_sum(
    tr: np.ndarray, tz: np.ndarray, sr: np.ndarray, sz: np.ndarray, w: np.ndarray, image: bool
) -> np.ndarray:
    """(M, N, 2): w_n [(E_r, E_z)(t_m, s_n) - image * same for the mirrored source]."""
    out = np.empty((tr.shape[0], sr.shape[0], 2))
    for i in range(tr.shape[0]):
        for j in range(sr.shape[0]):
            er, ez = _ring_e_net(tr[i], tz[i], sr[j], sz[j], image)
            out[i, j, 0] = er * w[j]
            out[i, j, 1] = ez * w[j]
    return out


@njit(cache=True)
def normal_field_sum(
    tr: np.ndarray,
    tz: np.ndarray,
    nr: np.ndarray,
    nz: np.ndarray,
    sr: np.ndarray,
    sz: np.ndarray,
    w: np.ndarray,
    image: bool,
) -> np.ndarray:
    """(M, N): the field of :func:`field_sum` projected on the unit vectors (nr, nz) (M,) of
    the targets, without the (M, N, 2) temporary."""
    out = np.empty((tr.shape[0], sr.shape[0]))
    for i in range(tr.shape[0]):
        for j in range(sr.shape[0]):
            er, ez = _ring_e_net(tr[i], tz[i], sr[j], sz[j], image)
            out[i, j] = (er * nr[i] + ez * nz[i]) * w[j]
    return out


@njit(cache=True)
def panel_point(kind: int, c: np.ndarray, tau: float) -> tuple[float, float, float]:
    """(r, z, |d(point)/d(tau)|) of a panel (see elopt.physics.bem_axi.mesh.panel_geometry)."""
    s = 0.5 * (tau + 1.0)
    if kind == 3:
        frac, dfrac = mapped_point(c[4], tau)
        return (
            c[0] + frac * (c[2] - c[0]),
            c[1] + frac * (c[3] - c[1]),
            dfrac * math.hypot(c[2] - c[0], c[3] - c[1]),
        )
    if kind == 0:
        return (
            c[0] + s * (c[2] - c[0]),
            c[1] + s * (c[3] - c[1]),
            0.5 * math.hypot(c[2] - c[0], c[3] - c[1]),
        )
    if kind == 1:
        ang = c[3] + s * (c[4] - c[3])
        return (
            c[0] + c[2] * math.cos(ang),
            c[1] + c[2] * math.sin(ang),
            0.5 * abs(c[4] - c[3]) * c[2],
        )
    u = c[3] + s * (c[4] - c[3])
    du = 0.5 * abs(c[4] - c[3])
    return (
        c[1] * math.cos(u),
        c[0] + c[2] * math.sin(u),
        du * math.hypot(c[1] * math.sin(u), c[2] * math.cos(u)),
    )


@njit(cache=True)
def mapped_point(power: float, tau: float) -> tuple[float, float]:
    """Chord fraction and its tau-derivative on a mapped panel (``mesh.mapped_fraction``)."""
    m = abs(power)
    u = 0.5 * (tau + 1.0) if power > 0 else 0.5 * (1.0 - tau)
    um1 = u * u if m == 3.0 else (u if m == 2.0 else u ** (m - 1.0))  # pow() is slow
    frac = um1 * u if power > 0 else 1.0 - um1 * u
    return frac, 0.5 * m * um1


@njit(cache=True)
def _lagrange(tau: float, x: np.ndarray, bary: np.ndarray, out: np.ndarray) -> None:
    p = x.shape[0]
    total = 0.0
    for k in range(p):
        d = tau - x[k]
        if d == 0.0:
            for j in range(p):
                out[j] = 0.0
            out[k] = 1.0
            return
        out[k] = bary[k] / d
        total += out[k]
    inv = 1.0 / total
    for k in range(p):
        out[k] *= inv


@njit(cache=True)
def subrule_points(
    kind: int,
    c: np.ndarray,
    tc: float,
    levels: int,
    xq: np.ndarray,
    wq: np.ndarray,
    rs: np.ndarray,
    zs: np.ndarray,
    wt: np.ndarray,
    tau: np.ndarray,
    e: int,
) -> int:
    """The graded sub-rule of one panel (``kind``, coefficients ``c``) cut at ``tc``: ratio 2
    towards the cut, ``levels`` pieces per side, the innermost touching it, each piece the
    Gauss rule (xq, wq). Writes points ``rs``, ``zs``, weights ``wt`` (Gauss weight times
    half-width times length element) and parameters ``tau`` from index ``e``; returns the
    next index."""
    jac = straight_jac(kind, c)
    for side in (1.0, -1.0):
        span = 1.0 - tc if side > 0 else tc + 1.0
        if span <= 0.0:
            continue
        for k in range(levels):
            mid, half = graded_piece(k, levels, span)
            for q in range(xq.shape[0]):
                t = tc + side * (mid + half * xq[q])
                rs[e], zs[e], jac = subrule_point(kind, c, t, jac)
                wt[e] = wq[q] * half * jac
                tau[e] = t
                e += 1
    return e


@njit(cache=True)
def straight_jac(kind: int, c: np.ndarray) -> float:
    """The constant length element of a straight panel (``kind`` 0), else 0."""
    return 0.5 * math.hypot(c[2] - c[0], c[3] - c[1]) if kind == 0 else 0.0


@njit(cache=True)
def subrule_point(kind: int, c: np.ndarray, t: float, jac: float) -> tuple[float, float, float]:
    """:func:`panel_point` at ``t``, a straight panel's (linear in t) with its length element
    ``jac`` from :func:`straight_jac` (the sub-rules' points). A mapped panel (kind 3)
    interpolates sigma times its length element, so its sub-rules take the element 1 (the
    callers scale its rows by the nodes' ``mesh.interp_jac``)."""
    if kind == 0:
        s = 0.5 * (t + 1.0)
        return c[0] + s * (c[2] - c[0]), c[1] + s * (c[3] - c[1]), jac
    # Other kinds through panel_point, the mapped one too (its element discarded): a mapped
    # branch of its own here kept numba from inlining this function into the near pass's
    # loops, whose straight-panel sub-rules then took 2.6x longer (measured 3 Dec 2026).
    rs, zs, element = panel_point(kind, c, t)
    return rs, zs, 1.0 if kind == 3 else element


@njit(cache=True)
def near_rows(
    tr: np.ndarray,
    tz: np.ndarray,
    kind: np.ndarray,
    coef: np.ndarray,
    tau_c: np.ndarray,
    levels: np.ndarray,
    mirror: bool,
    field: bool,
    x: np.ndarray,
    bary: np.ndarray,
    xq: np.ndarray,
    wq: np.ndarray,
) -> np.ndarray:
    """Accurate rows (B, p, ncomp) for near (target, panel) pairs.

    Each panel takes the graded sub-rule of :func:`subrule_points` cut at ``tau_c[b]`` with
    ``levels[b]`` pieces per side; sigma is the panel's Lagrange interpolant on nodes ``x``
    (barycentric weights ``bary``).
    """
    n_pairs = tr.shape[0]
    p = x.shape[0]
    ncomp = 2 if field else 1
    out = np.zeros((n_pairs, p, ncomp))
    lag = np.empty(p)
    size = 2 * xq.shape[0] * (levels.max() if n_pairs else 0)
    rs, zs, wt, tau = np.empty(size), np.empty(size), np.empty(size), np.empty(size)
    for b in range(n_pairs):
        t_r, t_z = tr[b], tz[b]
        n = subrule_points(kind[b], coef[b], tau_c[b], levels[b], xq, wq, rs, zs, wt, tau, 0)
        for e in range(n):
            z_s = -zs[e] if mirror else zs[e]
            _lagrange(tau[e], x, bary, lag)
            if field:
                er, ez = _ring_e(t_r, t_z, rs[e], z_s)
                for j in range(p):
                    out[b, j, 0] += er * wt[e] * lag[j]
                    out[b, j, 1] += ez * wt[e] * lag[j]
            else:
                v = _ring_phi(t_r, t_z, rs[e], z_s) * wt[e]
                for j in range(p):
                    out[b, j, 0] += v * lag[j]
    return out


@njit(cache=True)
def graded_piece(k: int, levels: int, span: float) -> tuple[float, float]:
    """Midpoint and half-width (reference units from the cut) of piece ``k`` of ``levels``
    graded towards a cut ``span`` from the panel's end (ratio 2, the last touching the cut)."""
    hi = math.ldexp(span, -k)
    lo = 0.0 if k == levels - 1 else 0.5 * hi
    return 0.5 * (hi + lo), 0.5 * (hi - lo)


@njit(cache=True)
def own_panel_pv_rows(
    tr: np.ndarray,
    tz: np.ndarray,
    nr: np.ndarray,
    nz: np.ndarray,
    kind: np.ndarray,
    coef: np.ndarray,
    tau_c: np.ndarray,
    delta: np.ndarray,
    levels: np.ndarray,
    n_inner: int,
    x: np.ndarray,
    bary: np.ndarray,
    xq: np.ndarray,
    wq: np.ndarray,
) -> np.ndarray:
    """Principal value (B, p) of the normal field at targets on their own panel.

    Graded as in :func:`near_rows` (``levels[b]`` pieces per side towards ``tau_c[b]``). The
    ``n_inner`` innermost pieces per side take the mean of the normal fields at d, 2d, 4d
    off both sides (d = ``delta[b]``), extrapolated to d = 0 as (8 M(d) - 6 M(2d) + M(4d))
    / 3; the outer pieces, smooth at the target, are evaluated at the target itself.
    """
    n_t = tr.shape[0]
    p = x.shape[0]
    out = np.zeros((n_t, p))
    lag = np.empty(p)
    offs = np.array([1.0, -1.0, 2.0, -2.0, 4.0, -4.0])
    wts = np.array([4.0, 4.0, -3.0, -3.0, 0.5, 0.5]) / 3.0
    for b in range(n_t):
        tc = tau_c[b]
        r, z = tr[b], tz[b]
        ur, uz = nr[b], nz[b]
        d = delta[b]
        c = coef[b]
        for side in (1.0, -1.0):
            span = 1.0 - tc if side > 0 else tc + 1.0
            for k in range(levels[b] if span > 0.0 else 0):
                mid, half = graded_piece(k, levels[b], span)
                inner = k >= levels[b] - n_inner
                for q in range(xq.shape[0]):
                    tau = tc + side * (mid + half * xq[q])
                    rs, zs, jac = panel_point(kind[b], c, tau)
                    if inner:
                        v = 0.0
                        for o in range(6):
                            er, ez = _ring_e(r + offs[o] * d * ur, z + offs[o] * d * uz, rs, zs)
                            v += wts[o] * (er * ur + ez * uz)
                    else:
                        er, ez = _ring_e(r, z, rs, zs)
                        v = er * ur + ez * uz
                    v *= wq[q] * half * jac
                    _lagrange(tau, x, bary, lag)
                    for j in range(p):
                        out[b, j] += v * lag[j]
    return out


@njit(cache=True)
def lagrange_coefficients(x: np.ndarray, bary: np.ndarray) -> np.ndarray:
    """(p, p): entry (j, k) the coefficient of t^j in the Lagrange polynomial l_k on nodes
    ``x`` (barycentric weights ``bary``)."""
    p = x.shape[0]
    out = np.zeros((p, p))
    c = np.empty(p)
    for k in range(p):
        c[:] = 0.0
        c[0] = bary[k]
        deg = 0
        for m in range(p):
            if m == k:
                continue
            for d in range(deg + 1, 0, -1):  # c *= (t - x[m])
                c[d] = c[d - 1] - x[m] * c[d]
            c[0] = -x[m] * c[0]
            deg += 1
        out[:, k] = c
    return out


@njit(cache=True, error_model="numpy")
def lagrange_rows(
    v: np.ndarray,
    tau: np.ndarray,
    start: np.ndarray,
    b0: int,
    b1: int,
    x: np.ndarray,
    bary: np.ndarray,
    mat: np.ndarray,
    rows: np.ndarray,
    panels: np.ndarray,
    col_scale: np.ndarray,
    sign: float,
) -> None:
    """Add ``sign`` * sum_e v[e] l_k(tau[e]) * ``col_scale[j]`` over the evaluations e of each
    group b0..b1-1 (from ``start[b] - start[b0]`` in ``v``, ``tau``) into
    ``mat[rows[b], j]``, j = panels[b] * p + k; l_k the Lagrange basis on the p nodes ``x``
    in [-1, 1]. Each (row, column) pair once.

    The moments sum_e v[e] tau[e]^j are taken first and turned into the basis by
    :func:`lagrange_coefficients`: half the time of the basis at every point. Measured
    against that (random points and values): differences 2e-16 of sum |v| up to 8 nodes,
    1.3e-12 at 16.
    """
    p = x.shape[0]
    coef = lagrange_coefficients(x, bary)
    mom = np.empty(p)
    for b in range(b0, b1):
        e0, e1 = start[b] - start[b0], start[b + 1] - start[b0]
        if p == 4:
            mom[0], mom[1], mom[2], mom[3] = _moments4(v, tau, e0, e1)
        else:
            mom[:] = 0.0
            for e in range(e0, e1):
                t = tau[e]
                power = v[e]
                for j in range(p):
                    mom[j] += power
                    power *= t
        for k in range(p):
            s = 0.0
            for j in range(p):
                s += mom[j] * coef[j, k]
            col = panels[b] * p + k
            mat[rows[b], col] += sign * s * col_scale[col]


@njit(cache=True, error_model="numpy")
def _moments4(v: np.ndarray, tau: np.ndarray, e0: int, e1: int):
    """The moments sum_e v[e] tau[e]^j, j = 0..3, over e0..e1-1 of :func:`lagrange_rows` for
    four nodes (the loose requests' order), summed in the same order in registers instead of
    an array: half the time, the same bits."""
    m0 = m1 = m2 = m3 = 0.0
    for e in range(e0, e1):
        t = tau[e]
        power = v[e]
        m0 += power
        power *= t
        m1 += power
        power *= t
        m2 += power
        power *= t
        m3 += power
    return m0, m1, m2, m3


def lagrange_sums(
    params,
    counts: np.ndarray,
    start: np.ndarray,
    x: np.ndarray,
    bary: np.ndarray,
    mat: np.ndarray,
    rows: np.ndarray,
    panels: np.ndarray,
    col_scale: np.ndarray,
    sign: float,
) -> None:
    """:func:`lagrange_rows` into ``mat`` of groups with ``counts`` (B,) evaluations each, from
    ``start`` (B + 1,) (the running sum of ``counts`` from 0), whose m1, scale and tau
    ``params(b0, b1, start)`` returns for groups b0..b1-1, in batches of about
    ``BATCH_PAIRS`` through :func:`scaled_k`."""
    edges = batch_edges(counts).tolist()
    for b0, b1 in zip(edges[:-1], edges[1:], strict=True):
        m1, scale, tau = params(b0, b1, start)
        v = scaled_k(m1, scale)
        lagrange_rows(v, tau, start, b0, b1, x, bary, mat, rows, panels, col_scale, sign)


def add_self_blocks(
    mat: np.ndarray,
    points: np.ndarray,
    kind: np.ndarray,
    coef: np.ndarray,
    length: np.ndarray,
    density_scale: np.ndarray,
    max_levels: int,
    x: np.ndarray,
    bary: np.ndarray,
    xq: np.ndarray,
    wq: np.ndarray,
    logw_end: np.ndarray,
) -> None:
    """Add each panel's self-interaction into ``mat`` (N, N): row of node i, columns of the
    nodes of i's own panel (nodes ``points`` (N, 2) in runs of p = len(x) per panel).

    Each target is cut out of its panel at its node and graded towards it (``_self_levels``
    pieces per side, the innermost touching it); the innermost pieces use the exact split
    K(m) = A(m1) - K(m1) ln(m1) / pi with the logarithm integrated by the product weights
    ``logw_end`` (singularity at the piece's end u = -1). The kernel goes through
    :func:`scaled_k`'s batched form; the rows interpolate sigma times ``density_scale`` (N,)
    and are scaled by the nodes' values.
    """
    levels, start = _self_levels(points, kind, coef, length, x, max_levels, xq.shape[0])
    edges = batch_edges(np.diff(start)).tolist()
    for b0, b1 in zip(edges[:-1], edges[1:], strict=True):
        m1, scale, tau = _self_params(
            b0, b1, start, points, kind, coef, levels, x, xq, wq, logw_end
        )
        _self_fill(m1, np.log(m1), scale, tau, start, b0, b1, x, bary, density_scale, mat)


@njit(cache=True, error_model="numpy")
def _self_levels(
    points: np.ndarray,
    kind: np.ndarray,
    coef: np.ndarray,
    length: np.ndarray,
    x: np.ndarray,
    max_levels: int,
    n_rule: int,
) -> tuple[np.ndarray, np.ndarray]:
    """Graded pieces per side (N,) of each node's self row and the start (N + 1,) of its
    evaluations (per side and piece ``n_rule`` points, the innermost twice; a node lies inside
    its panel, so both sides have pieces).

    Down to pieces of about half the target's distance r to the axis (the kernel's smooth part
    varies on that scale): 1 + ceil(log2(2 L / r)) pieces, L the panel length; on a mapped
    panel also down to half the parameter distance d_c to the corner away from the target
    (1 + ceil(log2(4 / d_c))); between 1 and ``max_levels``.
    """
    n = points.shape[0]
    p = x.shape[0]
    levels = np.empty(n, np.int64)
    start = np.empty(n + 1, np.int64)
    start[0] = 0
    for b in range(n):
        panel = b // p
        ratio = 2.0 * length[panel] / max(points[b, 0], 1e-300)
        if kind[panel] == 3:
            to_corner = x[b % p] + 1.0 if coef[panel, 4] > 0 else 1.0 - x[b % p]
            ratio = max(ratio, 4.0 / to_corner)
        frac, expo = math.frexp(max(ratio, 1.0))  # ceil(log2) exactly: 2^(expo - 1) < ratio
        ceil_log2 = expo - 1 if frac == 0.5 else expo
        levels[b] = min(max(ceil_log2 + 1, 1), max_levels)
        start[b + 1] = start[b] + 2 * (levels[b] + 1) * n_rule
    return levels, start


@njit(cache=True)
def panel_coefs(coef: np.ndarray, j: int) -> tuple[float, float, float, float, float]:
    """Panel j's coefficients (row of ``coef`` (P, 5)) as a tuple for :func:`panel_point` and
    its kin: a row view passed to them in a hot loop costs reference counting per call (the
    self rows' parameters took 2.7 times as long with it, measured 3 Dec 2026)."""
    return coef[j, 0], coef[j, 1], coef[j, 2], coef[j, 3], coef[j, 4]


@njit(cache=True, error_model="numpy")
def _self_params(
    b0, b1, start, points, kind, coef, levels, x, xq, wq, logw_end
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """m1, scale and tau of the evaluations of nodes b0..b1-1 of :func:`add_self_blocks`, in
    the order :func:`_self_levels` counts them: per piece its Gauss points; the innermost
    piece per side adds, per point, the logarithmic part K(m) with parameter
    m = 4 r r' / rho_plus^2 (``scaled_k`` takes its complement m1 = 1 - m)."""
    p = x.shape[0]
    total = start[b1] - start[b0]
    m1 = np.empty(total)
    scale = np.empty(total)
    tau_out = np.empty(total)
    # The innermost piece [0, 2h] from the target: ln(dist / h) = ln(1 + xq) at its points.
    log_part = np.empty(xq.shape[0])
    for q in range(xq.shape[0]):
        log_part[q] = (2.0 / math.pi) * (wq[q] * math.log1p(xq[q]) - logw_end[q])
    for b in range(b0, b1):
        e = start[b] - start[b0]
        tc = x[b % p]
        r, z = points[b, 0], points[b, 1]
        kd = kind[b // p]
        c = panel_coefs(coef, b // p)
        jac = straight_jac(kd, c)
        for side in (1.0, -1.0):
            span = 1.0 - tc if side > 0 else tc + 1.0
            for k in range(levels[b]):
                inner = k == levels[b] - 1
                mid, half = graded_piece(k, levels[b], span)
                for q in range(xq.shape[0]):
                    tau = tc + side * (mid + half * xq[q])
                    rs, zs, jac = _self_point(kd, c, tau, jac)
                    dz = z - zs
                    inv = 1.0 / ((r + rs) ** 2 + dz * dz)
                    pref = rs * math.sqrt(inv) * _INV_PI * half * jac
                    m1[e] = ((r - rs) ** 2 + dz * dz) * inv
                    scale[e] = pref * wq[q]
                    tau_out[e] = tau
                    e += 1
                    if inner:
                        # K(m) = A(m1) - K(m1) ln(m1) / pi, the logarithm in m1 ~ dist^2
                        # integrated by the product weights: the K(m1) part's scale.
                        m1[e] = 4.0 * r * rs * inv
                        scale[e] = pref * log_part[q]
                        tau_out[e] = tau
                        e += 1
    return m1, scale, tau_out


@njit(cache=True)
def _self_point(
    kind: int, c: tuple[float, float, float, float, float], t: float, jac: float
) -> tuple[float, float, float]:
    """:func:`subrule_point` without a mapped panel's length element, which it computes and
    discards (a hypot per point: the sharp probe's self rows took 1.6 times as long)."""
    if kind == 3:
        frac, _ = mapped_point(c[4], t)
        return c[0] + frac * (c[2] - c[0]), c[1] + frac * (c[3] - c[1]), 1.0
    return subrule_point(kind, c, t, jac)


@njit(cache=True, error_model="numpy")
def _self_fill(
    m1: np.ndarray,
    log_m1: np.ndarray,
    scale: np.ndarray,
    tau: np.ndarray,
    start: np.ndarray,
    b0: int,
    b1: int,
    x: np.ndarray,
    bary: np.ndarray,
    density_scale: np.ndarray,
    mat: np.ndarray,
) -> None:
    """Add the self rows of nodes b0..b1-1 (their evaluations' ``scaled_k`` values interpolated
    as in :func:`lagrange_rows`, times the columns' ``density_scale``) into ``mat``."""
    p = x.shape[0]
    v = _scaled_k(m1, log_m1, scale)
    coef = lagrange_coefficients(x, bary)
    mom = np.empty(p)
    for b in range(b0, b1):
        e0, e1 = start[b] - start[b0], start[b + 1] - start[b0]
        if p == 4:
            mom[0], mom[1], mom[2], mom[3] = _moments4(v, tau, e0, e1)
        else:
            mom[:] = 0.0
            for e in range(e0, e1):
                t = tau[e]
                power = v[e]
                for j in range(p):
                    mom[j] += power
                    power *= t
        first = (b // p) * p
        for k in range(p):
            s = 0.0
            for j in range(p):
                s += mom[j] * coef[j, k]
            mat[b, first + k] += s * density_scale[first + k]


@njit(cache=True)
def foot_points(
    tr: np.ndarray, tz: np.ndarray, kind: np.ndarray, coef: np.ndarray, mirror: bool
) -> tuple[np.ndarray, np.ndarray]:
    """Reference parameter (B,) of the panel point nearest each target, and the distance (B,).

    Exact projection for segments and arcs; ellipse arcs by sampling and local refinement.
    ``mirror`` uses the panel's image in z = 0.
    """
    n = tr.shape[0]
    tau = np.empty(n)
    dist = np.empty(n)
    sgn = -1.0 if mirror else 1.0
    for b in range(n):
        c = panel_coefs(coef, b)
        r, z = tr[b], sgn * tz[b]
        if kind[b] == 0 or kind[b] == 3:
            dr, dz = c[2] - c[0], c[3] - c[1]
            s = ((r - c[0]) * dr + (z - c[1]) * dz) / (dr * dr + dz * dz)
            s = min(max(s, 0.0), 1.0)
            dist[b] = math.hypot(r - c[0] - s * dr, z - c[1] - s * dz)
            if kind[b] == 3:  # invert the map's chord fraction
                m = abs(c[4])
                s = 2.0 * s ** (1.0 / m) if c[4] > 0 else 2.0 - 2.0 * (1.0 - s) ** (1.0 / m)
                s *= 0.5
            tau[b] = 2.0 * s - 1.0
        elif kind[b] == 1:
            a0, a1 = c[3], c[4]
            ang = math.atan2(z - c[1], r - c[0])
            lo, hi = min(a0, a1), max(a0, a1)
            mid = 0.5 * (lo + hi)
            ang = ang + 2 * math.pi * round((mid - ang) / (2 * math.pi))
            if ang < lo or ang > hi:
                d_lo = math.hypot(r - c[0] - c[2] * math.cos(lo), z - c[1] - c[2] * math.sin(lo))
                d_hi = math.hypot(r - c[0] - c[2] * math.cos(hi), z - c[1] - c[2] * math.sin(hi))
                ang = lo if d_lo < d_hi else hi
            s = (ang - a0) / (a1 - a0)
            tau[b] = 2.0 * s - 1.0
            dist[b] = math.hypot(r - c[0] - c[2] * math.cos(ang), z - c[1] - c[2] * math.sin(ang))
        else:
            best, best_d = -1.0, 1e300
            width = 2.0
            center = 0.0
            for _ in range(4):
                for k in range(33):
                    t = min(max(center + width * (k / 16.0 - 1.0), -1.0), 1.0)
                    pr, pz, _ = panel_point(kind[b], c, t)
                    d = math.hypot(r - pr, z - pz)
                    if d < best_d:
                        best, best_d = t, d
                center = best
                width /= 8.0
            tau[b] = best
            dist[b] = best_d
    return tau, dist

"""Integrals of 1/|x - x'| over flat triangles with a constant density (compiled, numba).

For a target x and a flat triangle T the potential integral I(x) = integral_T dA' / |x - x'|
and its gradient have a classical closed form (Wilton et al., IEEE Trans. Antennas Propag.
32, 276 (1984); Graglia, ibid. 41, 1448 (1993)). With w the height of x over the plane of T,
rho its foot point, and for each edge i: unit tangent l_i, in-plane outward normal u_i,
foot distances l_i-, l_i+ of its end points along l_i, signed distance P_i of rho from the
edge line, end point distances R_i-, R_i+ and R0_i^2 = P_i^2 + w^2:

    f_i    = ln((R_i+ + l_i+) / (R_i- + l_i-))
    beta_i = atan(P_i l_i+ / (R0_i^2 + |w| R_i+)) - atan(P_i l_i- / (R0_i^2 + |w| R_i-))
    I      = sum_i P_i f_i - |w| sum_i beta_i
    grad I = -sum_i u_i f_i - sign(w) n sum_i beta_i

On the triangle's own plane (w = 0, or |w| below ``IN_PLANE`` times the triangle's size,
which rounding of a centroid gives) the gradient is the principal value (mean of both sides). The closed form loses digits far away, where symmetric Gauss rules are exact enough
and cheaper: the rule is picked from the distance d between target and centroid in units of
the panel's longest edge h (closed form for d < 2.5 h, 7 points for d < 6 h, else 3 points).
All routines return raw integrals (no 1/(4 pi eps)).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit, prange

from elopt.physics.kernel_cache import drop_stale_kernel_caches

drop_stale_kernel_caches()

#: Heights over a triangle's plane below this fraction of its size count as in the plane.
IN_PLANE = 1e-10
#: Distance (in panel diameters) below which the closed form is used.
NEAR_ANALYTIC = 2.5
#: Distance (in panel diameters) below which the 7-point rule is used, above it 3 points.
NEAR_SEVEN = 6.0

# Symmetric triangle rules in barycentric coordinates (weights sum to 1):
# 3 points, exact for degree 2; 7 points (Radon), exact for degree 5.
RULE3_BARY = np.array(
    [[2 / 3, 1 / 6, 1 / 6], [1 / 6, 2 / 3, 1 / 6], [1 / 6, 1 / 6, 2 / 3]], dtype=np.float64
)
RULE3_W = np.full(3, 1 / 3)
_A1, _B1 = (6 - math.sqrt(15)) / 21, (9 + 2 * math.sqrt(15)) / 21
_A2, _B2 = (6 + math.sqrt(15)) / 21, (9 - 2 * math.sqrt(15)) / 21
RULE7_BARY = np.array(
    [
        [1 / 3, 1 / 3, 1 / 3],
        [_A1, _A1, _B1],
        [_A1, _B1, _A1],
        [_B1, _A1, _A1],
        [_A2, _A2, _B2],
        [_A2, _B2, _A2],
        [_B2, _A2, _A2],
    ]
)
_W1 = (155 - math.sqrt(15)) / 1200
_W2 = (155 + math.sqrt(15)) / 1200
RULE7_W = np.array([9 / 40, _W1, _W1, _W1, _W2, _W2, _W2])


@njit(cache=True, inline="always")
def _log_ratio(rp: float, lp: float, rm: float, lm: float, r0sq: float) -> float:
    """ln((R+ + l+)/(R- + l-)) without cancellation; 0 on the edge line itself."""
    if lm > 0.0:
        return math.log((rp + lp) / (rm + lm))
    if lp < 0.0:
        return math.log((rm - lm) / (rp - lp))
    num = (rp + lp) * (rm - lm)
    if r0sq <= 0.0 or num <= 0.0:
        return 0.0
    return math.log(num / r0sq)


@njit(cache=True)
def analytic(p: np.ndarray, tri: np.ndarray, out: np.ndarray) -> None:
    """Closed form: out[0] = I(p), out[1:4] = grad I(p) for the triangle tri (3, 3)."""
    e1 = tri[1] - tri[0]
    e2 = tri[2] - tri[0]
    nx = e1[1] * e2[2] - e1[2] * e2[1]
    ny = e1[2] * e2[0] - e1[0] * e2[2]
    nz = e1[0] * e2[1] - e1[1] * e2[0]
    nn = math.sqrt(nx * nx + ny * ny + nz * nz)
    nx /= nn
    ny /= nn
    nz /= nn
    w = (p[0] - tri[0, 0]) * nx + (p[1] - tri[0, 1]) * ny + (p[2] - tri[0, 2]) * nz
    if abs(w) <= IN_PLANE * math.sqrt(nn):
        # rounding of a point in the plane (a centroid): take the plane, where the normal
        # component of the gradient is the principal value (0 on the triangle itself)
        w = 0.0
    aw = abs(w)
    fx = p[0] - w * nx
    fy = p[1] - w * ny
    fz = p[2] - w * nz
    phi = 0.0
    gx = 0.0
    gy = 0.0
    gz = 0.0
    beta_sum = 0.0
    for i in range(3):
        a = tri[i]
        b = tri[(i + 1) % 3]
        lx = b[0] - a[0]
        ly = b[1] - a[1]
        lz = b[2] - a[2]
        ln = math.sqrt(lx * lx + ly * ly + lz * lz)
        lx /= ln
        ly /= ln
        lz /= ln
        ux = ly * nz - lz * ny
        uy = lz * nx - lx * nz
        uz = lx * ny - ly * nx
        ax = a[0] - fx
        ay = a[1] - fy
        az = a[2] - fz
        bx = b[0] - fx
        by = b[1] - fy
        bz = b[2] - fz
        lm = ax * lx + ay * ly + az * lz
        lp = bx * lx + by * ly + bz * lz
        p0 = ax * ux + ay * uy + az * uz
        rm = math.sqrt(ax * ax + ay * ay + az * az + w * w)
        rp = math.sqrt(bx * bx + by * by + bz * bz + w * w)
        r0sq = p0 * p0 + w * w
        f = _log_ratio(rp, lp, rm, lm, r0sq)
        beta = 0.0
        if p0 != 0.0:
            beta = math.atan(p0 * lp / (r0sq + aw * rp)) - math.atan(p0 * lm / (r0sq + aw * rm))
        phi += p0 * f
        beta_sum += beta
        gx -= ux * f
        gy -= uy * f
        gz -= uz * f
    phi -= aw * beta_sum
    s = 0.0
    if w > 0.0:
        s = 1.0
    elif w < 0.0:
        s = -1.0
    out[0] = phi
    out[1] = gx - s * nx * beta_sum
    out[2] = gy - s * ny * beta_sum
    out[3] = gz - s * nz * beta_sum


@njit(cache=True, inline="always")
def _rule(p: np.ndarray, tri: np.ndarray, area: float, bary: np.ndarray, wts: np.ndarray, out):
    phi = 0.0
    gx = 0.0
    gy = 0.0
    gz = 0.0
    for q in range(wts.shape[0]):
        qx = bary[q, 0] * tri[0, 0] + bary[q, 1] * tri[1, 0] + bary[q, 2] * tri[2, 0]
        qy = bary[q, 0] * tri[0, 1] + bary[q, 1] * tri[1, 1] + bary[q, 2] * tri[2, 1]
        qz = bary[q, 0] * tri[0, 2] + bary[q, 1] * tri[1, 2] + bary[q, 2] * tri[2, 2]
        dx = p[0] - qx
        dy = p[1] - qy
        dz = p[2] - qz
        r2 = dx * dx + dy * dy + dz * dz
        if r2 == 0.0:
            # A target on a quadrature point: skipped, as the multipole sum skips it.
            continue
        inv = 1.0 / math.sqrt(r2)
        wq = wts[q] * area * inv
        phi += wq
        c = wq / r2
        gx -= c * dx
        gy -= c * dy
        gz -= c * dz
    out[0] = phi
    out[1] = gx
    out[2] = gy
    out[3] = gz


@njit(cache=True)
def panel_integral(
    p: np.ndarray,
    tri: np.ndarray,
    centroid: np.ndarray,
    area: float,
    diam: float,
    r3: np.ndarray,
    w3: np.ndarray,
    r7: np.ndarray,
    w7: np.ndarray,
    out: np.ndarray,
) -> None:
    """I(p) and grad I(p) into out (4,), rule chosen by the distance (module docstring)."""
    dx = p[0] - centroid[0]
    dy = p[1] - centroid[1]
    dz = p[2] - centroid[2]
    d = math.sqrt(dx * dx + dy * dy + dz * dz)
    if d < NEAR_ANALYTIC * diam:
        analytic(p, tri, out)
    elif d < NEAR_SEVEN * diam:
        _rule(p, tri, area, r7, w7, out)
    else:
        _rule(p, tri, area, r3, w3, out)


@njit(cache=True)
def _mirror(tri: np.ndarray, out: np.ndarray) -> None:
    for k in range(3):
        out[k, 0] = tri[k, 0]
        out[k, 1] = tri[k, 1]
        out[k, 2] = -tri[k, 2]


@njit(cache=True, parallel=True)
def pair_integrals(
    targets: np.ndarray,
    corners: np.ndarray,
    centroids: np.ndarray,
    areas: np.ndarray,
    diams: np.ndarray,
    ti: np.ndarray,
    tj: np.ndarray,
    image: bool,
    r3: np.ndarray,
    w3: np.ndarray,
    r7: np.ndarray,
    w7: np.ndarray,
) -> np.ndarray:
    """(P, 4) potential integral and gradient for target ti[k] and panel tj[k].

    ``image``: the panel is reflected in z = 0 first (the ground plane's image panel).
    """
    n = ti.shape[0]
    out = np.empty((n, 4))
    for k in prange(n):
        j = tj[k]
        buf = np.empty(4)
        tri = np.empty((3, 3))
        c = centroids[j].copy()
        if image:
            _mirror(corners[j], tri)
            c[2] = -c[2]
        else:
            for a in range(3):
                for b in range(3):
                    tri[a, b] = corners[j, a, b]
        panel_integral(targets[ti[k]], tri, c, areas[j], diams[j], r3, w3, r7, w7, buf)
        for c4 in range(4):
            out[k, c4] = buf[c4]
    return out


@njit(cache=True, parallel=True)
def dense_potential_matrix(
    targets: np.ndarray,
    corners: np.ndarray,
    centroids: np.ndarray,
    areas: np.ndarray,
    diams: np.ndarray,
    image: bool,
    r3: np.ndarray,
    w3: np.ndarray,
    r7: np.ndarray,
    w7: np.ndarray,
) -> np.ndarray:
    """(M, T) matrix of I (minus the image panel's I when ``image``)."""
    m = targets.shape[0]
    t = corners.shape[0]
    a = np.empty((m, t))
    for i in prange(m):
        buf = np.empty(4)
        tri = np.empty((3, 3))
        c = np.empty(3)
        for j in range(t):
            panel_integral(
                targets[i], corners[j], centroids[j], areas[j], diams[j], r3, w3, r7, w7, buf
            )
            v = buf[0]
            if image:
                _mirror(corners[j], tri)
                c[0] = centroids[j, 0]
                c[1] = centroids[j, 1]
                c[2] = -centroids[j, 2]
                panel_integral(targets[i], tri, c, areas[j], diams[j], r3, w3, r7, w7, buf)
                v -= buf[0]
            a[i, j] = v
    return a


@njit(cache=True, parallel=True)
def direct_sums(
    targets: np.ndarray,
    corners: np.ndarray,
    centroids: np.ndarray,
    areas: np.ndarray,
    diams: np.ndarray,
    density: np.ndarray,
    image: bool,
    r3: np.ndarray,
    w3: np.ndarray,
    r7: np.ndarray,
    w7: np.ndarray,
) -> np.ndarray:
    """(M, 4, K): sum_j density[j, k] * (I, grad I)(target) over all panels, K densities."""
    m = targets.shape[0]
    t = corners.shape[0]
    nk = density.shape[1]
    out = np.zeros((m, 4, nk))
    for i in prange(m):
        buf = np.empty(4)
        tri = np.empty((3, 3))
        c = np.empty(3)
        acc = np.zeros((4, nk))
        for j in range(t):
            panel_integral(
                targets[i], corners[j], centroids[j], areas[j], diams[j], r3, w3, r7, w7, buf
            )
            for q in range(4):
                for k in range(nk):
                    acc[q, k] += buf[q] * density[j, k]
            if image:
                _mirror(corners[j], tri)
                c[0] = centroids[j, 0]
                c[1] = centroids[j, 1]
                c[2] = -centroids[j, 2]
                panel_integral(targets[i], tri, c, areas[j], diams[j], r3, w3, r7, w7, buf)
                for q in range(4):
                    for k in range(nk):
                        acc[q, k] -= buf[q] * density[j, k]
        for q in range(4):
            for k in range(nk):
                out[i, q, k] = acc[q, k]
    return out


def rules() -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The (bary, weights) pairs of the 3- and 7-point rules, as passed to the kernels."""
    return RULE3_BARY, RULE3_W, RULE7_BARY, RULE7_W

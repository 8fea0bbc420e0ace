"""The smooth remainder of the layered kernel (see :mod:`elopt.physics.bem2d.layered_green`).

``periodic_remainder`` sums the spectral series; ``open_remainder`` takes the Laplace transforms
F_pq(w) along rays k = s exp(-i psi) with psi = arg(w) / 2 (rounded to one of ``RAYS`` angles),
so that neither exp(-k w) nor the slab factors exp(-k d) oscillate faster than they decay.
Both return R (T, S) in V per (C/m) at target and source points; the caller weights columns.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from elopt.physics.bem2d.layered_green import TAIL, Slabs, octave_rule

RAYS = 9


def _rho(slabs: Slabs, k: np.ndarray, i: int, j: int) -> np.ndarray:
    """(K, 2, 2): k M(k) - M_inf for target slab i, source slab j."""
    km = slabs.k_times_m(slabs.decay_factors(k), j)[:, i]
    return km - slabs.m_inf[j, i][None]


def _periodic_spectrum(slabs: Slabs, period: float, i: int, j: int):
    """k_n (n,) and rho_pq(k_n) (n, 2, 2), cached on ``slabs`` (one solve per k_n)."""
    cache = slabs.__dict__.setdefault("_spectra", {})
    key = ("periodic", period, i, j)
    if key not in cache:
        d_min = slabs.min_thickness_m
        n_max = max(1, math.ceil(-math.log(TAIL) * period / (2 * math.pi * d_min)))
        k = 2 * math.pi * np.arange(1, n_max + 1) / period
        cache[key] = (k, _rho(slabs, k.astype(complex), i, j) / k[:, None, None])
    return cache[key]


def periodic_remainder(
    slabs: Slabs, period: float, i: int, j: int, xt, zt, xs, zs, extracted
) -> np.ndarray:
    """Remainder of the periodic kernel; ``extracted`` lists the (c, s, t0) terms taken out."""
    k, rho = _periodic_spectrum(slabs, period, i, j)
    it = np.full(len(zt), i)
    js = np.full(len(zs), j)
    ht = slabs.heights(zt, it)
    hs = slabs.heights(zs, js)
    out = np.zeros((len(zt), len(zs)))
    et = np.exp(1j * np.outer(xt, k))
    es = np.exp(-1j * np.outer(xs, k))
    for p in range(2):
        if not np.isfinite(ht[:, p]).all():
            continue
        u = np.exp(-np.outer(ht[:, p], k)) * et
        for q in range(2):
            if not np.isfinite(hs[:, q]).all() or not np.any(rho[:, p, q]):
                continue
            v = np.exp(-np.outer(hs[:, q], k)) * es
            out += ((u * rho[None, :, p, q]) @ v.T).real
    out *= 2.0 / period
    g0 = slabs.zero_mode(zt, zs)
    for c, s, t0 in extracted:
        g0 += 0.5 * c * np.abs((t0 + s * zt)[:, None] - zs[None, :])
    return out + g0 / period


@numba.njit(cache=True)
def _ray_sums(xt, ht, xs, hs, kr, wr, rho, out):  # pragma: no cover - compiled
    n_rays = kr.shape[0]
    nq = kr.shape[1]
    for t in range(xt.shape[0]):
        for s in range(xs.shape[0]):
            dx = abs(xt[t] - xs[s])
            acc = 0.0
            for p in range(2):
                if not np.isfinite(ht[t, p]):
                    continue
                for q in range(2):
                    if not np.isfinite(hs[s, q]):
                        continue
                    alpha = ht[t, p] + hs[s, q]
                    phi = math.atan2(dx, alpha)
                    a = int(round(0.5 * phi / (0.25 * math.pi) * (n_rays - 1)))
                    w = complex(alpha, dx)
                    f = 0j
                    for m in range(nq):
                        f += wr[a, m] * rho[a, m, p, q] * np.exp(-kr[a, m] * w)
                    acc += f.real
            out[t, s] = acc


#: Chebyshev nodes per table panel (each panel spans one unit of asinh(length / d_min)).
TABLE_NODES = 8


def _ray_setup(slabs: Slabs, i: int, j: int, extent_m: float):
    """Rays (A, Q) complex nodes, weights (with 1/pi) and rho~ (A, Q, 2, 2); m0 - M_inf; L.
    Cached on ``slabs``."""
    cache = slabs.__dict__.setdefault("_spectra", {})
    key = ("open", extent_m, i, j)
    if key not in cache:
        cache[key] = _ray_setup_uncached(slabs, i, j, extent_m)
    return cache[key]


def _ray_setup_uncached(slabs: Slabs, i: int, j: int, extent_m: float):
    d_min = slabs.min_thickness_m
    fin = np.isfinite(slabs.thickness_m)
    big_l = float(slabs.thickness_m[fin].sum())
    d_big = extent_m + big_l
    s, ws = octave_rule(0.05 / d_big, 40.0 / (d_min * math.cos(math.pi / 4)))
    psi = 0.25 * math.pi * np.arange(RAYS) / (RAYS - 1)
    rot = np.exp(-1j * psi)
    kr = rot[:, None] * s[None, :]
    wr = (rot[:, None] * ws[None, :]) / math.pi
    kflat = kr.ravel()
    m0 = slabs.m_zero[j, i] - slabs.m_inf[j, i]
    rho = _rho(slabs, kflat, i, j) - m0[None] * np.exp(-kflat * big_l)[:, None, None]
    rho = (rho / kflat[:, None, None]).reshape(RAYS, len(s), 2, 2)
    return kr, wr, rho, m0, big_l


def laplace_values(kr, wr, rho_pq, w: np.ndarray) -> np.ndarray:
    """F(w) (G,) for complex w with Re w >= 0, Im w >= 0, each on the ray psi = arg(w)/2."""
    n_rays = kr.shape[0]
    a = np.rint(0.5 * np.angle(w) / (0.25 * math.pi) * (n_rays - 1)).astype(int)
    a = np.clip(a, 0, n_rays - 1)
    return np.einsum("gq,gq->g", wr[a] * rho_pq[a], np.exp(-kr[a] * w[:, None]))


def _cheb(m: int) -> tuple[np.ndarray, np.ndarray]:
    k = np.arange(m)
    th = (2 * k + 1) * math.pi / (2 * m)
    return np.cos(th)[::-1].copy(), ((-1.0) ** k * np.sin(th))[::-1].copy()


@numba.njit(cache=True)
def _bary(x, nodes, lam, out):  # pragma: no cover - compiled
    m = nodes.shape[0]
    tot = 0.0
    for k in range(m):
        d = x - nodes[k]
        if d == 0.0:
            for q in range(m):
                out[q] = 0.0
            out[k] = 1.0
            return
        out[k] = lam[k] / d
        tot += out[k]
    for k in range(m):
        out[k] /= tot


@numba.njit(cache=True)
def _table_sums(at, as_, dx, table, ell, nodes, lam, out):  # pragma: no cover - compiled
    m = nodes.shape[0]
    nv = table.shape[0] // m
    nu = table.shape[1] // m
    bv = np.empty(m)
    bu = np.empty(m)
    for t in range(at.shape[0]):
        for s in range(as_.shape[0]):
            v = math.asinh((at[t] + as_[s]) / ell)
            u = math.asinh(abs(dx[t, s]) / ell)
            iv = min(int(v), nv - 1)
            iu = min(int(u), nu - 1)
            _bary(2.0 * (v - iv) - 1.0, nodes, lam, bv)
            _bary(2.0 * (u - iu) - 1.0, nodes, lam, bu)
            acc = 0.0
            for a in range(m):
                row = iv * m + a
                inner = 0.0
                for b in range(m):
                    inner += table[row, iu * m + b] * bu[b]
                acc += inner * bv[a]
            out[t, s] += acc


def open_remainder(slabs: Slabs, i: int, j: int, xt, zt, xs, zs, extent_m: float) -> np.ndarray:
    """Remainder of the open (non-periodic) kernel for targets in slab i, sources in slab j.

    Re F_pq(alpha + i |dx|) is tabulated on panels of one unit in asinh(alpha / d_min) and
    asinh(|dx| / d_min) (``TABLE_NODES`` Chebyshev nodes each; F is analytic within about
    d_min of every real point, so each panel is well inside its domain of analyticity) and
    interpolated; tests compare with the direct ray sums.
    """
    kr, wr, rho, m0, big_l = _ray_setup(slabs, i, j, extent_m)
    ht = slabs.heights(zt, np.full(len(zt), i))
    hs = slabs.heights(zs, np.full(len(zs), j))
    xt, xs = np.asarray(xt, dtype=float), np.asarray(xs, dtype=float)
    dx = xt[:, None] - xs[None, :]
    ell = slabs.min_thickness_m
    nodes, lam = _cheb(TABLE_NODES)
    out = np.zeros((len(xt), len(xs)))
    for p in range(2):
        if not np.isfinite(ht[:, p]).all():
            continue
        for q in range(2):
            if not np.isfinite(hs[:, q]).all():
                continue
            if np.any(rho[:, :, p, q]):
                nv = max(1, math.ceil(math.asinh((ht[:, p].max() + hs[:, q].max()) / ell)))
                nu = max(1, math.ceil(math.asinh(np.abs(dx).max() / ell)))
                v = (np.arange(nv)[:, None] + 0.5 * (nodes[None, :] + 1.0)).ravel()
                u = (np.arange(nu)[:, None] + 0.5 * (nodes[None, :] + 1.0)).ravel()
                w = (ell * np.sinh(v))[:, None] + 1j * (ell * np.sinh(u))[None, :]
                table = laplace_values(kr, wr, rho[:, :, p, q], w.ravel()).real
                _table_sums(
                    np.ascontiguousarray(ht[:, p]),
                    np.ascontiguousarray(hs[:, q]),
                    dx,
                    table.reshape(nv * TABLE_NODES, nu * TABLE_NODES),
                    ell,
                    nodes,
                    lam,
                    out,
                )
            if m0[p, q] != 0.0:
                al = ht[:, p][:, None] + hs[:, q][None, :] + big_l
                out -= (m0[p, q] / math.pi) * 0.5 * np.log(dx * dx + al * al)
    return out


def open_remainder_direct(slabs: Slabs, i: int, j: int, xt, zt, xs, zs, extent_m: float):
    """The same remainder by direct ray sums for every pair (slow; the tests' reference)."""
    kr, wr, rho, m0, big_l = _ray_setup(slabs, i, j, extent_m)
    ht = slabs.heights(zt, np.full(len(zt), i))
    hs = slabs.heights(zs, np.full(len(zs), j))
    out = np.zeros((len(xt), len(xs)))
    _ray_sums(
        np.ascontiguousarray(xt, dtype=float),
        np.ascontiguousarray(ht),
        np.ascontiguousarray(xs, dtype=float),
        np.ascontiguousarray(hs),
        np.ascontiguousarray(kr),
        np.ascontiguousarray(wr),
        np.ascontiguousarray(rho),
        out,
    )
    dx2 = (np.asarray(xt)[:, None] - np.asarray(xs)[None, :]) ** 2
    for p in range(2):
        for q in range(2):
            if m0[p, q] == 0.0 or not (np.isfinite(ht[:, p]).all() and np.isfinite(hs[:, q]).all()):
                continue
            al = ht[:, p][:, None] + hs[:, q][None, :] + big_l
            out -= (m0[p, q] / math.pi) * 0.5 * np.log(dx2 + al * al)
    return out

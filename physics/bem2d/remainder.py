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


def periodic_remainder(
    slabs: Slabs, period: float, i: int, j: int, xt, zt, xs, zs, extracted
) -> np.ndarray:
    """Remainder of the periodic kernel; ``extracted`` lists the (c, s, t0) terms taken out."""
    d_min = slabs.min_thickness_m
    n_max = max(1, math.ceil(-math.log(TAIL) * period / (2 * math.pi * d_min)))
    k = 2 * math.pi * np.arange(1, n_max + 1) / period
    rho = _rho(slabs, k.astype(complex), i, j) / k[:, None, None]
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


def open_remainder(slabs: Slabs, i: int, j: int, xt, zt, xs, zs, extent_m: float) -> np.ndarray:
    """Remainder of the open (non-periodic) kernel for targets in slab i, sources in slab j."""
    d_min = slabs.min_thickness_m
    fin = np.isfinite(slabs.thickness_m)
    big_l = float(slabs.thickness_m[fin].sum())
    d_big = extent_m + big_l
    s, ws = octave_rule(0.05 / d_big, 40.0 / (d_min * math.cos(math.pi / 4)))
    psi = 0.25 * math.pi * np.arange(RAYS) / (RAYS - 1)
    rot = np.exp(-1j * psi)
    kr = rot[:, None] * s[None, :]  # (A, Q)
    wr = (rot[:, None] * ws[None, :]) / math.pi
    kflat = kr.ravel()
    m0 = slabs.m_zero[j, i] - slabs.m_inf[j, i]
    rho = _rho(slabs, kflat, i, j) - m0[None] * np.exp(-kflat * big_l)[:, None, None]
    rho = (rho / kflat[:, None, None]).reshape(RAYS, len(s), 2, 2)
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

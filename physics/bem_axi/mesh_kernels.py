"""Compiled assembly of an axisymmetric mesh's panel and node arrays from its panels.

:func:`split_panels` cuts the level-0 panels into a level's panels.

:func:`assemble_panels` takes panels as flat arrays (P,): ``piece`` (index into the pieces),
parameters ``t0`` < ``t1``; per piece (n,): ``piece_kind`` (``mesh.KIND_SEGMENT`` 0,
``KIND_ARC`` 1, ``KIND_ELLIPSE`` 2), ``piece_spec`` (n, 5) (``mesh._piece_spec``) and
``piece_conductor``; per conductor the normal's orientation ``signs``. It gives every array of
``mesh.AxiMesh`` by the formulas of ``mesh.panel_geometry`` at the Gauss-Legendre nodes ``xg``
(Q,) and the panel centre (tau = 0), in the same order of operations, so the meshes are the
numpy assembly's bit for bit (``tests/test_axi_mesh_kernels.py``): cos and sin are the C
library's, which numpy's matched on 1,000,000 random angles on the project machine; the
panel length is numpy's pairwise sum of the row of weights (:func:`_row_sum`; matched
``w.sum(axis=1)`` for 2-16 columns on random rows). The chord fractions of mapped corner
panels (``mesh.mapped_fraction``) come in as tables from numpy: its power with an array
exponent (SIMD) differs from the C library's ``pow`` in the last bit for about 5 % of bases
at exponent 2 on the project machine.
Compiled on first use (cached on disk; loading both kernels from the cache measured 12 ms CPU
once per process); ``mesh.py`` imports this module when it builds a mesh.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from elopt.physics.kernel_cache import drop_stale_kernel_caches

drop_stale_kernel_caches()

_SEGMENT, _ARC, _MAPPED = 0, 1, 3


@njit(cache=True)
def split_panels(piece, t0, t1, frac):
    """Panels (piece, t0, t1) (P,) each cut at the fractions ``frac`` (S + 1,) of its parameter
    interval, edges t0 + (t1 - t0) * frac: panels (P * S,) in order."""
    s = len(frac) - 1
    n = len(piece)
    piece2 = np.empty(n * s, np.int64)
    a = np.empty(n * s)
    b = np.empty(n * s)
    for i in range(n):
        d = t1[i] - t0[i]
        for j in range(s):
            piece2[i * s + j] = piece[i]
            a[i * s + j] = t0[i] + d * frac[j]
            b[i * s + j] = t0[i] + d * frac[j + 1]
    return piece2, a, b


@njit(cache=True)
def _row_sum(w, i):
    """Sum of row ``i`` of ``w`` (P, Q) as numpy's ``w.sum(axis=1)`` rounds it: one running
    sum below 8 terms, else 8 running sums added pairwise, then the rest (Q <= 128)."""
    q = w.shape[1]
    if q < 8:
        res = 0.0
        for j in range(q):
            res += w[i, j]
        return res
    r = np.empty(8)
    for j in range(8):
        r[j] = w[i, j]
    j = 8
    while j < q - q % 8:
        for k in range(8):
            r[k] += w[i, j + k]
        j += 8
    res = ((r[0] + r[1]) + (r[2] + r[3])) + ((r[4] + r[5]) + (r[6] + r[7]))
    while j < q:
        res += w[i, j]
        j += 1
    return res


@njit(cache=True)
def _piece_ends(piece, n_pieces):
    """Index of the first and of the last panel (n_pieces,) of every piece (-1: none)."""
    first = np.full(n_pieces, -1, np.int64)
    last = np.full(n_pieces, -1, np.int64)
    for i in range(len(piece)):
        if first[piece[i]] < 0:
            first[piece[i]] = i
        last[piece[i]] = i
    return first, last


@njit(cache=True)
def _coefs(piece_kind, piece_spec, piece, t0, t1):
    """Kind (P,) and ``mesh.panel_geometry`` coefficients (P, 5) of the panels."""
    p = len(piece)
    kind = np.empty(p, np.int64)
    coef = np.empty((p, 5))
    for i in range(p):
        k = piece_kind[piece[i]]
        s = piece_spec[piece[i]]
        kind[i] = k
        if k == _SEGMENT:
            a0, a1 = t0[i], t1[i]
            for c in range(2):
                coef[i, c] = 0.5 * (1 - a0) * s[c] + 0.5 * (1 + a0) * s[c + 2]
                coef[i, c + 2] = 0.5 * (1 - a1) * s[c] + 0.5 * (1 + a1) * s[c + 2]
            coef[i, 4] = 0.0
        else:
            coef[i, 0] = s[0]
            coef[i, 1] = s[1]
            coef[i, 2] = s[2]
            coef[i, 3] = s[3] + 0.5 * (t0[i] + 1) * s[4]
            coef[i, 4] = s[3] + 0.5 * (t1[i] + 1) * s[4]
    return kind, coef


@njit(cache=True)
def _point(k, c, s):
    """Point and d(point)/d(tau) (r, z, dr, dz) at s = (tau + 1) / 2 of a segment, arc or
    ellipse-arc panel with coefficients ``c``."""
    if k == _SEGMENT:
        return (
            c[0] + s * (c[2] - c[0]),
            c[1] + s * (c[3] - c[1]),
            0.5 * (c[2] - c[0]),
            0.5 * (c[3] - c[1]),
        )
    ang = c[3] + s * (c[4] - c[3])
    cos, sin = math.cos(ang), math.sin(ang)
    if k == _ARC:
        da = 0.5 * (c[4] - c[3]) * c[2]
        return c[0] + c[2] * cos, c[1] + c[2] * sin, -da * sin, da * cos
    du = 0.5 * (c[4] - c[3])
    return c[1] * cos, c[0] + c[2] * sin, -du * c[1] * sin, du * c[2] * cos


@njit(cache=True)
def _nodes(kind, coef, mapped_of, mapped_frac, mapped_dfrac, xg):
    """Node points (P, Q, 2), d(point)/d(tau) (P, Q, 2) and panel centres (P, 2)."""
    p, q = len(kind), len(xg)
    pts = np.empty((p, q, 2))
    der = np.empty((p, q, 2))
    centre = np.empty((p, 2))
    for i in range(p):
        c = coef[i]
        if kind[i] == _MAPPED:
            m = mapped_of[i]
            for j in range(q):
                f, df = mapped_frac[m, j], mapped_dfrac[m, j]
                pts[i, j, 0] = c[0] + f * (c[2] - c[0])
                pts[i, j, 1] = c[1] + f * (c[3] - c[1])
                der[i, j, 0] = df * (c[2] - c[0])
                der[i, j, 1] = df * (c[3] - c[1])
            centre[i, 0] = 0.5 * (c[0] + c[2])
            centre[i, 1] = 0.5 * (c[1] + c[3])
            continue
        for j in range(q):
            pts[i, j, 0], pts[i, j, 1], der[i, j, 0], der[i, j, 1] = _point(
                kind[i], c, 0.5 * (xg[j] + 1.0)
            )
        centre[i, 0], centre[i, 1], _, _ = _point(kind[i], c, 0.5 * (0.0 + 1.0))
    return pts, der, centre


@njit(cache=True)
def assemble_panels(
    piece_kind,
    piece_spec,
    piece_conductor,
    signs,
    piece,
    t0,
    t1,
    corner_piece,
    corner_at_end,
    mapped_piece,
    mapped_power,
    mapped_frac,
    mapped_dfrac,
    xg,
    wg,
):
    """Every array of ``mesh.AxiMesh`` for the panels (piece, t0, t1) (P,) with ``Q = len(xg)``
    nodes each, in the order of its fields: conductor, kind, coef (P, 5), length_m, center_m
    (P, 2), at_corner; points, tangents, normals (P * Q, 2); jac_m, weights_m, arc_m,
    interp_jac (P * Q,). Singular
    corners: the panel at end ``corner_at_end`` of piece ``corner_piece`` (K,); mapped corner
    sides: the panel of piece ``mapped_piece`` (M,) touching the corner, with signed map power
    ``mapped_power`` (M,) (``mesh.mapped_fraction``; < 0: the corner at the piece's end) and
    chord fraction and its derivative at the nodes ``mapped_frac``, ``mapped_dfrac`` (M, Q)."""
    p, q = len(piece), len(xg)
    kind, coef = _coefs(piece_kind, piece_spec, piece, t0, t1)
    first, last = _piece_ends(piece, len(piece_kind))
    at_corner = np.zeros(p, np.bool_)
    for c in range(len(corner_piece)):
        k = corner_piece[c]
        at_corner[last[k] if corner_at_end[c] else first[k]] = True
    mapped_of = np.full(p, -1, np.int64)
    for m in range(len(mapped_piece)):
        k = mapped_piece[m]
        j = last[k] if mapped_power[m] < 0 else first[k]
        at_corner[j] = True
        kind[j] = _MAPPED
        coef[j, 4] = mapped_power[m]
        mapped_of[j] = m
    pts, der, centre = _nodes(kind, coef, mapped_of, mapped_frac, mapped_dfrac, xg)
    conductor = np.empty(p, np.int64)
    jac = np.empty((p, q))
    tang = np.empty((p, q, 2))
    normals = np.empty((p, q, 2))
    weights = np.empty((p, q))
    interp_jac = np.empty((p, q))
    for i in range(p):
        conductor[i] = piece_conductor[piece[i]]
        sgn = signs[conductor[i]]
        for j in range(q):
            d0, d1 = der[i, j, 0], der[i, j, 1]
            jac[i, j] = math.sqrt(d0 * d0 + d1 * d1)
            tang[i, j, 0] = d0 / jac[i, j]
            tang[i, j, 1] = d1 / jac[i, j]
            normals[i, j, 0] = sgn * tang[i, j, 1]
            normals[i, j, 1] = sgn * -tang[i, j, 0]
            weights[i, j] = jac[i, j] * wg[j]
            interp_jac[i, j] = jac[i, j] if kind[i] == _MAPPED else 1.0
    length = np.empty(p)
    arc = np.empty((p, q))
    end = 0.0
    start_of_conductor = 0.0
    for i in range(p):
        length[i] = _row_sum(weights, i)
        if i > 0 and conductor[i] != conductor[i - 1]:
            start_of_conductor = end
        end = end + length[i] if i > 0 else length[i]
        arc_start = end - length[i] - start_of_conductor
        for j in range(q):
            frac = mapped_frac[mapped_of[i], j] if mapped_of[i] >= 0 else 0.5 * (xg[j] + 1.0)
            arc[i, j] = arc_start + frac * length[i]
    return (
        conductor,
        kind,
        coef,
        length,
        centre,
        at_corner,
        pts.reshape(-1, 2),
        tang.reshape(-1, 2),
        normals.reshape(-1, 2),
        jac.reshape(-1),
        weights.reshape(-1),
        arc.reshape(-1),
        interp_jac.reshape(-1),
    )

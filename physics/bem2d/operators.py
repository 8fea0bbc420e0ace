"""Single-layer matrices of the logarithmic kernel on 2-D panels, near-singular parts exact.

For targets X (complex x + i z) and the panels of :mod:`elopt.physics.bem2d.mesh`,

    A[t, k] = integral over the panel of node k of  -(1/2 pi) ln|X_t - y| L_k(y) ds,

L_k the Lagrange polynomial of node k on its panel. Far from a panel the panel's Gauss rule is
used; within ``NEAR`` half-lengths the logarithm is split exactly: with t* the complex preimage
of X on the panel's parametrisation y(t) (closed form for lines and circular arcs),
ln|X - y(t)| = ln|t - t*| + s(t), s analytic; ln|t - t*| is integrated against polynomials by
an exact recurrence and s by the Gauss rule. The same routine serves collocation (X on the
panels), images (X reflected) and evaluation off the surface. In periodic mode the kernel is
:func:`elopt.physics.bem2d.periodic.periodic_log` and the split uses the nearest copy of X.
"""

from __future__ import annotations

import cmath
import math
from functools import lru_cache

import numba
import numpy as np

from elopt.physics.bem2d.mesh import Panels
from elopt.physics.bem2d.periodic import periodic_log_matrix, smooth_value, wrap
from elopt.physics.kernel_cache import drop_stale_kernel_caches
from elopt.physics.quadrature import gauss_legendre

drop_stale_kernel_caches()

#: Targets closer than this many half-lengths to a panel's centre get the exact split.
NEAR = 3.5
_INV_2PI = 1.0 / (2.0 * np.pi)


@lru_cache(maxsize=8)
def _lagrange_from_monomials(order: int) -> np.ndarray:
    """(order, order) matrix taking monomial moments to Gauss-node weights."""
    x, _ = np.polynomial.legendre.leggauss(order)
    return np.linalg.inv(np.vander(x, order, increasing=True))


@numba.njit(cache=True)
def _log_moments(z, out):  # pragma: no cover - compiled
    """out[n] = int_{-1}^{1} t^n ln|t - z| dt (n < len(out)) for complex z (exact recurrence
    on J_m = int t^(m-1) dt / (t - z), whose real part is exact on [-1, 1])."""
    lp = math.log(abs(1.0 - z)) if z != 1.0 else 0.0
    lm = math.log(abs(1.0 + z)) if z != -1.0 else 0.0
    j = cmath.log(complex(1.0, 0.0) - z) - cmath.log(complex(-1.0, 0.0) - z)
    if not (math.isfinite(j.real) and math.isfinite(j.imag)):
        j = 0j
    sign = 1.0
    for n in range(out.shape[0]):
        m = n + 1
        sign = -sign  # (-1)^m
        j = z * j + (1.0 - sign) / m  # J_m from J_{m-1}
        out[n] = (lp - sign * lm - j.real) / m


@numba.njit(cache=True)
def _near_block(xq, ts, nodes, half, gx, gw, lag, period, out):  # pragma: no cover
    """out[q, k]: the exact split of ``single_layer`` for target xq[q] (preimage ts[q]) and
    node k of its panel (nodes (Q, p), half (Q,)), with the periodic smooth part when
    period > 0."""
    p = gx.shape[0]
    mom = np.empty(p)
    for q in range(xq.shape[0]):
        z = ts[q]
        _log_moments(z, mom)
        h = half[q]
        for k in range(p):
            lw = 0.0
            for n in range(p):
                lw += mom[n] * lag[n, k]
            dn = xq[q] - nodes[q, k]
            gap = abs(gx[k] - z)
            if gap < 1e-12 or dn == 0.0:
                sm = math.log(h)
            else:
                sm = math.log(abs(dn)) - math.log(gap)
            v = -_INV_2PI * h * (lw + gw[k] * sm)
            if period > 0.0:
                v += smooth_value(dn.real, dn.imag, period) * (h * gw[k])
            out[q, k] = v


def preimage(panels: Panels, idx: np.ndarray, x: np.ndarray) -> np.ndarray:
    """Complex t* with y(t*) = X for panel ``idx[q]`` and target ``x[q]``."""
    arc = panels.is_arc[idx]
    out = np.empty(len(idx), dtype=complex)
    line = ~arc
    i = idx[line]
    out[line] = (x[line] - panels.center[i]) / (panels.half[i] * panels.direction[i])
    i = idx[arc]
    zeta = (x[arc] - panels.center[i]) / (panels.radius[i] * np.exp(1j * panels.theta_mid[i]))
    out[arc] = -1j * np.log(zeta) / panels.half_angle[i]
    return out


def single_layer(panels: Panels, targets: np.ndarray, period: float | None = None) -> np.ndarray:
    """A (T, N): potential at ``targets`` (T,) complex of unit nodal densities (times eps)."""
    x = np.asarray(targets, dtype=complex)
    y = panels.points
    w = panels.node_weights
    p = panels.order
    if period is None:
        with np.errstate(divide="ignore"):
            a = -_INV_2PI * np.log(np.abs(x[:, None] - y[None, :])) * w[None, :]
    else:
        a = periodic_log_matrix(x, y, w, period)
    # Near pairs: exact split of the logarithm.
    c = panels.center.copy()
    if panels.is_arc.any():
        c[panels.is_arc] = panels.nodes[panels.is_arc].mean(axis=1)  # an arc's middle, roughly
    dx = x.real[:, None] - c.real[None, :]
    if period is not None:
        dx = wrap(dx, period)
    dz = x.imag[:, None] - c.imag[None, :]
    reach = NEAR * panels.half
    tq, pq = np.nonzero(dx * dx + dz * dz < (reach * reach)[None, :])
    if tq.size == 0:
        return a
    xq = x[tq]
    if period is not None:
        xq = xq - period * np.round((xq - c[pq]).real / period)
    ts = preimage(panels, pq, xq)
    gx, gw = gauss_legendre(p)
    block = np.empty((len(pq), p))
    _near_block(
        xq,
        ts,
        np.ascontiguousarray(panels.nodes[pq]),
        panels.half[pq],
        gx,
        gw,
        _lagrange_from_monomials(p),
        0.0 if period is None else float(period),
        block,
    )
    cols = pq[:, None] * p + np.arange(p)[None, :]
    a[tq[:, None], cols] = block
    return a

"""The logarithmic kernel summed over a row of period ``lam`` along x, in closed form.

    P(dx, dz) = -(1/4 pi) ln[2 (cosh(2 pi dz / lam) - cos(2 pi dx / lam))]
              = -(1/2 pi) ln r + S(dx, dz),   r = |(dx, dz)| with dx wrapped to [-lam/2, lam/2],

is the potential (times eps) of a row of unit line charges (each 1 C/m) at x' + m lam. Its
Fourier series is -|dz| / (2 lam) + (1/2 pi) sum_n exp(-k_n |dz|) cos(k_n dx) / n,
k_n = 2 pi n / lam. S is smooth (analytic) near r = 0 with S(0) = -(1/2 pi) ln(2 pi / lam).
"""

from __future__ import annotations

import math

import numba
import numpy as np

_INV_4PI = 1.0 / (4.0 * np.pi)


def wrap(dx: np.ndarray, period: float) -> np.ndarray:
    """dx shifted by whole periods into [-period/2, period/2]."""
    return dx - period * np.round(dx / period)


def periodic_log(dx: np.ndarray, dz: np.ndarray, period: float) -> np.ndarray:
    """P(dx, dz) (broadcast shape); +inf where both vanish. Stable for large |dz|."""
    a = 2.0 * np.pi * np.abs(dz) / period
    b = 2.0 * np.pi * dx / period
    ea = np.exp(-a)
    with np.errstate(divide="ignore"):
        # ln[2 (cosh a - cos b)] = a + ln(1 - 2 e^-a cos b + e^-2a); the small-a form keeps
        # precision as (a, b) -> 0.
        big = a + np.log1p(-2.0 * ea * np.cos(b) + ea * ea)
        small = np.log(4.0 * (np.sinh(0.5 * np.minimum(a, 0.5)) ** 2 + np.sin(0.5 * b) ** 2))
    return -_INV_4PI * np.where(a > 0.5, big, small)


def periodic_log_smooth(dx: np.ndarray, dz: np.ndarray, period: float) -> np.ndarray:
    """S = P + ln(r)/(2 pi) with dx wrapped; the limit at r = 0."""
    dxw = wrap(dx, period)
    r2 = dxw * dxw + dz * dz
    zero = r2 == 0.0
    with np.errstate(divide="ignore", invalid="ignore"):
        s = periodic_log(dxw, dz, period) + _INV_4PI * np.log(np.where(zero, 1.0, r2))
    return np.where(zero, -2.0 * _INV_4PI * np.log(2.0 * np.pi / period), s)


@numba.njit(cache=True)
def _periodic_log_matrix(x, y, w, period, out):  # pragma: no cover - compiled
    c = 2.0 * math.pi / period
    for t in range(x.shape[0]):
        for k in range(y.shape[0]):
            dx = x[t].real - y[k].real
            dx -= period * math.floor(dx / period + 0.5)
            a = c * abs(x[t].imag - y[k].imag)
            b = c * dx
            if a > 0.5:
                ea = math.exp(-a)
                v = a + math.log1p(-2.0 * ea * math.cos(b) + ea * ea)
            else:
                sa, sb = math.sinh(0.5 * a), math.sin(0.5 * b)
                q = 4.0 * (sa * sa + sb * sb)
                v = math.log(q) if q > 0.0 else -math.inf
            out[t, k] = -v * w[k] / (4.0 * math.pi)


def periodic_log_matrix(x: np.ndarray, y: np.ndarray, w: np.ndarray, period: float) -> np.ndarray:
    """P(x_t - y_k) w_k (T, K) for complex targets x and sources y (compiled loop)."""
    out = np.empty((len(x), len(y)))
    _periodic_log_matrix(
        np.ascontiguousarray(x, dtype=complex),
        np.ascontiguousarray(y, dtype=complex),
        np.ascontiguousarray(w, dtype=float),
        float(period),
        out,
    )
    return out

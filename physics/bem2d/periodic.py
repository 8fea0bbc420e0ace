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

from elopt.physics.kernel_cache import drop_stale_kernel_caches

drop_stale_kernel_caches()

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


@numba.njit(cache=True)
def _height_factor(a):  # pragma: no cover - compiled
    """exp(-a) for a > 0.5, else sinh(a / 2): the factor of ``_log_sum`` that needs a only."""
    return math.exp(-a) if a > 0.5 else math.sinh(0.5 * a)


@numba.njit(cache=True)
def _log_sum(a, h, sb):  # pragma: no cover - compiled
    """ln[2 (cosh a - cos b)] for a >= 0 from h = ``_height_factor(a)`` and sin(b/2);
    -inf at a = b = 0."""
    if a > 0.5:
        # = a + ln((1 - e^-a)^2 + 4 e^-a sin^2(b/2)): no cancellation for any b.
        return a + math.log((1.0 - h) ** 2 + 4.0 * h * sb * sb)
    # = ln(4 (sinh^2(a/2) + sin^2(b/2))): precise as (a, b) -> 0.
    q = 4.0 * (h * h + sb * sb)
    return math.log(q) if q > 0.0 else -math.inf


@numba.njit(cache=True)
def smooth_value(dx, dz, period):  # pragma: no cover - compiled
    """S = P + ln(r)/(2 pi) of one pair (dx wrapped into the period), smooth near r = 0;
    its limit -(1/2 pi) ln(2 pi / lam) at r = 0."""
    c = 2.0 * math.pi / period
    d = dx - period * math.floor(dx / period + 0.5)
    r2 = d * d + dz * dz
    if r2 == 0.0:
        return -2.0 * _INV_4PI * math.log(c)
    a = c * abs(dz)
    return _INV_4PI * (math.log(r2) - _log_sum(a, _height_factor(a), math.sin(0.5 * c * d)))


@numba.njit(cache=True)
def _periodic_log_matrix(x, y, w, period, symmetric, out):  # pragma: no cover - compiled
    c = 2.0 * math.pi / period
    # sin(b/2) of b = c (x_t - y_k) from half-angle factors of each point: one product
    # instead of a sine per pair (the sine itself where it is small, |sin(b/2)| < 1e-2, so
    # that its relative error stays below 1e-14); no wrapping needed for the product (P is
    # periodic in b through sin^2(b/2)).
    ct, st = np.cos(0.5 * c * x.real), np.sin(0.5 * c * x.real)
    cs, ss = np.cos(0.5 * c * y.real), np.sin(0.5 * c * y.real)
    a_last, h = -1.0, 0.0
    for t in range(x.shape[0]):
        for k in range(t if symmetric else 0, y.shape[0]):
            sb = st[t] * cs[k] - ct[t] * ss[k]
            if abs(sb) < 1e-2:  # close in x (mod period): the difference loses digits
                d = x[t].real - y[k].real
                sb = math.sin(0.5 * c * (d - period * math.floor(d / period + 0.5)))
            a = c * abs(x[t].imag - y[k].imag)
            if a != a_last:  # points on one horizontal line share the height factor
                a_last, h = a, _height_factor(a)
            v = _log_sum(a, h, sb)
            out[t, k] = -v * w[k] / (4.0 * math.pi)
            if symmetric:
                out[k, t] = -v * w[t] / (4.0 * math.pi)


def _mirror_pairs(x: np.ndarray, y: np.ndarray) -> bool:
    """True when P(x_t - y_k) is symmetric in (t, k): the same abscissae, and the same heights
    or heights whose sum is one constant (the points themselves or a copy reflected in a
    horizontal line)."""
    if x.size == 0 or x.shape != y.shape or not np.array_equal(x.real, y.real):
        return False
    tol = 1e-15 * max(float(np.abs(x.imag).max()), float(np.abs(y.imag).max()))
    return bool(np.abs(x.imag - y.imag).max() <= tol or np.ptp(x.imag + y.imag) <= tol)


def periodic_log_matrix(x: np.ndarray, y: np.ndarray, w: np.ndarray, period: float) -> np.ndarray:
    """P(x_t - y_k) w_k (T, K) for complex targets x and sources y (compiled loop; only one
    triangle is evaluated when the pairs mirror, see ``_mirror_pairs``)."""
    x = np.ascontiguousarray(x, dtype=complex)
    y = np.ascontiguousarray(y, dtype=complex)
    out = np.empty((len(x), len(y)))
    _periodic_log_matrix(
        x, y, np.ascontiguousarray(w, dtype=float), float(period), _mirror_pairs(x, y), out
    )
    return out

"""Reference quadrature on [-1, 1]: Gauss-Legendre nodes, logarithmic product weights,
and Lagrange interpolation.

The boundary-element panels all map to the reference interval, so everything here is computed
once per panel order ``p`` and cached.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np


@lru_cache(maxsize=16)
def gauss_legendre(p: int) -> tuple[np.ndarray, np.ndarray]:
    """Nodes (p,) and weights (p,) of the p-point Gauss-Legendre rule on [-1, 1]."""
    x, w = np.polynomial.legendre.leggauss(p)
    x.setflags(write=False)
    w.setflags(write=False)
    return x, w


def _log_moments(x: float, n: int) -> np.ndarray:
    """m_j = integral over u in [-1-x, 1-x] of u**j ln|u| du, j = 0..n-1 (exact)."""

    def f(c: float, j: int) -> float:
        return 0.0 if c == 0 else c ** (j + 1) * (np.log(c) / (j + 1) - 1.0 / (j + 1) ** 2)

    a, b = -1.0 - x, 1.0 - x
    out = np.empty(n)
    for j in range(n):
        if a < 0 < b:
            out[j] = f(b, j) + (-1) ** j * f(-a, j)
        elif a >= 0:
            out[j] = f(b, j) - f(a, j)
        else:
            out[j] = (-1) ** j * (f(-a, j) - f(-b, j))
    return out


def log_product_weights(targets: np.ndarray, p: int) -> np.ndarray:
    """Weights W (len(targets), p) with sum_k W[i,k] f(x_k) = integral f(t) ln|t - y_i| dt.

    Exact for polynomials f of degree < p sampled at the Gauss-Legendre nodes x_k; the targets
    y_i may lie inside or outside [-1, 1].
    """
    x, _ = gauss_legendre(p)
    out = np.empty((len(targets), p))
    for i, y in enumerate(np.asarray(targets, dtype=float)):
        u = x - y
        vander = np.vander(u / 2.0, p, increasing=True)
        moments = _log_moments(float(y), p) / 2.0 ** np.arange(p)
        out[i] = np.linalg.solve(vander.T, moments)
    return out


@lru_cache(maxsize=16)
def end_log_weights(p: int) -> np.ndarray:
    """:func:`log_product_weights` (p,) of the target -1 (a panel's end), computed once."""
    out = log_product_weights(np.array([-1.0]), p)[0]
    out.setflags(write=False)
    return out


def lagrange_matrix(t: np.ndarray, p: int) -> np.ndarray:
    """Values of the p Lagrange basis polynomials on the Gauss nodes at points ``t``.

    Shape (..., p) for ``t`` of shape (...). Barycentric form; exact at the nodes.
    """
    x, _ = gauss_legendre(p)
    t = np.asarray(t, dtype=float)
    diff = t[..., None] - x
    hit = diff == 0.0
    if hit.any():
        diff = np.where(hit, 1.0, diff)
    terms = barycentric_weights(p) / diff
    out = terms / terms.sum(axis=-1, keepdims=True)
    if hit.any():
        rows = hit.any(axis=-1)
        out[rows] = hit[rows]
    return out


@lru_cache(maxsize=16)
def barycentric_weights(p: int) -> np.ndarray:
    """Barycentric weights (p,) of the Gauss-Legendre nodes (for Lagrange interpolation)."""
    x, _ = gauss_legendre(p)
    d = x[:, None] - x[None, :]
    np.fill_diagonal(d, 1.0)
    return 1.0 / d.prod(axis=1)

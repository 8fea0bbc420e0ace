"""Radial quadrature on the target plane and the spot radius of a sensitivity density.

The target is the plane z = 0; an axisymmetric density f(r) (per unit area) integrates as
``integral f(r) 2 pi r dr``. The grid is fine (step ``fine_step_m``) out to ``fine_extent_m``,
where the density varies on the scale of the standoff, and grows geometrically beyond it,
where the density of a guarded probe decays like a power of r.
"""

from __future__ import annotations

import math

import numpy as np


def _grid_counts(
    fine_step_m: float, fine_extent_m: float, outer_extent_m: float, growth: float
) -> tuple[int, int]:
    """Intervals of the uniform part and points of the geometric part of :func:`radial_grid`."""
    n_fine = max(math.ceil(fine_extent_m / fine_step_m), 2)
    if outer_extent_m <= fine_extent_m:
        return n_fine, 0
    return n_fine, math.ceil(math.log(outer_extent_m / fine_extent_m) / math.log(growth))


def radial_grid_size(
    fine_step_m: float, fine_extent_m: float, outer_extent_m: float, growth: float = 1.08
) -> float:
    """Number of radii :func:`radial_grid` returns for these arguments (nothing allocated);
    inf when the steps under- or overflow."""
    if not (fine_step_m > 0 and fine_extent_m / fine_step_m < 1e15):
        return math.inf
    n_fine, n_outer = _grid_counts(fine_step_m, fine_extent_m, outer_extent_m, growth)
    return n_fine + 1 + n_outer


def radial_grid(
    fine_step_m: float, fine_extent_m: float, outer_extent_m: float, growth: float = 1.08
) -> np.ndarray:
    """Radii (M,) in metres from 0: uniform up to ``fine_extent_m``, then geometric."""
    n_fine, n_outer = _grid_counts(fine_step_m, fine_extent_m, outer_extent_m, growth)
    fine = np.linspace(0.0, fine_extent_m, n_fine + 1)
    if n_outer == 0:
        return fine
    outer = fine_extent_m * growth ** np.arange(1, n_outer + 1)
    return np.concatenate([fine, outer])


def cumulative_on_plane(r_m: np.ndarray, density: np.ndarray) -> np.ndarray:
    """Running integral of ``density`` (M,) over the disk of radius r -> (M,).

    Simpson's rule on the (non-uniform) grid: on the default grid it is about a thousand
    times closer to the solver's own plane quadrature than the trapezoid rule.
    """
    # Imported here: scipy.integrate (with scipy.optimize) adds about 12 MB to every process
    # that imports the electrode families, most of which never call this.
    from scipy.integrate import cumulative_simpson

    return cumulative_simpson(density * 2.0 * np.pi * r_m, x=r_m, initial=0.0)


def spot_radius(r_m: np.ndarray, density: np.ndarray, fraction: float = 0.9) -> float:
    """Radius (m) of the centred disk holding ``fraction`` of the integral of ``density``.

    Linear interpolation of the running integral between grid radii; NaN when the integral
    is not positive.
    """
    # Simpson's rule may wobble by rounding where the density is nearly zero; keep it monotone.
    cum = np.maximum.accumulate(cumulative_on_plane(r_m, density))
    total = cum[-1]
    if not total > 0:
        return float("nan")
    target = fraction * total
    k = int(np.searchsorted(cum, target))
    k = min(max(k, 1), len(r_m) - 1)
    c0, c1 = cum[k - 1], cum[k]
    w = 0.0 if c1 == c0 else (target - c0) / (c1 - c0)
    return float(r_m[k - 1] + w * (r_m[k] - r_m[k - 1]))

"""Linearity of a displacement probe: how far 1/C(d) strays from a straight line.

An ideal parallel-plate probe has C = eps A / d, so 1/C is exactly proportional to the
standoff d; a probe read out through 1/C (constant-current excitation, common practice, no
source) is then linear. Fringing bends 1/C(d). The error is the largest deviation of 1/C from
its least-squares straight line over the range, in per cent of the line's full-scale span.
"""

from __future__ import annotations

import numpy as np


def standoff_range(nominal_m: float, range_fraction: float, points: int) -> np.ndarray:
    """``points`` standoffs (m) spread evenly over nominal * (1 -+ range_fraction); (points,)."""
    return nominal_m * (1.0 + range_fraction * np.linspace(-1.0, 1.0, points))


def linearity_error_pct_fs(standoff_m: np.ndarray, capacitance_F: np.ndarray) -> float:
    """Largest |1/C - best line| over the standoffs (N,), as % of the line's span; N >= 3."""
    d = np.asarray(standoff_m, dtype=float)
    inverse = 1.0 / np.asarray(capacitance_F, dtype=float)
    slope, intercept = np.polyfit(d, inverse, 1)
    residual = inverse - (slope * d + intercept)
    full_scale = abs(slope) * (d.max() - d.min())
    return float(100.0 * np.max(np.abs(residual)) / full_scale)

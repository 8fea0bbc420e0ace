"""The mapped panels' near test decides "Bernstein parameter >= bound" from the focal sum
|t - 1| + |t + 1| (docs/references.md entry 23: Trefethen, Approximation Theory and
Approximation Practice, ch. 8, from memory); it must decide exactly as ``bernstein_rho``,
also for points on and next to the ellipse, where it falls back to that function."""

from __future__ import annotations

import cmath
import math

import numpy as np

from elopt.physics.bem_axi.near_sums import FOCAL_MARGIN, _rho_at_least, bernstein_rho


def _decide(t: complex, bound: float) -> bool:
    return bool(_rho_at_least(t, abs(t - 1.0) + abs(t + 1.0), bound))


def test_points_of_known_ellipse_parameter():
    # t = (w + 1/w)/2 with |w| = rho lies on E_rho (entry 23): bernstein_rho gives rho back.
    for rho in (1.2, 1.6, 2.5, 5.82842712474619):
        for th in np.linspace(0.0, 2 * math.pi, 37):
            w = rho * cmath.exp(1j * th)
            t = 0.5 * (w + 1.0 / w)
            assert math.isclose(bernstein_rho(t), rho, rel_tol=1e-12)
            assert math.isclose(abs(t - 1.0) + abs(t + 1.0), rho + 1.0 / rho, rel_tol=1e-12)


def test_decision_equals_bernstein_rho_everywhere():
    rng = np.random.default_rng(7)
    bounds = (1.05, 1.5480, 2.4142, 5.82842712474619, 40.0)
    n_close = 0
    for bound in bounds:
        ts = []
        # On the ellipse and a few relative margins either side of it, at every angle.
        for scale in (1.0, 1 - 1e-15, 1 + 1e-15, 1 - 1e-10, 1 + 1e-10, 1 - 1e-6, 1 + 1e-6):
            for th in rng.uniform(0.0, 2 * math.pi, 200):
                w = bound * scale * cmath.exp(1j * th)
                ts.append(0.5 * (w + 1.0 / w))
        # Anywhere, including the segment [-1, 1], the foci and far away.
        ts += list(rng.normal(0.0, 3.0, 2000) + 1j * rng.normal(0.0, 3.0, 2000))
        ts += [1.0 + 0j, -1.0 + 0j, 0.3 + 0j, 1e6 + 1e6j, -2.0 + 1e-300j]
        for t in ts:
            exact = bernstein_rho(t) >= bound
            assert _decide(t, bound) == exact, (t, bound)
            focal = abs(t - 1.0) + abs(t + 1.0)
            n_close += abs(focal / (bound + 1.0 / bound) - 1.0) <= FOCAL_MARGIN
    assert n_close > 0  # the fallback branch was taken too

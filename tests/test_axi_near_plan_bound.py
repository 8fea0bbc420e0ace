"""The mapped panels' near test decides "Bernstein parameter >= bound" from the focal sum
|t - 1| + |t + 1| (docs/references.md entry 23: Trefethen, Approximation Theory and
Approximation Practice, ch. 8, from memory); it must decide exactly as ``bernstein_rho``,
also for points on and next to the ellipse, where it falls back to that function."""

from __future__ import annotations

import cmath
import math

import numpy as np

from elopt.physics.bem_axi.near_sums import (
    FOCAL_MARGIN,
    _chord_coordinate,
    _rho_at_least,
    _surely_outside,
    bernstein_rho,
    mapped_preimage,
)


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


def test_sure_drop_of_mapped_pairs_only_where_the_exact_test_drops_them():
    # A mapped panel from the corner (0, 0) to (1, 0): a point's chord coordinate is (r, |z|).
    # Points on the preimage ellipse's image (u = ((w + 1/w)/2 + 1)/2 on E_rho, entry 23,
    # w^m the point) a little inside and outside it, and anywhere around the corner.
    rng = np.random.default_rng(11)
    n_sure = n_outside = 0
    for m in (2.0, 3.0):
        c = (0.0, 0.0, 1.0, 0.0, m)
        for bound in (1.2, 1.7782794100389228, 2.371373705661655, 5.0):
            pts = []
            for scale in (1 - 1e-6, 1.0, 1 + 1e-7, 1 + 1e-6, 1 + 3e-6, 1.01, 1.3, 2.0):
                for th in rng.uniform(0.0, 2 * math.pi, 100):
                    w = bound * scale * cmath.exp(1j * th)
                    u = (0.5 * (w + 1.0 / w) + 1.0) / 2.0
                    pts.append(u**m)
            pts += list(rng.uniform(-4.0, 4.0, 2000) + 1j * rng.uniform(-4.0, 4.0, 2000))
            pts += [0j, 1e-310 + 0j, -1.0 + 0j, -1.0 + 1e-17j, 1.0 + 0j]
            for p in pts:
                w_re, w_im = _chord_coordinate(p.real, p.imag, c)
                t = mapped_preimage(p.real, p.imag, c)
                exact = _rho_at_least(t, abs(t - 1.0) + abs(t + 1.0), bound)
                sure = _surely_outside(w_re, w_im, m, bound + 1.0 / bound)
                assert exact or not sure, (p, m, bound)
                n_sure += sure
                n_outside += bernstein_rho(t) > 1.01 * bound
    assert n_sure > 0.9 * n_outside  # and it drops nearly all pairs clearly outside

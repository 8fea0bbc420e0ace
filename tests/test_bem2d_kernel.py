"""The layered 2-D kernel against direct quadrature (scipy) and the solver's convergence."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import quad
from scipy.special import ellipk

from elopt.physics.bem2d import Strip
from elopt.physics.bem2d.layered_green import Slabs
from elopt.physics.bem2d.periodic import periodic_log
from elopt.physics.bem2d.remainder import open_remainder, open_remainder_direct, periodic_remainder
from elopt.physics.bem2d.solve import prepare, solve_level
from elopt.physics.layout import EPS0_F_PER_M, Layout, driven
from elopt.physics.media import LayerStack, PlanarLayer

# A stack with a high-contrast thick layer, a thin one and a film, over a ground plane.
STACK = LayerStack(
    (
        PlanarLayer("water", 80.0, 0.0, 1.0),
        PlanarLayer("thin", 3.0, 1.0, 1.1),
        PlanarLayer("film", 10.0, 1.1, 1.5),
    ),
    medium_eps_r=1.0,
    ground_plane=True,
)


def spectral(slabs: Slabs, k: float, zt: float, zs: float) -> float:
    """g(k; z, z') from the slab system directly (direct wave plus the four M terms)."""
    i, j = slabs.index(np.array([zt]))[0], slabs.index(np.array([zs]))[0]
    km = slabs.k_times_m(slabs.decay_factors(np.array([k])), j)[0, i]
    ht = slabs.heights(np.array([zt]), np.array([i]))[0]
    hs = slabs.heights(np.array([zs]), np.array([j]))[0]
    g = math.exp(-k * abs(zt - zs)) / (2 * slabs.eps_F_per_m[j]) if i == j else 0.0
    for p in range(2):
        for q in range(2):
            if math.isfinite(ht[p]) and math.isfinite(hs[q]):
                g += km[p, q] * math.exp(-k * (ht[p] + hs[q]))
    return g / k


def kernel(slabs: Slabs, xt: float, zt: float, zs: float, period: float | None) -> float:
    """Our kernel G(x, z; 0, z'): extracted log terms plus the remainder."""
    i, j = slabs.index(np.array([zt]))[0], slabs.index(np.array([zs]))[0]
    terms = slabs.image_terms(i, j)
    v = 0.0
    for c, s, t0 in terms:
        dz = t0 + s * zt - zs
        if period is None:
            v += -c / (2 * math.pi) * math.log(math.hypot(xt, dz))
        else:
            v += c * float(periodic_log(np.array(xt), np.array(dz), period))
    a = (np.array([xt]), np.array([zt]), np.array([0.0]), np.array([zs]))
    if period is None:
        v += open_remainder_direct(slabs, i, j, *a, 6.0)[0, 0]
    else:
        v += periodic_remainder(slabs, period, i, j, *a, terms)[0, 0]
    return v


@pytest.mark.parametrize(("zt", "zs"), [(1.3, 1.0), (2.0, 0.5), (1.12, 1.0), (0.4, 1.45)])
def test_open_kernel_matches_quadrature(zt, zs):
    # Reference: G(x1) - G(x2) = (1/pi) int g(k) (cos k x1 - cos k x2) dk by scipy's quad
    # (convergent at both ends for z != z'); our kernel splits it into images + remainder.
    slabs = Slabs.from_stack(STACK)
    for x1, x2 in ((0.0, 0.7), (0.2, 3.0)):

        def f(k, x1=x1, x2=x2):
            return spectral(slabs, k, zt, zs) * (math.cos(k * x1) - math.cos(k * x2)) / math.pi

        ref = quad(f, 0, 200, limit=2000, epsabs=0, epsrel=1e-12)[0]
        ref += quad(f, 200, math.inf, limit=2000)[0]
        ours = kernel(slabs, x1, zt, zs, None) - kernel(slabs, x2, zt, zs, None)
        assert ours == pytest.approx(ref, rel=1e-9)


def test_periodic_kernel_matches_series():
    # Reference: the Fourier series (2/lam) sum g(k_n) (cos k_n x1 - cos k_n x2), summed
    # directly to n = 4000 (converges geometrically for z != z').
    slabs = Slabs.from_stack(STACK)
    lam, zt, zs, x1, x2 = 2.0, 1.3, 1.0, 0.1, 0.9
    kn = 2 * math.pi * np.arange(1, 4000) / lam
    ref = (2 / lam) * sum(
        spectral(slabs, k, zt, zs) * (math.cos(k * x1) - math.cos(k * x2)) for k in kn
    )
    ours = kernel(slabs, x1, zt, zs, lam) - kernel(slabs, x2, zt, zs, lam)
    assert ours == pytest.approx(ref, rel=1e-12)


@pytest.mark.parametrize("mixed", [False, True], ids=["one-height", "mixed-heights"])
def test_periodic_remainder_matrix_matches_pairwise(mixed):
    # The matrix path (targets at the sources' abscissae share the phase factors, a memo kept
    # between calls, one collapsed series when every point has one height) against one call
    # per pair, whose single-point path test_periodic_kernel_matches_series checks against the series.
    slabs = Slabs.from_stack(STACK)
    rng = np.random.default_rng(3)
    xs = rng.uniform(-1.0, 1.0, 12)
    zs = rng.uniform(1.0, 1.1, 12) if mixed else np.full(12, 1.04)
    terms = slabs.image_terms(1, 1)
    memo: dict = {}
    for _ in range(2):  # the second call reads the memo
        got = periodic_remainder(slabs, 2.0, 1, 1, xs, zs, xs, zs, terms, memo=memo)
    ref = np.array(
        [
            [
                periodic_remainder(
                    slabs, 2.0, 1, 1, [xs[t] - xs[s]], [zs[t]], [0.0], [zs[s]], terms
                )[0, 0]
                for s in range(12)
            ]
            for t in range(12)
        ]
    )
    assert np.abs(got - ref).max() < 1e-12 * np.abs(ref).max()


def test_open_remainder_table_matches_direct_sums():
    slabs = Slabs.from_stack(STACK)
    rng = np.random.default_rng(1)
    for i, lo, hi in ((1, 1.0, 1.08), (0, 0.2, 0.95), (3, 1.5, 1.9)):
        xt, zt = rng.uniform(-3, 3, 30), rng.uniform(lo, hi, 30)
        xs, zs = rng.uniform(-3, 3, 20), rng.uniform(lo, hi, 20)
        xt[:5], zt[:5] = xs[:5], zs[:5]
        table = open_remainder(slabs, i, i, xt, zt, xs, zs, 6.0)
        direct = open_remainder_direct(slabs, i, i, xt, zt, xs, zs, 6.0)
        assert np.abs(table - direct).max() < 1e-6 * np.abs(direct).max()


def test_convergence_rate_with_singular_strip_edges():
    # Two coplanar strips (docs/references.md item 17): the density is singular like
    # d^(-1/2) at the four free edges. Graded panels keep the error falling fast per level.
    s = 0.2
    exact = EPS0_F_PER_M * ellipk(1 - (s / (s + 2)) ** 2) / ellipk((s / (s + 2)) ** 2)
    lay = Layout(
        (
            driven("a", Strip(-s / 2 - 1, -s / 2, 0.0), 1.0),
            driven("b", Strip(s / 2, s / 2 + 1, 0.0), 0.0),
        )
    )
    problem = prepare(lay, None)
    errors = [
        abs(-solve_level(problem, level, 4).capacitance_F[0, 1] / exact - 1) for level in range(4)
    ]
    rates = [math.log2(a / b) for a, b in zip(errors, errors[1:], strict=False)]
    assert min(rates) > 1.5, (errors, rates)
    assert errors[-1] < 2e-6

"""2-D solver against published closed forms (docs/references.md, "Planar electrodes")."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.special import ellipk

from elopt.physics.bem2d import Bar, Strip, solve_2d
from elopt.physics.layout import EPS0_F_PER_M, Layout, driven
from elopt.physics.media import PlanarLayer

INF = math.inf
C0 = 299792458.0  # m/s, exact (SI)
ETA0 = 376.730313668  # ohm, CODATA 2018 vacuum impedance


def k_ratio(k: float) -> float:
    """K(k)/K(k') with scipy's ellipk(m = k^2)."""
    return ellipk(k * k) / ellipk(1.0 - k * k)


def strip_pair(s: float, w: float = 1.0, layers=()) -> Layout:
    return Layout(
        (
            driven("a", Strip(-s / 2 - w, -s / 2, 0.0), 1.0),
            driven("b", Strip(s / 2, s / 2 + w, 0.0), 0.0),
        ),
        layers=layers,
    )


@pytest.mark.parametrize(
    ("s", "tabulated"), [(0.05, 3.24658), (0.2, 2.40777), (1.0, 1.563402), (5.0, 0.990717)]
)
def test_coplanar_strips_homogeneous(s, tabulated):
    # docs/references.md item 17 (conformal mapping; Gupta et al. 1996 ch. 7):
    # C' = eps K(k')/K(k), k = s/(s + 2w); the tabulated values check the formula itself.
    exact = 1.0 / k_ratio(s / (s + 2.0))
    assert exact == pytest.approx(tabulated, rel=2e-6)
    sol = solve_2d(strip_pair(s), rel_accuracy=1e-5)
    assert sol.accuracy_met
    c = -sol.capacitance_matrix_F[0, 1] / EPS0_F_PER_M
    assert c == pytest.approx(exact, rel=3e-5)
    # Without a ground plane the rows sum to zero (neutral pair).
    assert abs(sol.capacitance_matrix_F.sum(axis=1)).max() < 1e-9 * c * EPS0_F_PER_M


@pytest.mark.parametrize("eps_below", [4.0, 80.0])
def test_coplanar_strips_on_interface(eps_below):
    # docs/references.md item 17: on the interface of two half-spaces eps -> (eps1 + eps2)/2.
    s = 0.3
    sol = solve_2d(
        strip_pair(s, layers=(PlanarLayer("below", eps_below, -INF, 0.0),)), rel_accuracy=1e-5
    )
    exact = 0.5 * (1.0 + eps_below) / k_ratio(s / (s + 2.0))
    assert -sol.capacitance_matrix_F[0, 1] / EPS0_F_PER_M == pytest.approx(exact, rel=3e-5)
    # Faces of a strip on the interface of two half-spaces carry charge in the ratio of the
    # permittivities (the field is the homogeneous one; common practice, no source).
    smp = sol.surface_samples("a")
    top = smp.sigma_C_per_m2[smp.face == 1] @ smp.area_m2[smp.face == 1]
    bot = smp.sigma_C_per_m2[smp.face == -1] @ smp.area_m2[smp.face == -1]
    assert bot / top == pytest.approx(eps_below, rel=1e-3)
    assert top + bot == pytest.approx(sol.charges_C[0], rel=1e-12)


def coplanar_waveguide() -> tuple[Layout, float]:
    """A centre strip 1 m wide with 0.5 m slots to grounds 50 m wide on a semi-infinite
    substrate of eps_r 10, and the formula's C' / eps0 for semi-infinite grounds
    (docs/references.md item 18, Wen 1969: 2 (eps_r + 1) K(k)/K(k'), k = s/(s + 2w))."""
    s, w, eps_r, g = 1.0, 0.5, 10.0, 50.0
    lay = Layout(
        (
            driven("centre", Strip(-s / 2, s / 2, 0.0), 1.0),
            driven("gnd_left", Strip(-s / 2 - w - g, -s / 2 - w, 0.0), 0.0),
            driven("gnd_right", Strip(s / 2 + w, s / 2 + w + g, 0.0), 0.0),
        ),
        layers=(PlanarLayer("substrate", eps_r, -INF, 0.0),),
    )
    return lay, 2.0 * (eps_r + 1.0) * k_ratio(s / (s + 2 * w))


def test_coplanar_waveguide_on_substrate():
    # docs/references.md item 18 (Wen 1969), ground planes semi-infinite. Ours are 25 (s + 2w)
    # wide: measured with widths 10, 25, 50, 100 (s + 2w) the deficit falls as about width^-2
    # (-4.9e-4, -8.4e-5, -2.2e-5, -1.5e-5 at the solver's 1e-5 floor), so about -8e-5 of
    # finite-ground effect is left: finite grounds must give less than the formula, by less
    # than 1.5e-4.
    lay, exact = coplanar_waveguide()
    sol = solve_2d(lay, rel_accuracy=1e-5)
    c = sol.capacitance_matrix_F[0, 0] / EPS0_F_PER_M
    assert -1.5e-4 < c / exact - 1.0 < 0.0


@pytest.mark.parametrize(("eta", "tabulated"), [(0.2, 0.619448), (0.5, 1.0), (0.8, 1.614339)])
def test_periodic_interdigitated_interior_cell(eta, tabulated):
    # docs/references.md item 19 (Igreja & Dias 2004): interior cell C_I/eps = K(k)/K(k'),
    # k = sin(pi eta / 2); with eps1 below and eps2 above, charge per finger per volt between
    # neighbours = (eps1 + eps2) K/K'.
    assert k_ratio(math.sin(math.pi * eta / 2)) == pytest.approx(tabulated, rel=2e-6)
    lam = 40e-6
    w = eta * lam / 2
    eps1 = 4.6
    lay = Layout(
        (
            driven("a", Strip(-w / 2, w / 2, 0.0), 1.0),
            driven("b", Strip(lam / 2 - w / 2, lam / 2 + w / 2, 0.0), 0.0),
        ),
        layers=(PlanarLayer("glass", eps1, -INF, 0.0),),
    )
    sol = solve_2d(lay, period_m=lam, rel_accuracy=1e-5)
    c = -sol.capacitance_matrix_F[0, 1] / EPS0_F_PER_M
    assert c == pytest.approx((eps1 + 1.0) * tabulated, rel=3e-5)


def hammerstad_jensen(u: float, eps_r: float) -> tuple[float, float]:
    """(C' with substrate, C' in air) in F/m; docs/references.md item 20 (from memory there)."""
    a = (
        1
        + math.log((u**4 + (u / 52) ** 2) / (u**4 + 0.432)) / 49
        + math.log(1 + (u / 18.1) ** 3) / 18.7
    )
    b = 0.564 * ((eps_r - 0.9) / (eps_r + 3)) ** 0.053
    eps_eff = (eps_r + 1) / 2 + (eps_r - 1) / 2 * (1 + 10 / u) ** (-a * b)
    f = 6 + (2 * math.pi - 6) * math.exp(-((30.666 / u) ** 0.7528))
    z01 = ETA0 / (2 * math.pi) * math.log(f / u + math.sqrt(1 + 4 / u**2))
    return eps_eff / (C0 * z01), 1.0 / (C0 * z01)


def test_hammerstad_jensen_spot_value():
    # docs/references.md item 20: u = 1, eps_r = 4.4 gives C' = 83.582 pF/m.
    assert hammerstad_jensen(1.0, 4.4)[0] * 1e12 == pytest.approx(83.582, abs=2e-3)


@pytest.mark.parametrize("u", [0.1, 0.5, 1.0, 2.0, 10.0])
@pytest.mark.parametrize("eps_r", [1.0, 4.4, 80.0])
def test_microstrip_against_hammerstad_jensen(u, eps_r):
    # docs/references.md item 20: Z01 better than 0.01 % (u <= 1) / 0.03 % (u <= 1000),
    # eps_eff better than 0.2 % (eps_r <= 128); C' = eps_eff / (c Z01).
    h = 1e-3
    layers = () if eps_r == 1.0 else (PlanarLayer("substrate", eps_r, 0.0, h),)
    lay = Layout(
        (driven("strip", Strip(-u * h / 2, u * h / 2, h), 1.0),), ground_plane=True, layers=layers
    )
    sol = solve_2d(lay, rel_accuracy=1e-5)
    with_sub, air = hammerstad_jensen(u, eps_r)
    c = sol.capacitance_matrix_F[0, 0]
    if eps_r == 1.0:
        assert c == pytest.approx(air, rel=1e-4 if u <= 1 else 3e-4)
    else:
        assert c == pytest.approx(with_sub, rel=2e-3 + 3e-4)


def test_parallel_plate_limit_layered():
    # Parallel-plate limit (common practice, no source): between a wide strip and the plane,
    # through layers t_i of eps_i in series, C per width -> 1 / sum(t_i / eps_i). The edges add
    # a fringe a + b ln W + O(1/W); the second difference C(4W) - 2 C(2W) + C(W) removes a and
    # b, so divided by W it tends to the plate value, the rest falling like 1/W.
    t1, t2, e1, e2 = 0.3e-3, 0.2e-3, 4.0, 9.0
    layers = (PlanarLayer("l1", e1, 0.0, t1), PlanarLayer("l2", e2, t1, t1 + t2))
    h = t1 + t2

    def cap(width: float) -> float:
        lay = Layout(
            (driven("plate", Strip(0.0, width, h), 1.0),), ground_plane=True, layers=layers
        )
        return solve_2d(lay, rel_accuracy=1e-6).capacitance_matrix_F[0, 0]

    plate = EPS0_F_PER_M / (t1 / e1 + t2 / e2)
    caps = {m: cap(m * h) for m in (4, 8, 16, 32, 64)}
    dev = [(caps[4 * m] - 2 * caps[2 * m] + caps[m]) / (m * h) / plate - 1 for m in (4, 8, 16)]
    assert 0 < dev[2] < dev[1] < dev[0]
    assert dev[1] / dev[2] > 2.0  # at least 1/W
    assert dev[2] < 3e-4


def test_rounded_bar_field_is_finite_and_converges():
    # A bar with rounded corners has a finite peak field; the estimate between the two finest
    # levels must be small (the sharp-corner case is flagged singular instead).
    lay = Layout(
        (
            driven("a", Bar(-1.0, 0.0, 0.0, 0.2, 0.05), 1.0),
            driven("b", Bar(0.5, 1.5, 0.0, 0.2, 0.0), 0.0),
        ),
        layers=(PlanarLayer("sub", 4.0, -INF, 0.0),),
    )
    sol = solve_2d(lay, rel_accuracy=1e-5)
    pa, pb = sol.peak_fields()
    assert not pa.singular and pa.rel_error_estimate < 1e-2
    assert pb.singular
    for name, q in zip(("a", "b"), sol.charges_C, strict=True):
        smp = sol.surface_samples(name)
        assert smp.sigma_C_per_m2 @ smp.area_m2 == pytest.approx(q, rel=1e-12)
        assert np.all(smp.face == 0)

"""Spectral Green's function of planar layers (elopt.physics.layer_spectrum)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.special import j0
from study_support.layer_images import slab_on_substrate_images

from elopt.physics.layer_spectrum import TAIL_TOL, StackSpectrum
from elopt.physics.media import LayerStack, PlanarLayer

K_NODES = np.array([0.05, 0.7, 3.0, 11.0, 45.0])


def _stack(eps: float, ground: bool) -> LayerStack:
    """Four interfaces (three layers, one gap between) over an optional grounded plane."""
    layers = (
        PlanarLayer("coat", eps, 0.1, 0.3),
        PlanarLayer("sheet", 2.0, 0.5, 0.6),
        PlanarLayer("film", eps / 2 + 1, 0.6, 0.9),
    )
    return LayerStack(layers, 1.0, ground)


def _g(sp: StackSpectrum, t: int, s: int, z: float, zs: float, k: np.ndarray):
    """Spectral g and dg/dz (Q,) for a target at z taken as lying in slab t."""
    val = np.zeros_like(k)
    der = np.zeros_like(k)
    for term in sp.terms(t, s, k):
        if term.direct:
            e = term.coef * np.exp(-k * abs(z - zs))
            val, der = val + e, der - k * np.sign(z - zs) * e
            continue
        e = term.coef * np.exp(-k * (term.target_length(z) + term.source_length(zs)))
        val, der = val + e, der - k * term.t_sign * e
    return val, der


HEIGHTS = (0.04, 0.2, 0.4, 0.55, 0.75, 1.3)


@pytest.mark.parametrize("eps", [4.0, 80.0])
@pytest.mark.parametrize("ground", [True, False])
def test_reciprocity(eps, ground):
    # Common practice, no source: the operator -div(eps grad) is symmetric, so with g carrying
    # 1/eps of the source slab g(z, z') = g(z', z) (eps_s g~(z, z') = eps_t g~(z', z) for the
    # bare wave sums g~).
    sp = StackSpectrum(_stack(eps, ground))
    for z in HEIGHTS:
        for zs in HEIGHTS:
            t, s = (int(v) for v in sp.slab_of(np.array([z, zs])))
            a = _g(sp, t, s, z, zs, K_NODES)[0]
            b = _g(sp, s, t, zs, z, K_NODES)[0]
            np.testing.assert_allclose(a, b, rtol=1e-13)


@pytest.mark.parametrize("eps", [4.0, 80.0])
@pytest.mark.parametrize("ground", [True, False])
def test_phi_and_normal_displacement_continuous_at_every_interface(eps, ground):
    # Common practice, no source: phi and eps dphi/dz are continuous across a charge-free
    # interface; each face is evaluated from the slab below and the slab above.
    sp = StackSpectrum(_stack(eps, ground))
    for zs in HEIGHTS:
        s = int(sp.slab_of(np.array([zs]))[0])
        for i in range(1, sp.n_slabs):
            face = sp.slabs[i].z_lo
            lo_v, lo_d = _g(sp, i - 1, s, face, zs, K_NODES)
            hi_v, hi_d = _g(sp, i, s, face, zs, K_NODES)
            np.testing.assert_allclose(lo_v, hi_v, rtol=1e-12)
            np.testing.assert_allclose(
                sp.slabs[i - 1].eps_r * lo_d, sp.slabs[i].eps_r * hi_d, rtol=1e-11, atol=1e-14
            )
        if ground:
            np.testing.assert_allclose(_g(sp, 0, s, 0.0, zs, K_NODES)[0], 0.0, atol=1e-15)


def test_slabs_and_points_on_interfaces():
    sp = StackSpectrum(_stack(4.0, True))
    assert [(s.z_lo, s.z_hi, s.eps_r) for s in sp.slabs] == [
        (0.0, 0.1, 1.0),
        (0.1, 0.3, 4.0),
        (0.3, 0.5, 1.0),
        (0.5, 0.6, 2.0),
        (0.6, 0.9, 3.0),
        (0.9, math.inf, 1.0),
    ]
    # a point on an interface belongs to the slab above; below the plane: -1
    assert sp.slab_of(np.array([-0.1, 0.0, 0.1, 0.2, 0.6, 0.9, 5.0])).tolist() == [
        -1,
        0,
        1,
        1,
        4,
        5,
        5,
    ]


@pytest.mark.parametrize("eps_lo", [0.5, 4.0, 80.0])
def test_single_interface_is_exactly_one_image(eps_lo):
    # docs/references.md item 15 (Jackson sec. 4.4): seen from the charge's side an image
    # q' = -q (eps2 - eps1)/(eps2 + eps1) at the mirror point; from the other side q'' =
    # 2 eps2 q/(eps2 + eps1) in a homogeneous eps2, i.e. 2/(eps1 + eps2) per eps0.
    eps_hi = 1.0
    sp = StackSpectrum(LayerStack((PlanarLayer("lower", eps_lo, -math.inf, 0.0),), eps_hi))
    for t, s in ((0, 0), (1, 1), (0, 1), (1, 0)):
        terms = sp.terms(t, s, K_NODES)
        e_s = sp.slabs[s].eps_r
        e_o = sp.slabs[1 - s].eps_r
        assert all(term.bound == 0.0 for term in terms)
        for term in terms:
            np.testing.assert_allclose(term.coef, term.limit, rtol=1e-15)
        if t == s:
            image = [term for term in terms if not term.direct]
            assert len(image) == 1
            assert image[0].limit == pytest.approx(-(e_o - e_s) / (e_o + e_s) / e_s, rel=1e-15)
        else:
            assert len(terms) == 1
            assert terms[0].limit == pytest.approx(2.0 / (e_s + e_o), rel=1e-15)


def _point_potential(sp: StackSpectrum, rho: float, z: float, zs: float) -> float:
    """4 pi eps0 phi of a unit point charge: exact images plus the quadrature remainder."""
    t, s = (int(v) for v in sp.slab_of(np.array([z, zs])))
    zt, zz = np.array([z]), np.array([zs])
    total = 0.0
    for term in sp.terms(t, s, np.array([1.0])):
        a = abs(z - zs) if term.direct else float(term.target_length(z) + term.source_length(zs))
        total += term.limit / math.hypot(rho, a)
    rule = sp.quadrature(t, s, zt, zz, rho, TAIL_TOL)
    if rule is None:
        return total
    for term in sp.terms(t, s, rule.k):
        if term.direct:
            continue
        a = float(term.target_length(z) + term.source_length(zs))
        total += float(
            np.sum(rule.w * j0(rule.k * rho) * (term.coef - term.limit) * np.exp(-rule.k * a))
        )
    return total


@pytest.mark.parametrize("eps", [4.0, 80.0])
def test_grounded_slab_against_image_series(eps):
    # Film (thickness d, eps) on a grounded plane, unit charge at h above the plane in air.
    # Images by repeated reflection with the coefficients of docs/references.md item 15
    # (Jackson sec. 4.4) at the film face and -1 at the plane (textbook series, from memory):
    #   above:  1/R0 + r/R(h + z - 2d) - (1 - r^2) sum_n r^(n-1) / R(h + z + 2(n-1) d),
    #   inside: (1 + r) sum_n r^n [1/R(h - z + 2nd) - 1/R(h + z + 2nd)],
    # r = (1 - eps)/(1 + eps): the transmitted charge (1 + r), then round trips of -1 at the
    # plane and -r (the coefficient seen from inside the film) at the face.
    # |r| <= 0.976: 3000 terms leave a tail below 1e-30.
    d, h = 0.05, 0.3
    sp = StackSpectrum(LayerStack((PlanarLayer("film", eps, 0.0, d),), 1.0, True))
    r = (1 - eps) / (1 + eps)
    n = np.arange(0, 3000)

    def above(rho, z):
        v = 1 / math.hypot(rho, z - h) + r / math.hypot(rho, h + z - 2 * d)
        a = h + z + 2 * n * d
        return v - (1 - r * r) * np.sum(r**n / np.hypot(rho, a))

    def inside(rho, z):
        a1 = h - z + 2 * n * d
        a2 = h + z + 2 * n * d
        return (1 + r) * np.sum(r**n * (1 / np.hypot(rho, a1) - 1 / np.hypot(rho, a2)))

    for rho, z in ((0.0, 0.6), (0.2, 0.31), (1.5, 0.06), (0.05, 2.0)):
        assert _point_potential(sp, rho, z, h) == pytest.approx(above(rho, z), rel=1e-11)
    # near the grounded plane phi -> 0: there the bound is absolute, 1e-12 of the scale 1/h
    for rho, z in ((0.0, 0.049), (0.3, 0.025), (2.0, 0.001)):
        assert _point_potential(sp, rho, z, h) == pytest.approx(
            inside(rho, z), rel=1e-11, abs=1e-12 / h
        )


@pytest.mark.parametrize(("eps2", "eps3"), [(4.0, 2.0), (80.0, 4.0), (2.0, 80.0), (80.0, 1.0)])
def test_slab_on_a_half_space_against_image_series(eps2, eps3):
    # Unit charge at h over a slab (-d < z < 0) on a half-space, targets above, inside and in
    # the half-space under the slab (two faces away): the multiple-reflection series of
    # docs/references.md item 15 (study_support.layer_images). High contrast puts a pole of the
    # reflection denominators near k = 0, which the graded first k-panels must resolve.
    d, h = 0.4, 1.0
    layers = (PlanarLayer("slab", eps2, -d, 0.0), PlanarLayer("sub", eps3, -math.inf, -d))
    sp = StackSpectrum(LayerStack(layers, 1.0))
    pts = np.array(
        [[0.5, 0.5], [1.0, 1.5], [0.2, 0.1], [0.3, -0.1], [1.2, -0.35], [0.1, -0.6], [2.0, -3.0]]
    )
    ref = slab_on_substrate_images(h, 1.0, eps2, eps3, d, pts)
    got = np.array([_point_potential(sp, rho, z, h) for rho, z in pts])
    np.testing.assert_allclose(got, ref, rtol=1e-11)

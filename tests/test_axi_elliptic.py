"""The compiled complete elliptic integrals and ring kernels against scipy over their range.

scipy.special (ellipkm1, ellipk, ellipe; Cephes, DLMF 19.2) is the general reference library;
the compiled loops of elopt.physics.bem_axi.ring_sums must agree with it for every parameter
the solver can meet, m1 = 1 - m from the smallest positive double to 1.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.special import ellipe, ellipkm1

from elopt.physics.bem_axi import ring_sums
from elopt.physics.bem_axi.ring_kernels import ring_field, ring_potential

#: m1 = 1 - m over the whole range: log-spaced down to the smallest normal double, denser near
#: the switch to the logarithmic asymptote (1.1e-16), and linear up to m1 = 1 (m = 0).
M1 = np.unique(
    np.concatenate(
        [
            np.logspace(-307, 0, 2000),
            np.logspace(-17, -15, 200),
            np.linspace(1e-3, 1.0, 1000),
            [np.finfo(float).tiny, 5e-324, 1.0 - 2**-52, 1.0],
        ]
    )
)


def test_compiled_k_matches_scipy_ellipkm1_over_the_whole_range():
    k = np.array([ring_sums._ellip_k(float(m)) for m in M1])
    ref = ellipkm1(M1)
    # Moshier's approximation is good to 3e-16 (same as scipy's); a few ulps of slack.
    np.testing.assert_allclose(k, ref, rtol=2e-15, atol=0)


def test_compiled_agm_k_and_e_match_scipy_over_the_whole_range():
    # Parameters m = 1 - m1 that are exact doubles, so scipy's ellipe(m) sees the same point.
    m = 1.0 - M1
    m1 = 1.0 - m
    m, m1 = m[m1 > 0], m1[m1 > 0]
    ke = np.array([ring_sums._ellip_ke(float(x)) for x in m1])
    np.testing.assert_allclose(ke[:, 0], ellipkm1(m1), rtol=5e-15, atol=0)
    np.testing.assert_allclose(ke[:, 1], ellipe(m), rtol=1e-14, atol=0)
    # m = 0: K = E = pi / 2 (DLMF 19.6.1).
    assert ring_sums._ellip_ke(1.0) == pytest.approx((np.pi / 2, np.pi / 2), rel=1e-15)
    # Below the spacing of doubles near 1, against the expansions at m -> 1 (DLMF 19.12.1,
    # 19.12.2): K = ln 4 - ln(m1) / 2, E = 1 + (m1 / 4) (ln(16 / m1) - 1), to O(m1 ln m1).
    tiny = M1[M1 < 1e-17]
    ke = np.array([ring_sums._ellip_ke(float(x)) for x in tiny])
    np.testing.assert_allclose(ke[:, 0], np.log(4.0) - 0.5 * np.log(tiny), rtol=1e-15)
    # E = K (1 - s) cancels there (K ~ 350 at m1 = 1e-300): about K ulps, measured 1.0e-13.
    e_asymptote = 1.0 + tiny / 4 * (np.log(16.0) - np.log(tiny) - 1)
    np.testing.assert_allclose(ke[:, 1], e_asymptote, rtol=2e-13)


def test_compiled_ring_kernels_match_the_scipy_forms():
    rng = np.random.default_rng(7)
    src = rng.uniform([0.0, -1.0], [1.0, 1.0], size=(400, 2))
    # Targets at every distance: far, near (down to 1e-9), and on the axis.
    offsets = np.concatenate([rng.uniform(-1, 1, (300, 2)), rng.normal(0, 1e-6, (100, 2))])
    tgt = src + offsets
    tgt[:, 0] = np.abs(tgt[:, 0])
    tgt[::50, 0] = 0.0
    phi = np.array([ring_sums._ring_phi(*t, *s) for t, s in zip(tgt, src, strict=True)])
    np.testing.assert_allclose(
        phi, ring_potential(tgt[:, 0], tgt[:, 1], src[:, 0], src[:, 1]), rtol=1e-13
    )
    e = np.array([ring_sums._ring_e(*t, *s) for t, s in zip(tgt, src, strict=True)])
    er, ez = ring_field(tgt[:, 0], tgt[:, 1], src[:, 0], src[:, 1])
    scale = np.abs(er) + np.abs(ez)
    np.testing.assert_allclose(e[:, 0], er, rtol=1e-12, atol=1e-12 * scale.max())
    np.testing.assert_allclose(e[:, 1], ez, rtol=1e-12, atol=1e-12 * scale.max())


def test_vectorised_k_matches_scipy_ellipkm1_over_the_whole_range():
    # scipy.special.ellipkm1 (Cephes ellpk, Moshier 1989) is the reference; the vectorised
    # form drops the asymptotic branch below 1.1e-16, where the polynomials are constant.
    scale = np.linspace(0.5, 2.0, len(M1))
    np.testing.assert_allclose(ring_sums.scaled_k(M1, scale), scale * ellipkm1(M1), rtol=2e-15)


def test_batched_collocation_sum_matches_the_scipy_ring_potential(monkeypatch):
    # Nodes as targets and sources, with and without the image in z = 0; batches of 100 pairs
    # so that rows are split across many batches. Reference: ring_kernels.ring_potential
    # (scipy.special.ellipkm1) times the weights, coincident pairs 0.
    rng = np.random.default_rng(11)
    r = rng.uniform(1e-4, 1.0, 57)
    z = rng.uniform(1e-3, 1.0, 57)
    w = rng.uniform(0.1, 1.0, 57)
    monkeypatch.setattr(ring_sums, "BATCH_PAIRS", 100)
    real = ring_potential(r[:, None], z[:, None], r[None, :], z[None, :]) * w
    np.fill_diagonal(real, 0.0)
    image = ring_potential(r[:, None], z[:, None], r[None, :], -z[None, :]) * w
    np.testing.assert_allclose(ring_sums.collocation_sum(r, z, w, False), real, rtol=1e-13)
    np.testing.assert_allclose(
        ring_sums.collocation_sum(r, z, w, True), real - image, rtol=1e-12, atol=1e-15
    )
    # Runs of 3 nodes (panels) leave their own real pairs to the self rule, images kept.
    own = np.arange(57)[:, None] // 3 == np.arange(57)[None, :] // 3
    np.testing.assert_allclose(
        ring_sums.collocation_sum(r, z, w, True, own_run=3),
        np.where(own, 0.0, real) - image,
        rtol=1e-12,
        atol=1e-15,
    )

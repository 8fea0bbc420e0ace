"""Quasi-static Green's function of a planar layer stack in a 2-D cross-section (x, z).

The stack is cut into slabs ``a_l <= z < b_l`` of permittivity ``eps_l`` (F/m), bottom to top;
the lowest may start at a grounded plane z = 0 or at -inf, the highest ends at +inf. For a line
charge of 1 C/m at (x', z') in slab j, the potential at (x, z) in slab i is

    G = (1/pi) int_0^inf g(k; z, z') cos(k (x - x')) dk,                        (open)
    G = (1/lam) g_0(z, z') + (2/lam) sum_{n>=1} g(k_n; z, z') cos(k_n (x - x')),  (period lam)

with k_n = 2 pi n / lam and, in slab i,

    g = [i == j] exp(-k |z - z'|) / (2 eps_j k) + sum_{p,q} M_pq(k) f_p(z) f'_q(z'),
    f_down(z) = exp(-k (z - a_i)),  f_up(z) = exp(-k (b_i - z))    (bounded in the slab).

``k M`` depends on k only through E_l = exp(-k d_l) of the finite slabs: it solves the 2L x 2L
system of the interface conditions (potential and normal D continuous, zero on the plane) for
the two source columns q. Its limits give the exactly extracted parts:

* ``M_inf = k M`` at E = 0 (each interface seen alone): the images of the nearest interfaces,
  ``2 M_inf_pq * (-ln r_img / 2 pi)`` in space, r_img the distance to an image point;
* ``m_0 = k M`` at E = 1 (k -> 0): the far field, removed from the open remainder with
  ``exp(-k L)`` so that what is left is regular at k = 0 and decays like exp(-k d_min).

The remainder ``rho_pq = M_pq - M_inf_pq / k`` (periodic: summed over n until exp(-k_n d_min)
is below 1e-13) or ``rho~ = rho - (m_0 - M_inf) exp(-k L) / k`` (open: a Laplace transform
F(w) = (1/pi) int rho~(k) exp(-k w) dk at w = alpha + i |x - x'|, taken along a ray rotated into
the right half-plane, where rho~ is analytic because every |reflection product| < 1) is smooth
and evaluated at the quadrature nodes. Nothing is truncated beyond those 1e-13 tails. A pole
of k M near k = 0 (high contrast: :meth:`Slabs.near_pole`) is taken out of rho~ before that
(:mod:`elopt.physics.bem2d.remainder`); the ray rule's first panel is never wider than the
pole's distance from 0 (``pole_distance`` of :mod:`elopt.physics.layer_spectrum`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cached_property

import numpy as np

from elopt.physics.errors import GeometryError
from elopt.physics.layer_spectrum import StackSpectrum
from elopt.physics.layout import EPS0_F_PER_M
from elopt.physics.media import LayerStack

#: Relative size of the spectral tails left out (periodic sums and ray integrals).
TAIL = 1e-13
#: A pole of the spectral function closer to k = 0 than this over the stack's finite
#: thickness is taken out of the open remainder in closed form (:meth:`Slabs.near_pole`).
POLE_NEAR = 0.01
#: Trapezoid nodes on the circle that locates that pole, and its radius times the finite
#: thickness (inside it k M has no other pole; Cauchy's integral is used within half of it).
POLE_NODES = 64
POLE_CIRCLE = 0.5

#: k M at E = 0 and E = 1 by (stack key, which): they depend on the stack only.
_LIMITS: dict[tuple, np.ndarray] = {}
_LIMITS_MAX = 256


@dataclass(frozen=True)
class Slabs:
    """Slabs of constant permittivity: bounds (L,) in m (may be -inf/+inf), eps (L,) in F/m."""

    bottom_m: np.ndarray
    top_m: np.ndarray
    eps_F_per_m: np.ndarray
    ground_plane: bool
    #: distance (1/m) of the nearest pole of the spectral function from k = 0 (inf if none)
    pole_distance_per_m: float = math.inf

    @classmethod
    def from_stack(cls, stack: LayerStack) -> Slabs:
        cuts = [float(z) for z in stack.interfaces_m]
        if stack.ground_plane:
            cuts = [z for z in cuts if z > 0.0]
            lows = [0.0, *cuts]
        else:
            lows = [-math.inf, *cuts]
        highs = [*cuts, math.inf]
        eps = []
        for lo, hi in zip(lows, highs, strict=True):
            mid = 0.5 * (lo + hi) if math.isfinite(lo) and math.isfinite(hi) else None
            if mid is None:
                mid = hi - 1.0 if math.isfinite(hi) else (lo + 1.0 if math.isfinite(lo) else 0.0)
            eps.append(float(stack.eps_r_at(np.array([mid]))[0]) * EPS0_F_PER_M)
        return cls(
            np.array(lows),
            np.array(highs),
            np.array(eps),
            bool(stack.ground_plane),
            StackSpectrum(stack).pole_distance,
        )

    @property
    def n(self) -> int:
        return len(self.eps_F_per_m)

    @cached_property
    def thickness_m(self) -> np.ndarray:
        """(L,) slab thickness; inf for the half-spaces (and a grounded open top slab)."""
        return self.top_m - self.bottom_m

    @property
    def layered(self) -> bool:
        """True when a finite slab exists (then a smooth remainder is needed)."""
        return bool(np.isfinite(self.thickness_m).any())

    @property
    def min_thickness_m(self) -> float:
        d = self.thickness_m[np.isfinite(self.thickness_m)]
        return float(d.min()) if d.size else math.inf

    def index(self, z_m: np.ndarray) -> np.ndarray:
        """Slab index of each height (M,); on an interface, the slab above."""
        z = np.asarray(z_m, dtype=float)
        if self.ground_plane and np.any(z < 0.0):
            raise GeometryError(f"a point lies below the ground plane (z = {z.min():.6g} m)")
        return np.searchsorted(self.bottom_m, z, side="right") - 1

    def heights(self, z_m: np.ndarray, idx: np.ndarray) -> np.ndarray:
        """(M, 2): distance down to the slab's bottom and up to its top (inf if none)."""
        z = np.asarray(z_m, dtype=float)
        return np.stack([z - self.bottom_m[idx], self.top_m[idx] - z], axis=1)

    def eps_touching(self, points_m: np.ndarray, normals: np.ndarray) -> np.ndarray:
        """Permittivity (M,) F/m on the side a unit normal points to, just off each point."""
        z = np.asarray(points_m, dtype=float)[:, 1]
        scale = max(1e-12, float(np.max(np.abs(z))) if z.size else 1.0)
        probe = z + 1e-9 * scale * np.sign(normals[:, 1]) * (np.abs(normals[:, 1]) > 1e-9)
        # Points whose normal has no vertical part stay at z; a face on an interface then
        # takes the slab its normal enters.
        return self.eps_F_per_m[self.index(probe)]

    # -- spectral coefficients ------------------------------------------------------------
    def k_times_m(self, e: np.ndarray, j: int) -> np.ndarray:
        """``k M`` for a source in slab j: (K, L, 2, 2) [slab i, p, q] from E (K, L)."""
        n = self.n
        eps = self.eps_F_per_m
        kk = e.shape[0]
        a = np.zeros((kk, 2 * n, 2 * n), dtype=e.dtype)
        rhs = np.zeros((kk, 2 * n, 2), dtype=e.dtype)
        ej = eps[j]
        # Row 0: bottom condition; a_0 = 0 for a half-space, potential 0 on the plane.
        a[:, 0, 0] = 1.0
        if self.ground_plane:
            a[:, 0, 1] = e[:, 0]
            if j == 0:
                rhs[:, 0, 0] = -0.5 / ej
        for l_ in range(n - 1):
            r_phi, r_d = 1 + 2 * l_, 2 + 2 * l_
            al, bl, au, bu = 2 * l_, 2 * l_ + 1, 2 * l_ + 2, 2 * l_ + 3
            a[:, r_phi, al] = e[:, l_]
            a[:, r_phi, bl] = 1.0
            a[:, r_phi, au] = -1.0
            a[:, r_phi, bu] = -e[:, l_ + 1]
            a[:, r_d, al] = -eps[l_] * e[:, l_]
            a[:, r_d, bl] = eps[l_]
            a[:, r_d, au] = eps[l_ + 1]
            a[:, r_d, bu] = -eps[l_ + 1] * e[:, l_ + 1]
            if l_ == j:  # source below this interface: its upward wave arrives here
                rhs[:, r_phi, 1] += -0.5 / ej
                rhs[:, r_d, 1] += 0.5
            if l_ + 1 == j:  # source above: its downward wave arrives here
                rhs[:, r_phi, 0] += 0.5 / ej
                rhs[:, r_d, 0] += 0.5
        a[:, 2 * n - 1, 2 * n - 1] = 1.0  # b of the top half-space is 0
        sol = np.linalg.solve(a, rhs)  # (K, 2L, 2)
        return sol.reshape(kk, n, 2, 2)

    def decay_factors(self, k: np.ndarray) -> np.ndarray:
        """E_l = exp(-k d_l) (K, L); 0 for infinite slabs."""
        d = self.thickness_m
        out = np.zeros((len(k), self.n), dtype=np.result_type(k, float))
        fin = np.isfinite(d)
        out[:, fin] = np.exp(-np.outer(k, d[fin]))
        return out

    @cached_property
    def key(self) -> tuple:
        """A hashable description (bounds, permittivities, plane)."""
        return (
            tuple(self.bottom_m.tolist()),
            tuple(self.top_m.tolist()),
            tuple(self.eps_F_per_m.tolist()),
            self.ground_plane,
        )

    def _limit(self, which: str, e: np.ndarray) -> np.ndarray:
        """k M at the decay factors ``e`` (1, L) for every source slab, kept in ``_LIMITS``
        under (``key``, ``which``): every solve of one stack shares them."""
        hit = _LIMITS.get((self.key, which))
        if hit is None:
            if len(_LIMITS) >= _LIMITS_MAX:
                _LIMITS.clear()
            hit = np.stack([self.k_times_m(e, j)[0] for j in range(self.n)])
            _LIMITS[(self.key, which)] = hit
        return hit

    @cached_property
    def m_inf(self) -> np.ndarray:
        """(L_src, L, 2, 2): k M at E = 0 (the single-interface images)."""
        return self._limit("inf", np.zeros((1, self.n)))

    @cached_property
    def m_zero(self) -> np.ndarray:
        """(L_src, L, 2, 2): k M as k -> 0 (E = 1 for the finite slabs)."""
        return self._limit("zero", np.where(np.isfinite(self.thickness_m), 1.0, 0.0)[None, :])

    def near_pole(self, i: int, j: int) -> NearPole | None:
        """The pole of ``k M`` near k = 0 for targets in slab i, sources in slab j, or None.

        Between a grounded plane and a much higher permittivity, or in a slab of much higher
        permittivity than both neighbours, the interface system is nearly singular at k = 0:
        a simple pole at k = -delta, delta ~ 1 / (contrast * d), whose residues make the
        m0_pq grow like the contrast while their sum stays finite, and near which ``k M`` is
        computed with a relative error ~ 1e-16 / (k d). Taken when ``pole_distance_per_m``
        times the finite thickness L is below POLE_NEAR, from ``k M`` on the circle
        |k| = POLE_CIRCLE / L, where the system is well conditioned (see :class:`NearPole`).
        """
        cache = self.__dict__.setdefault("_poles", {})
        if (i, j) not in cache:
            cache[(i, j)] = self._near_pole_uncached(i, j)
        return cache[(i, j)]

    def _near_pole_uncached(self, i: int, j: int) -> NearPole | None:
        fin = np.isfinite(self.thickness_m)
        total = float(self.thickness_m[fin].sum())
        if not self.pole_distance_per_m * total < POLE_NEAR:
            return None
        radius = POLE_CIRCLE / total
        k = radius * np.exp(2j * math.pi * (np.arange(POLE_NODES) + 0.5) / POLE_NODES)
        km = self.k_times_m(self.decay_factors(k), j)[:, i]  # (N, 2, 2)
        moments = [np.mean(km * (k**m)[:, None, None], axis=0) for m in (1, 2, 3)]
        res = moments[0]
        big = np.unravel_index(np.argmax(np.abs(res)), res.shape)
        if abs(res[big]) == 0.0:
            return None
        pole = moments[1][big] / res[big]
        single = abs(moments[2][big] / res[big] - pole * pole) <= 1e-6 * radius**2
        real = abs(pole.imag) <= 1e-6 * radius and -0.1 * radius < pole.real < 0.0
        if not (single and real):
            return None
        out = NearPole(-float(pole.real), res.real.copy(), k, km)
        probe = np.array([0.5 * radius])
        direct = self.k_times_m(self.decay_factors(probe), j)[:, i]
        check = out.regular_part(probe) + out.residue / (probe[0] + out.delta)
        if np.abs(check - direct).max() > 1e-9 * np.abs(direct).max():
            return None
        return out

    def image_terms(self, i: int, j: int) -> list[tuple[float, int, float]]:
        """Exactly extracted log terms for targets in slab i, sources in slab j.

        Each is ``(coefficient, s, t0)``: the kernel ``coefficient * (-ln r / 2 pi)`` with r the
        distance from the source point to the effective target (x, t0 + s z); the direct term
        (i == j) has coefficient 1/eps_i, s = 1, t0 = 0.
        """
        terms: list[tuple[float, int, float]] = []
        if i == j:
            terms.append((1.0 / self.eps_F_per_m[i], 1, 0.0))
        ai, bi = self.bottom_m[i], self.top_m[i]
        aj, bj = self.bottom_m[j], self.top_m[j]
        m = self.m_inf[j, i]
        for p in range(2):
            for q in range(2):
                c = float(m[p, q])
                if c == 0.0 or abs(c) < 1e-14 * abs(m).max():
                    continue
                if p == 0 and q == 0:
                    terms.append((2 * c, -1, ai + aj))
                elif p == 0 and q == 1:
                    terms.append((2 * c, 1, bj - ai))
                elif p == 1 and q == 0:
                    terms.append((2 * c, 1, aj - bi))
                else:
                    terms.append((2 * c, -1, bi + bj))
        return terms

    # -- k = 0 mode of the periodic kernel --------------------------------------------------
    @cached_property
    def _phi_knots(self) -> tuple[np.ndarray, np.ndarray]:
        """Heights (K,) and Phi there: every finite bound and 0, with one point beyond each
        end so that linear interpolation and extrapolation reproduce Phi everywhere."""
        b = np.concatenate([self.bottom_m, self.top_m, [0.0]])
        b = np.unique(b[np.isfinite(b)])
        z = np.concatenate([[b[0] - 1.0], b, [b[-1] + 1.0]])
        return z, self._phi_direct(z)

    def _phi_direct(self, z: np.ndarray) -> np.ndarray:
        lo, hi = np.minimum(z, 0.0), np.maximum(z, 0.0)
        out = np.zeros_like(z)
        for a, b, eps in zip(self.bottom_m, self.top_m, self.eps_F_per_m, strict=True):
            out += np.maximum(np.minimum(hi, b) - np.maximum(lo, a), 0.0) / eps
        return np.sign(z) * out

    def inverse_eps_integral(self, z_m: np.ndarray) -> np.ndarray:
        """Phi(z) = int_0^z dzeta / eps(zeta) (M,) in m per (F/m): piecewise linear, so
        interpolated between its knots (extrapolated linearly beyond the outer ones)."""
        z = np.asarray(z_m, dtype=float)
        kz, kp = self._phi_knots
        out = np.interp(z, kz, kp)
        lo, hi = z < kz[0], z > kz[-1]
        out[lo] = kp[0] + (z[lo] - kz[0]) / self.eps_F_per_m[0]
        out[hi] = kp[-1] + (z[hi] - kz[-1]) / self.eps_F_per_m[-1]
        return out

    def zero_mode(self, zt: np.ndarray, zs: np.ndarray) -> np.ndarray:
        """g_0(z, z') (T, S) of the 1-D problem -(eps g')' = delta(z - z') (neutral cells)."""
        pt, ps = self.inverse_eps_integral(zt), self.inverse_eps_integral(zs)
        if self.ground_plane:
            return np.minimum(pt[:, None], ps[None, :])
        return -0.5 * np.abs(pt[:, None] - ps[None, :])


@dataclass(frozen=True)
class NearPole:
    """k M(k) = residue / (k + delta) + regular part, near k = 0 (:meth:`Slabs.near_pole`).

    ``delta`` (1/m) and ``residue`` (2, 2) come from the moments of ``circle_km`` (N, 2, 2),
    k M on the circle ``circle_k`` (N,); the regular part inside the circle is Cauchy's
    integral of those values, which leaves out the principal part of every pole inside
    exactly, whatever the accuracy of delta and the residue."""

    delta: float
    residue: np.ndarray
    circle_k: np.ndarray
    circle_km: np.ndarray

    @property
    def radius(self) -> float:
        return float(np.abs(self.circle_k[0]))

    def regular_part(self, k: np.ndarray) -> np.ndarray:
        """k M - residue / (k + delta) (K, 2, 2) at |k| <= radius / 2 (complex or real k)."""
        c = self.circle_k
        kernel = c[None, :] / (c[None, :] - np.asarray(k)[:, None]) / len(c)  # (K, N)
        return np.einsum("kn,npq->kpq", kernel, self.circle_km)


def octave_rule(lo: float, hi: float, per_panel: int = 12) -> tuple[np.ndarray, np.ndarray]:
    """Composite Gauss rule on [0, hi]: one panel [0, lo], then octaves up to hi."""
    x, w = np.polynomial.legendre.leggauss(per_panel)
    edges = [0.0, lo]
    while edges[-1] < hi:
        edges.append(edges[-1] * 2.0)
    e = np.asarray(edges)
    a, b = e[:-1], e[1:]
    nodes = (0.5 * (b - a)[:, None] * (x[None, :] + 1.0) + a[:, None]).ravel()
    weights = (0.5 * (b - a)[:, None] * w[None, :]).ravel()
    return nodes, weights

"""Tables of the smooth spectral remainder of a layered Green's function, for 3-D panels.

One separable spectral term of a planar layer stack, with its exact image limit taken out,
contributes to the potential of a unit point charge (in units of 1 / (4 pi eps0 eps_s))

    T(rho, a) = integral_0^inf J0(k rho) c(k) e^{-k a} dk,

rho the horizontal distance, a >= 0 a sum or difference of heights fixed by the term, and
|c(k)| <= B e^{-k delta} (delta >= 0 the decay the coefficient has on its own). T is smooth:
its nearest singularity lies at a distance lam = a_min + delta > 0 below the table.

The integral is cut at K where the proven tail bound B int_K^inf k^m e^{-k s} dk (m = 0, 1, 2
for T and its derivatives, s = lam) is below ``HANKEL_TAIL`` of the kernel scale
1 / L^(m+1), L the layout size, and integrated by 16-point Gauss-Legendre panels no wider than
5 / rho_max, 8 / lam and 4 / H (H the longest exponent length in c, so that
c's slowest factors e^{-k H} change by at most e^4 per panel; the first panel no wider than
the distance of the stack's nearest pole from k = 0; the shared rule of
:func:`elopt.physics.layer_spectrum.hankel_rule`). T, dT/drho, dT/da and
d2T/drho da are tabulated on a uniform grid in u = asinh(rho / lam), v = ln(a + delta) and
interpolated by bicubic Hermite patches (error O(h^4)). The grid is halved until the
interpolation error measured against the integral itself at every cell centre is below
``rel_tol`` times the largest |T| of the table (:attr:`RemainderTable.error`).

Tables depend on the stack and the ranges of rho and a only, so :data:`TABLE_CACHE` keeps them
across refinement levels and across the solves of one design on the same stack: a kept group
serves a request whose ranges it covers, whose cutoff it reaches and whose tolerance its
measured error meets (:class:`TableCache`).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from numba import njit
from scipy.special import j0, j1

from elopt.physics.errors import SolverError
from elopt.physics.kernel_cache import drop_stale_kernel_caches
from elopt.physics.layer_spectrum import TAIL_TOL, hankel_rule

drop_stale_kernel_caches()

#: Relative size of the truncated Hankel tail against the kernel scale (the shared value).
HANKEL_TAIL = TAIL_TOL
#: Default interpolation tolerance of a table, relative to its largest value.
TABLE_REL_TOL = 1e-7
_GAUSS_K = 16
_FIRST_STEP = 0.2
_MIN_STEP = 0.2 / 64


def tail_bound(k_cut: float, s: float, m: int, bound: float) -> float:
    """bound * integral_K^inf k^m e^{-k s} dk, in closed form."""
    total = 0.0
    fact = 1.0
    for j in range(m + 1):
        total += fact * k_cut ** (m - j) / s ** (j + 1)
        fact *= m - j
    return bound * math.exp(-k_cut * s) * total


def cutoff(s: float, size: float, bound: float | Callable[[float], float]) -> float:
    """Smallest K (on a 1/s lattice) whose tails for m = 0, 1, 2 are below the tolerance.

    ``bound`` may depend on K (a factor such as 1 / (1 - e^{-2 K d})).
    """
    scale = max(size, s)
    k = 20.0 / s
    for _ in range(100_000):
        b = bound(k) if callable(bound) else bound
        if all(tail_bound(k, s, m, b) <= HANKEL_TAIL / scale ** (m + 1) for m in range(3)):
            return k
        k += 1.0 / s
    raise SolverError(f"no Hankel cutoff found for decay length {s:.3g} m")  # pragma: no cover


@dataclass(frozen=True)
class SpectralTerm:
    """c(k) of one term, its own decay ``delta`` (m), a bound B with |c| <= B e^{-k delta}
    (may depend on the cutoff K), ``length``: the longest exponent length H of the factors
    e^{-k H} in c (m; the Gauss panels are no wider than 4 / H), and ``pole_distance`` (1/m):
    how far the nearest pole of c lies from k = 0 (the first panel is no wider; see
    :attr:`elopt.physics.layer_spectrum.StackSpectrum.pole_distance`)."""

    coef: Callable[[np.ndarray], np.ndarray]
    delta: float
    bound: float | Callable[[float], float]
    length: float
    pole_distance: float = math.inf


@dataclass(frozen=True)
class RemainderTable:
    """Hermite table of one term on u in [0, u_max], v in [v0, v0 + (nv - 1) hv].

    ``values`` (nu, nv, 4): T, dT/du, dT/dv, d2T/du dv at the nodes; ``error``: measured
    largest interpolation error at the cell centres relative to ``scale`` = max |T|.
    """

    values: np.ndarray
    lam: float  # the length in u = asinh(rho / lam); the floor of a + delta is exp(v0)
    delta: float
    hu: float
    v0: float
    hv: float
    error: float
    scale: float
    n_k: int
    k_max: float = math.inf  # the Hankel cutoff the values were integrated to (1/m)

    def evaluate(self, rho: np.ndarray, a: np.ndarray) -> tuple[np.ndarray, ...]:
        """T, dT/drho, dT/da (M,) at horizontal distances rho and exponents a (M,)."""
        rho = np.ascontiguousarray(rho, dtype=float)
        a = np.ascontiguousarray(a, dtype=float)
        out = np.empty((len(rho), 3))
        for i in range(len(rho)):
            hermite(
                self.values, self.lam, self.delta, self.hu, self.v0, self.hv, rho[i], a[i], out[i]
            )
        return out[:, 0], out[:, 1], out[:, 2]


def spectral_values(
    term: SpectralTerm, k: np.ndarray, w: np.ndarray, rho: np.ndarray, a: np.ndarray
) -> np.ndarray:
    """Exact (by the rule) T, T_rho, T_a, T_rho_a (4, len(rho), len(a)) on a product grid."""
    c = term.coef(k) * w
    kr = np.outer(rho, k)
    bj0, bj1 = j0(kr), j1(kr)
    ea = np.exp(-np.outer(k, a)) * c[:, None]
    return np.stack([bj0 @ ea, -(bj1 * k) @ ea, -(bj0 * k) @ ea, (bj1 * k * k) @ ea])


def _nodes(term: SpectralTerm, k, w, u: np.ndarray, v: np.ndarray, lam: float) -> np.ndarray:
    rho = lam * np.sinh(u)
    a = np.exp(v) - term.delta
    t, tr, ta, tra = spectral_values(term, k, w, rho, a)
    jr = np.sqrt(rho**2 + lam**2)[:, None]
    ja = (a + term.delta)[None, :]
    return np.stack([t, tr * jr, ta * ja, tra * jr * ja], axis=-1)


def build_table(
    term: SpectralTerm,
    rho_max: float,
    a_min: float,
    a_max: float,
    size: float,
    rel_tol: float = TABLE_REL_TOL,
    rho_scale: float | None = None,
) -> RemainderTable:
    """Table of ``term`` for 0 <= rho <= rho_max, a_min <= a <= a_max (module docstring);
    ``rho_scale`` (default lam) is the length in u = asinh(rho / rho_scale), shared by tables
    evaluated together so that u is computed once per pair."""
    lam = a_min + term.delta
    if not lam > 0.0:
        raise SolverError(
            f"layered kernel: a remainder term has no decay (a_min = {a_min:.3g} m, "
            f"delta = {term.delta:.3g} m); a source lies on an interface it should not touch"
        )
    k_max = cutoff(lam, size, term.bound)
    rs = lam if rho_scale is None else min(float(rho_scale), lam)
    widths = [5.0 / max(rho_max, 1e-300), 8.0 / lam, 4.0 / term.length]
    rule = hankel_rule(k_max, min(widths), 0.0, term.pole_distance)
    k, w = rule.k, rule.w
    u_max = math.asinh(max(rho_max, 1e-3 * rs) / rs)
    v0 = math.log(lam)
    v_max = math.log(max(a_max + term.delta, lam * (1 + 1e-3)))
    step = _FIRST_STEP
    while True:
        nu = max(2, math.ceil(u_max / step) + 1)
        nv = max(2, math.ceil((v_max - v0) / step) + 1)
        u = np.linspace(0.0, u_max, nu)
        v = np.linspace(v0, v_max, nv)
        values = _nodes(term, k, w, u, v, rs)
        scale = float(np.max(np.abs(values[..., 0])))
        um, vm = 0.5 * (u[1:] + u[:-1]), 0.5 * (v[1:] + v[:-1])
        exact = spectral_values(term, k, w, rs * np.sinh(um), np.exp(vm) - term.delta)[0]
        table = RemainderTable(
            values, rs, term.delta, u[1] - u[0], v0, v[1] - v[0], 0.0, scale, len(k)
        )
        rr, aa = np.meshgrid(rs * np.sinh(um), np.exp(vm) - term.delta, indexing="ij")
        approx = table.evaluate(rr.ravel(), aa.ravel())[0].reshape(rr.shape)
        err = float(np.max(np.abs(approx - exact))) / scale if scale > 0 else 0.0
        if err <= rel_tol or step <= _MIN_STEP:
            if err > rel_tol:
                raise SolverError(
                    f"layered kernel: remainder table error {err:.2g} above {rel_tol:.2g} at "
                    f"the finest grid step {step:g}"
                )
            return RemainderTable(
                values, rs, term.delta, table.hu, v0, table.hv, err, scale, len(k), k_max
            )
        step *= 0.5


@dataclass(frozen=True)
class TableRange:
    """What a group of tables evaluated together must cover: 0 <= rho <= ``rho_max``, per
    term a range (a_lo, a_hi) of the exponent, the layout size (m) that sets the Hankel
    cutoff, and the interpolation tolerance."""

    rho_max: float
    ranges: tuple[tuple[float, float], ...]
    size: float
    rel_tol: float


def build_tables(terms: list[SpectralTerm], want: TableRange) -> list[RemainderTable]:
    """Tables of ``terms`` over ``want``, sharing the length of u (the smallest lam)."""
    pairs = list(zip(terms, want.ranges, strict=True))
    rho_scale = min(lo + term.delta for term, (lo, _) in pairs)
    return [
        build_table(term, want.rho_max, lo, hi, want.size, want.rel_tol, rho_scale)
        for term, (lo, hi) in pairs
    ]


def _covers(tab: RemainderTable, term: SpectralTerm, lo: float, hi: float, want: TableRange):
    """Whether ``tab`` serves the exponent range lo..hi of ``want`` as well as a table built
    for it: its range holds the request, its cutoff reaches the request's, and its measured
    interpolation error is within ``rel_tol`` of the largest |T| at its nodes inside the
    request."""
    if lo + term.delta <= 0.0:
        return False  # no table serves it: building one gives the error
    if want.rho_max > tab.lam * math.sinh(tab.hu * (tab.values.shape[0] - 1)) * (1 + 1e-12):
        return False
    v_lo, v_hi = math.log(lo + term.delta), math.log(hi + term.delta)
    v_top = tab.v0 + tab.hv * (tab.values.shape[1] - 1)
    if v_lo < tab.v0 - 1e-12 or v_hi > v_top + 1e-12:
        return False
    if cutoff(lo + term.delta, want.size, term.bound) > tab.k_max:
        return False
    nu = min(tab.values.shape[0], math.ceil(math.asinh(want.rho_max / tab.lam) / tab.hu) + 1)
    j0_ = max(0, math.floor((v_lo - tab.v0) / tab.hv))
    j1_ = min(tab.values.shape[1], math.ceil((v_hi - tab.v0) / tab.hv) + 1)
    inside = float(np.max(np.abs(tab.values[:nu, j0_:j1_, 0])))
    return tab.error * tab.scale <= want.rel_tol * inside


class TableCache:
    """Remainder tables kept across levels and solves of one layer stack.

    The tables depend on the stack, the slabs of targets and sources and the ranges they
    cover, not on the panels; every refinement level of a layout (and every companion solve
    on the same stack) asks for nearly the same ranges. A request is served by a cached group
    when every table covers it (:func:`_covers`), else built and kept (at most
    ``max_groups`` groups, the oldest dropped). ``hits`` and ``misses`` count requests.
    """

    def __init__(self, max_groups: int = 64) -> None:
        self.max_groups = max_groups
        self._groups: list[tuple[object, TableRange, list[RemainderTable]]] = []
        self.hits = 0
        self.misses = 0

    def clear(self) -> None:
        self._groups.clear()
        self.hits = self.misses = 0

    def tables(
        self, key: object, terms: list[SpectralTerm], want: TableRange
    ) -> list[RemainderTable]:
        """The tables (one per term) for ``want``; ``key`` names the stack and the slabs (the
        same key must always mean the same terms)."""
        for k, have, tabs in self._groups:
            if (
                k == key
                and have.rel_tol <= want.rel_tol
                and all(
                    _covers(tab, term, lo, hi, want)
                    for tab, term, (lo, hi) in zip(tabs, terms, want.ranges, strict=True)
                )
            ):
                self.hits += 1
                return tabs
        self.misses += 1
        tabs = build_tables(terms, want)
        self._groups.append((key, want, tabs))
        del self._groups[: -self.max_groups]
        return tabs


#: The process's cache of remainder tables (:class:`TableCache`).
TABLE_CACHE = TableCache()


@njit(cache=True, inline="always")
def _basis(t: float):
    h0 = (1.0 + 2.0 * t) * (1.0 - t) * (1.0 - t)
    h1 = t * t * (3.0 - 2.0 * t)
    g0 = t * (1.0 - t) * (1.0 - t)
    g1 = t * t * (t - 1.0)
    dh0 = 6.0 * t * t - 6.0 * t
    dh1 = -dh0
    dg0 = 3.0 * t * t - 4.0 * t + 1.0
    dg1 = 3.0 * t * t - 2.0 * t
    return h0, h1, g0, g1, dh0, dh1, dg0, dg1


@njit(cache=True, inline="always")
def _cell(nu, nv, hu, v0, hv, u, v):
    """The table cell (i, j) holding (u, v) (the last one beyond the ends) and the position
    (t, s) in it, in cell widths."""
    x = u / hu
    i = min(max(int(x), 0), nu - 2)
    y = (v - v0) / hv
    j = min(max(int(y), 0), nv - 2)
    return i, x - i, j, y - j


@njit(cache=True, inline="always")
def _corner(tab, i, j, hu, hv):
    """Value and derivatives at node (i, j) scaled to cell widths: T, hu T_u, hv T_v,
    hu hv T_uv."""
    return tab[i, j, 0], tab[i, j, 1] * hu, tab[i, j, 2] * hv, tab[i, j, 3] * hu * hv


@njit(cache=True)
def hermite_uv(tab, nu, nv, hu, v0, hv, u, v, out) -> None:
    """out[:3] = T, dT/du, dT/dv at (u, v) by the bicubic Hermite patch of its cell."""
    i, t, j, s = _cell(nu, nv, hu, v0, hv, u, v)
    hx0, hx1, gx0, gx1, dhx0, dhx1, dgx0, dgx1 = _basis(t)
    hy0, hy1, gy0, gy1, dhy0, dhy1, dgy0, dgy1 = _basis(s)
    f = 0.0
    fu = 0.0
    fv = 0.0
    for p in range(2):
        hx = hx0 if p == 0 else hx1
        gx = gx0 if p == 0 else gx1
        dhx = dhx0 if p == 0 else dhx1
        dgx = dgx0 if p == 0 else dgx1
        for q in range(2):
            hy = hy0 if q == 0 else hy1
            gy = gy0 if q == 0 else gy1
            dhy = dhy0 if q == 0 else dhy1
            dgy = dgy0 if q == 0 else dgy1
            c0, c1, c2, c3 = _corner(tab, i + p, j + q, hu, hv)
            f += hx * hy * c0 + gx * hy * c1 + hx * gy * c2 + gx * gy * c3
            fu += dhx * hy * c0 + dgx * hy * c1 + dhx * gy * c2 + dgx * gy * c3
            fv += hx * dhy * c0 + gx * dhy * c1 + hx * dgy * c2 + gx * dgy * c3
    out[0] = f
    out[1] = fu / hu
    out[2] = fv / hv


@njit(cache=True, inline="always")
def hermite_value(tab, nu, nv, hu, v0, hv, u, v) -> float:
    """T at (u, v): :func:`hermite_uv`'s first output alone (the same sums in the same
    order, so the same value), for entries that need no derivative."""
    i, t, j, s = _cell(nu, nv, hu, v0, hv, u, v)
    hx0, hx1, gx0, gx1, _, _, _, _ = _basis(t)
    hy0, hy1, gy0, gy1, _, _, _, _ = _basis(s)
    f = 0.0
    for p in range(2):
        hx = hx0 if p == 0 else hx1
        gx = gx0 if p == 0 else gx1
        for q in range(2):
            hy = hy0 if q == 0 else hy1
            gy = gy0 if q == 0 else gy1
            c0, c1, c2, c3 = _corner(tab, i + p, j + q, hu, hv)
            f += hx * hy * c0 + gx * hy * c1 + hx * gy * c2 + gx * gy * c3
    return f


@njit(cache=True)
def hermite(tab, lam, delta, hu, v0, hv, rho, a, out) -> None:
    """out[:3] = T, dT/drho, dT/da at (rho, a) (a + delta is floored at exp(v0))."""
    ad = max(a + delta, math.exp(v0))
    hermite_uv(
        tab, tab.shape[0], tab.shape[1], hu, v0, hv, math.asinh(rho / lam), math.log(ad), out
    )
    out[1] /= math.sqrt(rho * rho + lam * lam)
    out[2] /= ad

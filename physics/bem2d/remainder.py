"""The smooth remainder of the layered kernel (see :mod:`elopt.physics.bem2d.layered_green`).

``periodic_remainder`` sums the spectral series; ``open_remainder`` takes the Laplace transforms
F_pq(w) along rays k = s exp(-i psi) with psi = arg(w) / 2 (rounded to one of ``RAYS`` angles),
so that neither exp(-k w) nor the slab factors exp(-k d) oscillate faster than they decay.
At high contrast (a grounded plane under a much higher permittivity, a slab of much higher
permittivity than its neighbours) k M has a pole at k = -delta near 0 (:meth:`Slabs.near_pole`):
its part R / (k + delta) is transformed in closed form (:func:`pole_transform`) and the rest is
taken near k = 0 from Cauchy's integral, since the (p, q) parts would otherwise grow like the
contrast and cancel in the sum.
Both return R (T, S) in V per (C/m) at target and source points; the caller weights columns.
"""

from __future__ import annotations

import math

import numba
import numpy as np
import scipy.special

from elopt.physics.bem2d.layered_green import TAIL, Slabs, octave_rule
from elopt.physics.kernel_cache import drop_stale_kernel_caches

drop_stale_kernel_caches()

RAYS = 9


def _rho(slabs: Slabs, k: np.ndarray, i: int, j: int) -> np.ndarray:
    """(K, 2, 2): k M(k) - M_inf for target slab i, source slab j."""
    km = slabs.k_times_m(slabs.decay_factors(k), j)[:, i]
    return km - slabs.m_inf[j, i][None]


#: Spectra of the periodic remainder by (stack, period, i, j): they depend only on the stack
#: and the k-rule, so repeated solves of one stack (levels, trials, derivatives) share them.
_SPECTRA: dict[tuple, tuple[np.ndarray, np.ndarray, np.ndarray]] = {}
_SPECTRA_MAX = 256


def _periodic_spectrum(slabs: Slabs, period: float, i: int, j: int):
    """k_n (n,), rho_pq(k_n) / k_n (n, 2, 2) real, and the largest |rho_pq / k| (2, 2)."""
    key = (slabs.key, float(period), i, j)
    hit = _SPECTRA.get(key)
    if hit is None:
        d_min = slabs.min_thickness_m
        n_max = max(1, math.ceil(-math.log(TAIL) * period / (2 * math.pi * d_min)))
        k = 2 * math.pi * np.arange(1, n_max + 1) / period
        rho = (_rho(slabs, k.astype(complex), i, j) / k[:, None, None]).real
        if len(_SPECTRA) >= _SPECTRA_MAX:
            _SPECTRA.clear()
        hit = _SPECTRA[key] = (k, rho, np.abs(rho).max(axis=0))
    return hit


#: Terms of one (p, q) below this share of the largest |rho / k| are left out (TAIL of the
#: kernel: the largest term stands for the first of a slowly decaying series).
TERM_CUT = 1e-3 * TAIL


def _terms_needed(k, rho_pq, alpha_min: float, scale: float) -> int:
    """How many leading k_n carry |rho_pq| exp(-k_n alpha_min) above TERM_CUT * scale."""
    big = np.nonzero(np.abs(rho_pq) * np.exp(-k * alpha_min) > TERM_CUT * scale)[0]
    return int(big[-1]) + 1 if big.size else 0


def _uniform(h: np.ndarray) -> bool:
    return bool(h.size) and bool(np.all(h == h[0]))


def _phase_factors(x: np.ndarray, period: float, n: int) -> np.ndarray:
    """cos(k_m x) and sin(k_m x) for m = 1..n as (X, 2, n): powers of exp(i 2 pi x / lam)
    by a running product (one complex exponential per point; the product's rounding grows
    like m eps, 1e-14 at m = 100, below the 1e-13 tails of the series)."""
    z = np.exp(2j * np.pi * np.asarray(x, dtype=float) / period)
    e = np.cumprod(np.broadcast_to(z[:, None], (len(z), n)), axis=1)
    return np.stack([e.real, e.imag], axis=1)


def _source_factors(memo, key, xs, period: float, n: int) -> np.ndarray:
    """``_phase_factors`` of the sources (S, 2, >= n), kept in ``memo`` under ``key`` when
    given (grown on demand)."""
    hit = None if memo is None else memo.get(key)
    if hit is None or hit.shape[2] < n:
        hit = _phase_factors(xs, period, n)
        if memo is not None:
            memo[key] = hit
    return hit


def _source_decay(memo, key, h, k, fs) -> np.ndarray:
    """exp(-k_m h) times the factors ``fs`` (S, 2, n), kept in ``memo``."""
    hit = None if memo is None else memo.get(key)
    n = fs.shape[2]
    if hit is None or hit.shape[2] < n:
        hit = fs * np.exp(-np.outer(h, k[:n]))[:, None, :]
        if memo is not None:
            memo[key] = hit
    return hit


def _cos_sum(ft: np.ndarray, fs: np.ndarray, coef: np.ndarray) -> np.ndarray:
    """sum_m coef_m cos(k_m (x_t - x'_s)) (T, S) (coef (m,) or (T, m)) from the factors
    (T, 2, >= m) and (S, 2, >= m): cos cos + sin sin as one real product."""
    m = coef.shape[-1]
    lhs = (ft[:, :, :m] * coef[..., None, :]).reshape(len(ft), 2 * m)
    rhs = fs[:, :, :m].reshape(len(fs), 2 * m)
    return lhs @ rhs.T


def periodic_remainder(
    slabs: Slabs, period: float, i: int, j: int, xt, zt, xs, zs, extracted, memo=None
) -> np.ndarray:
    """Remainder of the periodic kernel; ``extracted`` lists the (c, s, t0) terms taken out.

    (2/lam) sum_n sum_pq rho_pq(k_n) exp(-k_n (h_p + h'_q)) cos(k_n (x - x')) as real products
    of cos/sin factors; each (p, q) keeps the k_n whose term can exceed TAIL of the largest,
    and when every target and every source has one height the (p, q) sums collapse to one
    series in x - x'. ``memo``: a dict kept with one source set (the same ``xs``, ``zs`` on
    every call) for its cos/sin factors; targets at the sources' abscissae share them.
    """
    k, rho, peak = _periodic_spectrum(slabs, period, i, j)
    xt, xs = np.asarray(xt, dtype=float), np.asarray(xs, dtype=float)
    zt, zs = np.asarray(zt, dtype=float), np.asarray(zs, dtype=float)
    ht = slabs.heights(zt, np.full(len(zt), i))
    hs = slabs.heights(zs, np.full(len(zs), j))
    scale = float(peak.max()) if peak.size else 0.0
    pairs = []
    for p, q in _defined_pairs(ht, hs):
        if peak[p, q] == 0.0:
            continue
        m = _terms_needed(k, rho[:, p, q], ht[:, p].min() + hs[:, q].min(), scale)
        if m:
            pairs.append((p, q, m))
    level = _uniform(zt) and _uniform(zs)
    out = np.zeros((len(zt), len(zs)))
    if pairs:
        n = max(m for _, _, m in pairs)
        kn = k[:n]
        es = _source_factors(memo, float(period), xs, period, n)
        et = es if np.array_equal(xt, xs) else _phase_factors(xt, period, n)
        if level:
            c = np.zeros(n)
            for p, q, m in pairs:
                c[:m] += rho[:m, p, q] * np.exp(-kn[:m] * (ht[0, p] + hs[0, q]))
            out = _cos_sum(et, es, c)
        else:
            for p, q, m in pairs:
                u = np.exp(-np.outer(ht[:, p], kn[:m])) * rho[None, :m, p, q]
                vs = _source_decay(memo, (float(period), j, q), hs[:, q], k, es[:, :, :n])
                out += _cos_sum(et, vs, u)
    out *= 2.0 / period
    # The k = 0 mode and the extracted terms' linear parts: functions of z and z' only
    # (one value when every target and every source has one height).
    zt0, zs0 = (zt[:1], zs[:1]) if level and len(zt) and len(zs) else (zt, zs)
    g0 = slabs.zero_mode(zt0, zs0)
    for c0, s0, t0 in extracted:
        g0 += 0.5 * c0 * np.abs((t0 + s0 * zt0)[:, None] - zs0[None, :])
    return out + g0 / period


@numba.njit(cache=True)
def _ray_sums(xt, ht, xs, hs, kr, wr, rho, out):  # pragma: no cover - compiled
    n_rays = kr.shape[0]
    nq = kr.shape[1]
    for t in range(xt.shape[0]):
        for s in range(xs.shape[0]):
            dx = abs(xt[t] - xs[s])
            acc = 0.0
            for p in range(2):
                if not np.isfinite(ht[t, p]):
                    continue
                for q in range(2):
                    if not np.isfinite(hs[s, q]):
                        continue
                    alpha = ht[t, p] + hs[s, q]
                    phi = math.atan2(dx, alpha)
                    a = int(round(0.5 * phi / (0.25 * math.pi) * (n_rays - 1)))
                    w = complex(alpha, dx)
                    f = 0j
                    for m in range(nq):
                        f += wr[a, m] * rho[a, m, p, q] * np.exp(-kr[a, m] * w)
                    acc += f.real
            out[t, s] = acc


#: Chebyshev nodes per table panel (each panel spans 1 / per_unit of asinh(length / d_min)).
TABLE_NODES = 8
#: Interpolation error of a table with panels one unit of asinh wide, relative to the
#: largest |F_pq| (measured 2e-7; F is analytic for Re w > -2 d_min).
TABLE_ERROR = 2e-7
#: Distance in asinh(length / d_min) from a table's edge to F's nearest singularity.
SINGULAR_GAP = math.asinh(2.0)


def _ray_setup(slabs: Slabs, i: int, j: int, extent_m: float):
    """Rays (A, Q) complex nodes, weights (with 1/pi) and rho~ (A, Q, 2, 2); the far-field
    coefficients m0 - M_inf (less the pole's R / delta); L; the pole near k = 0 (delta, R) or
    None. Cached on ``slabs``."""
    cache = slabs.__dict__.setdefault("_spectra", {})
    key = ("open", extent_m, i, j)
    if key not in cache:
        cache[key] = _ray_setup_uncached(slabs, i, j, extent_m)
    return cache[key]


def _ray_setup_uncached(slabs: Slabs, i: int, j: int, extent_m: float):
    d_min = slabs.min_thickness_m
    fin = np.isfinite(slabs.thickness_m)
    big_l = float(slabs.thickness_m[fin].sum())
    d_big = extent_m + big_l
    first = min(0.05 / d_big, slabs.pole_distance_per_m)
    s, ws = octave_rule(first, 40.0 / (d_min * math.cos(math.pi / 4)))
    psi = 0.25 * math.pi * np.arange(RAYS) / (RAYS - 1)
    rot = np.exp(-1j * psi)
    kr = rot[:, None] * s[None, :]
    wr = (rot[:, None] * ws[None, :]) / math.pi
    kflat = kr.ravel()
    m0 = slabs.m_zero[j, i] - slabs.m_inf[j, i]
    rho = _rho(slabs, kflat, i, j)
    pole = slabs.near_pole(i, j)
    if pole is not None:
        # The pole's part R exp(-(k + delta) 2 L) / (k + delta) goes to a closed form (the
        # factor keeps the rest decaying like exp(-k 2 d_min) and leaves the residue as it
        # is); near k = 0 the rest comes from Cauchy's integral (the interface system is too
        # ill-conditioned there to subtract from).
        rho = rho - pole.residue[None] * _pole_part(kflat, pole.delta, 2 * big_l)
        inner = np.abs(kflat) <= 0.5 * pole.radius
        k_in = np.append(kflat[inner], 0.0)
        shift = 2 * big_l
        x = (k_in + pole.delta) * shift
        entire = (-np.expm1(-x) / x * shift)[:, None, None]  # (1 - e^-x) / (k + delta)
        rest = pole.regular_part(k_in) - slabs.m_inf[j, i][None] + pole.residue[None] * entire
        rho[inner] = rest[:-1]
        m0 = rest[-1].real
    rho = rho - m0[None] * np.exp(-kflat * big_l)[:, None, None]
    rho = (rho / kflat[:, None, None]).reshape(RAYS, len(s), 2, 2)
    return kr, wr, rho, m0, big_l, pole


def _pole_part(k: np.ndarray, delta: float, shift: float) -> np.ndarray:
    """exp(-(k + delta) shift) / (k + delta) (K, 1, 1)."""
    return (np.exp(-(k + delta) * shift) / (k + delta))[:, None, None]


def laplace_values(kr, wr, rho_pq, w: np.ndarray) -> np.ndarray:
    """F(w) (G,) for complex w with Re w >= 0, Im w >= 0, each on the ray psi = arg(w)/2."""
    n_rays = kr.shape[0]
    a = np.rint(0.5 * np.angle(w) / (0.25 * math.pi) * (n_rays - 1)).astype(int)
    a = np.clip(a, 0, n_rays - 1)
    return np.einsum("gq,gq->g", wr[a] * rho_pq[a], np.exp(-kr[a] * w[:, None]))


def _cheb(m: int) -> tuple[np.ndarray, np.ndarray]:
    k = np.arange(m)
    th = (2 * k + 1) * math.pi / (2 * m)
    return np.cos(th)[::-1].copy(), ((-1.0) ** k * np.sin(th))[::-1].copy()


@numba.njit(cache=True)
def _bary(x, nodes, lam, out):  # pragma: no cover - compiled
    m = nodes.shape[0]
    tot = 0.0
    for k in range(m):
        d = x - nodes[k]
        if d == 0.0:
            for q in range(m):
                out[q] = 0.0
            out[k] = 1.0
            return
        out[k] = lam[k] / d
        tot += out[k]
    for k in range(m):
        out[k] /= tot


@numba.njit(cache=True)
def _table_sums(at, as_, dx, table, ell, per_unit, nodes, lam, upper, out):  # pragma: no cover
    m = nodes.shape[0]
    nv = table.shape[0] // m
    nu = table.shape[1] // m
    bv = np.empty(m)
    bu = np.empty(m)
    for t in range(at.shape[0]):
        for s in range(t if upper else 0, as_.shape[0]):
            v = per_unit * math.asinh((at[t] + as_[s]) / ell)
            u = per_unit * math.asinh(abs(dx[t, s]) / ell)
            iv = min(int(v), nv - 1)
            iu = min(int(u), nu - 1)
            _bary(2.0 * (v - iv) - 1.0, nodes, lam, bv)
            _bary(2.0 * (u - iu) - 1.0, nodes, lam, bu)
            acc = 0.0
            for a in range(m):
                row = iv * m + a
                inner = 0.0
                for b in range(m):
                    inner += table[row, iu * m + b] * bu[b]
                acc += inner * bv[a]
            out[t, s] += acc


def _reciprocal(rho: np.ndarray) -> bool:
    """rho_01 == rho_10 on every ray node (then the remainder of a slab with itself is
    symmetric in target and source, as reciprocity demands)."""
    scale = float(np.abs(rho).max()) if rho.size else 0.0
    return bool(np.allclose(rho[..., 0, 1], rho[..., 1, 0], rtol=1e-10, atol=1e-13 * scale))


def cancellation(slabs: Slabs, i: int, j: int, m0: np.ndarray) -> float:
    """How far the (p, q) parts of the open remainder exceed the kernel they sum to (>= 1).

    Each F_pq carries about (m0_pq - M_inf_pq) / pi times a logarithm, while the kernel
    between slabs i and j scales like 1 / (eps_i + eps_j) (the direct and transmitted
    charges). Between a grounded plane and a much higher permittivity, or in a slab of much
    higher permittivity than both neighbours, the k -> 0 system is nearly singular and the
    m0_pq grow like the contrast while their sum stays finite."""
    eps = slabs.eps_F_per_m
    return max(1.0, float(np.abs(m0).max()) * (eps[i] + eps[j]))


def _ellipse_ratio(per_unit: int) -> float:
    """Bernstein ellipse ratio of a table panel 1 / per_unit wide whose nearest singularity
    (w = -2 d_min, at asinh(-2) in the panel's variable) lies SINGULAR_GAP beyond its end."""
    x = 1.0 + 2.0 * SINGULAR_GAP * per_unit
    return x + math.sqrt(x * x - 1.0)


def table_panels_per_unit(slabs: Slabs, i: int, j: int, m0: np.ndarray) -> int:
    """Table panels per unit of asinh(length / d_min), a power of 2: one at low contrast;
    where the (p, q) parts cancel, the fewest that keep the error against the kernel at the
    low-contrast TABLE_ERROR (Chebyshev interpolation error ~ ellipse ratio^-TABLE_NODES)."""
    kappa = cancellation(slabs, i, j, m0)
    per_unit = 1
    while per_unit < 64:
        gain = (_ellipse_ratio(1) / _ellipse_ratio(per_unit)) ** TABLE_NODES
        if gain * kappa <= 1.0:
            break
        per_unit *= 2
    return per_unit


def open_remainder(slabs: Slabs, i: int, j: int, xt, zt, xs, zs, extent_m: float) -> np.ndarray:
    """Remainder of the open (non-periodic) kernel for targets in slab i, sources in slab j.

    Re F_pq(alpha + i |dx|) is tabulated on panels of one unit in asinh(alpha / d_min) and
    asinh(|dx| / d_min) (``TABLE_NODES`` Chebyshev nodes each; F is analytic within about
    d_min of every real point, so each panel is well inside its domain of analyticity) and
    interpolated; tests compare with the direct ray sums. When the targets are the sources
    (a slab with itself, F_01 = F_10) only the upper triangle is interpolated and mirrored.
    """
    kr, wr, rho, m0, big_l, pole = _ray_setup(slabs, i, j, extent_m)
    ht = slabs.heights(zt, np.full(len(zt), i))
    hs = slabs.heights(zs, np.full(len(zs), j))
    xt, xs = np.asarray(xt, dtype=float), np.asarray(xs, dtype=float)
    upper = (
        i == j
        and np.array_equal(xt, xs)
        and np.array_equal(np.asarray(zt), np.asarray(zs))
        and _reciprocal(rho)
    )
    dx = xt[:, None] - xs[None, :]
    ell = slabs.min_thickness_m
    per_unit = table_panels_per_unit(slabs, i, j, m0)
    nodes, lam = _cheb(TABLE_NODES)
    out = np.zeros((len(xt), len(xs)))
    for p, q in _defined_pairs(ht, hs):
        if np.any(rho[:, :, p, q]):
            a_max = ht[:, p].max() + hs[:, q].max()
            nv = max(1, math.ceil(per_unit * math.asinh(a_max / ell)))
            nu = max(1, math.ceil(per_unit * math.asinh(np.abs(dx).max() / ell)))
            v = (np.arange(nv)[:, None] + 0.5 * (nodes[None, :] + 1.0)).ravel()
            u = (np.arange(nu)[:, None] + 0.5 * (nodes[None, :] + 1.0)).ravel()
            w = (ell * np.sinh(v / per_unit))[:, None] + 1j * (ell * np.sinh(u / per_unit))[None, :]
            table = laplace_values(kr, wr, rho[:, :, p, q], w.ravel()).real
            _table_sums(
                np.ascontiguousarray(ht[:, p]),
                np.ascontiguousarray(hs[:, q]),
                dx,
                table.reshape(nv * TABLE_NODES, nu * TABLE_NODES),
                ell,
                float(per_unit),
                nodes,
                lam,
                upper,
                out,
            )
    if upper:
        out = np.triu(out) + np.triu(out, 1).T
    _add_closed_forms(out, ht, hs, dx, m0, big_l, pole)
    return out


def _defined_pairs(ht: np.ndarray, hs: np.ndarray) -> list[tuple[int, int]]:
    """(p, q) of the target heights ``ht`` (T, 2) and source heights ``hs`` (S, 2) that are
    finite at every point (a half-space has only one bounded factor)."""
    ps = [p for p in range(2) if np.isfinite(ht[:, p]).all()]
    qs = [q for q in range(2) if np.isfinite(hs[:, q]).all()]
    return [(p, q) for p in ps for q in qs]


def _add_closed_forms(out, ht, hs, dx, m0, big_l: float, pole) -> None:
    """Add to ``out`` (T, S) the parts of the open remainder taken out of the ray integrals:
    the far field -(m0_pq / pi) ln|W + L| and the pole near k = 0,
    (R_pq exp(-2 delta L) / (pi delta)) Re(-ln(W + 2 L) - e^z E1(z)), z = delta (W + 2 L),
    W = alpha_pq + i |dx| (the constant gamma + ln(delta) summed over (p, q) first)."""
    if pole is not None:
        delta, res = pole.delta, pole.residue
        const = 0.0
    for p, q in _defined_pairs(ht, hs):
        al = ht[:, p][:, None] + hs[:, q][None, :]
        if m0[p, q] != 0.0:
            out -= (m0[p, q] / math.pi) * 0.5 * np.log(dx * dx + (al + big_l) ** 2)
        if pole is not None and res[p, q] != 0.0:
            c = res[p, q] * math.exp(-2 * delta * big_l) / delta
            const += c
            out += (c / math.pi) * pole_transform(delta, al + 2 * big_l + 1j * np.abs(dx))
    if pole is not None:
        out += (const / math.pi) * (np.euler_gamma + math.log(delta))


def pole_transform(delta: float, w: np.ndarray) -> np.ndarray:
    """Re of int_0^inf (1/k - 1/(k + delta)) exp(-k w) dk = Re(-ln w - e^z E1(z)), z = delta w,
    less its value gamma + ln(delta) at w = 0 (w (T, S) complex, Re w >= 0, in m; delta in
    1/m; the 1/k part in the far field's convention int exp(-k w) / k dk = -ln w). With
    e^z E1(z) = e^z (-gamma - ln z + Ein(z)) (Abramowitz & Stegun 5.1.11) it is
    (e^z - 1)(ln w + gamma + ln delta) - e^z Ein(z): of order delta |w| ln, so the (p, q)
    parts, whose coefficients R_pq / delta grow like the contrast, no longer cancel."""
    w = np.asarray(w, dtype=complex)
    z = delta * w
    em1 = np.expm1(z)
    with np.errstate(divide="ignore", invalid="ignore"):
        lw = np.where(w == 0, 0.0, np.log(np.where(w == 0, 1.0, w)))
    out = em1 * (lw + np.euler_gamma + math.log(delta)) - (em1 + 1.0) * _ein(z)
    return out.real


def _ein(z: np.ndarray) -> np.ndarray:
    """Ein(z) = sum_{n>=1} (-1)^(n+1) z^n / (n n!) (entire); the series for |z| <= 1, else
    E1(z) + ln z + gamma (scipy)."""
    small = np.abs(z) <= 1.0
    out = np.zeros_like(z)
    zs = z[small]
    if zs.size:
        top = float(np.abs(zs).max())
        n_terms = 1
        while top > 0 and top ** (n_terms + 1) / math.factorial(n_terms + 1) > 1e-17:
            n_terms += 1
        acc = np.zeros_like(zs)
        for n in range(n_terms, 0, -1):  # Horner in z
            acc = zs * ((-1.0) ** (n + 1) / (n * math.factorial(n)) + acc)
        out[small] = acc
    zb = z[~small]
    if zb.size:
        out[~small] = scipy.special.exp1(zb) + np.log(zb) + np.euler_gamma
    return out


def open_remainder_direct(slabs: Slabs, i: int, j: int, xt, zt, xs, zs, extent_m: float):
    """The same remainder by direct ray sums for every pair (slow; the tests' reference)."""
    kr, wr, rho, m0, big_l, pole = _ray_setup(slabs, i, j, extent_m)
    ht = slabs.heights(zt, np.full(len(zt), i))
    hs = slabs.heights(zs, np.full(len(zs), j))
    out = np.zeros((len(xt), len(xs)))
    _ray_sums(
        np.ascontiguousarray(xt, dtype=float),
        np.ascontiguousarray(ht),
        np.ascontiguousarray(xs, dtype=float),
        np.ascontiguousarray(hs),
        np.ascontiguousarray(kr),
        np.ascontiguousarray(wr),
        np.ascontiguousarray(rho),
        out,
    )
    dx = np.asarray(xt, dtype=float)[:, None] - np.asarray(xs, dtype=float)[None, :]
    _add_closed_forms(out, ht, hs, dx, m0, big_l, pole)
    return out

"""Green's function of a planar layer stack for the 3-D panel solver.

The potential of a unit point charge in the layered background (``Layout.layers`` with the
medium and an optional grounded plane z = 0, :class:`elopt.physics.media.LayerStack`) replaces
1 / (4 pi eps |x - x'|). Every operator here returns integrals in the homogeneous path's units
(:mod:`.operators`, :mod:`.evaluate`): the potential is the result divided by eps0 times the
medium's eps_r. Nothing is truncated.

*Two half-spaces* (one interface z_i, no ground plane): exact by one image with the static
coefficient (docs/references.md item 15, Jackson sec. 4.4). Sources and targets on the same
side s: (G + r_s G*) / e_s with r_s = (e_s - e_other) / (e_s + e_other), G* the source mirrored
in z_i; on opposite sides or on the interface: 2 G / (e_lo + e_hi). A panel lies on the side of
its centroid, so a body crossing the interface should have mesh edges along it.

*General stacks*: every conductor lies in one gap z_lo <= z <= z_hi (a layer, the medium between
layers, or above the ground plane; faces may be touched). Inside the gap (permittivity e_s)

    4 pi eps0 e_s phi = 1/R + r_lo / R_lo + r_hi / R_hi + sum_terms T(rho, a),

with the exact images in the faces (their static coefficients, -1 for the ground plane) and the
smooth spectral remainder of :mod:`elopt.physics.bem_axi.layered_kernel` (the same stack
recursion) split into separable terms c(k) e^{-k a(z, z')}, each tabulated by
:mod:`.layer_tables` and applied with one point per source panel (its centroid; the remainder is
smooth on the panel scale, checked against three points in the tests). Targets in the first
medium past either face take the transmitted form (exact part (1 + r_face) / R plus its own
tabulated terms). Targets further out are refused.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numba import njit, prange

from elopt.physics.bem3d import panel_integrals as pint
from elopt.physics.bem3d.layer_tables import (
    TABLE_REL_TOL,
    RemainderTable,
    SpectralTerm,
    build_table,
    hermite_uv,
)
from elopt.physics.bem_axi.layered_kernel import Gap, _exact_face, find_gap
from elopt.physics.errors import GeometryError, SolverError
from elopt.physics.media import LayerStack

FOUR_PI = 4.0 * math.pi
#: Quadrature points per source panel for the smooth remainder (1: the centroid).
REMAINDER_POINTS = 1
_BLOCK = 4096


@dataclass(frozen=True)
class Placement:
    """A term placed in (z, z'): a = alpha + st z + ss z', scaled by ``weight``."""

    term: SpectralTerm
    alpha: float
    st: float
    ss: float
    weight: float = 1.0


def _mirrored(corners: np.ndarray, centroids: np.ndarray, z0: float):
    c = corners.copy()
    c[..., 2] = 2.0 * z0 - c[..., 2]
    m = centroids.copy()
    m[:, 2] = 2.0 * z0 - m[:, 2]
    return np.ascontiguousarray(c), np.ascontiguousarray(m)


def _slab_length(stack: LayerStack, gap: Gap) -> float:
    """Shortest finite slab thickness of the stack (ground plane included) and the gap."""
    cuts = sorted({float(z) for z in stack.interfaces_m} | ({0.0} if stack.ground_plane else set()))
    lengths = [b - a for a, b in zip(cuts, cuts[1:], strict=False)]
    lengths.append(gap.z_hi - gap.z_lo)
    finite = [v for v in lengths if math.isfinite(v) and v > 0]
    return min(finite) if finite else math.inf


def _behind(gap: Gap, below: bool) -> float:
    """Thickness of the first medium past a face (inf for a half-space)."""
    return gap._beyond(below)[0][0][1]


def _nonzero(coef, length: float) -> bool:
    k = np.array([1e-3, 0.1, 0.5, 1.0, 2.0, 5.0]) / (length if math.isfinite(length) else 1.0)
    return bool(np.any(np.abs(coef(k)) > 0.0))


class LayeredBackground:
    """The layered Green's function of one stack, for panels whose heights span [z_min, z_max]."""

    def __init__(self, stack: LayerStack, z_min: float, z_max: float, size: float, what: str):
        self.stack = stack
        self.size = float(size)
        self.eps_medium = float(stack.medium_eps_r)
        self.table_rel_tol = TABLE_REL_TOL
        self.remainder_points = REMAINDER_POINTS
        ifaces = stack.interfaces_m
        if len(ifaces) == 1 and not stack.ground_plane:
            self.kind = "two_half_spaces"
            self.z_i = float(ifaces[0])
            self.e_lo = stack.eps_r_below(self.z_i)
            self.e_hi = stack.eps_r_above(self.z_i)
            self.gap = None
        else:
            self.kind = "gap"
            self.gap = find_gap(stack, z_min, z_max, what)
        self.tables: list[RemainderTable] = []

    # -- two half-spaces ---------------------------------------------------------------------
    def _side(self, z: np.ndarray) -> np.ndarray:
        tol = 1e-12 * self.size
        return np.where(z > self.z_i + tol, 1, np.where(z < self.z_i - tol, -1, 0))

    def _half_space_weights(self, st: int, ss: int) -> tuple[float, float]:
        """(direct, image) weights for target side st and source side ss, times eps_medium."""
        e_lo, e_hi = self.e_lo, self.e_hi
        if st == ss and st != 0:
            e_s, e_o = (e_hi, e_lo) if st > 0 else (e_lo, e_hi)
            return self.eps_medium / e_s, self.eps_medium * (e_s - e_o) / (e_s + e_o) / e_s
        return 2.0 * self.eps_medium / (e_lo + e_hi), 0.0

    # -- general stacks: spectral terms ------------------------------------------------------
    def _gap_terms(self) -> list[Placement]:
        gap = self.gap
        has_lo, has_hi = math.isfinite(gap.z_lo), math.isfinite(gap.z_hi)
        t = gap.z_hi - gap.z_lo
        length = _slab_length(self.stack, gap)
        out: list[Placement] = []

        def refl(k):
            gd = gap._side_reflection(k, True)
            gu = gap._side_reflection(k, False)
            return gd, gu

        if has_lo and has_hi:
            exact_lo, exact_hi = _exact_face(gap, True), _exact_face(gap, False)

            def den(k, gd, gu):
                return 1.0 - gu * gd * np.exp(-2.0 * k * t)

            def c_lo(k):
                (gd, r_lo), (gu, _) = refl(k)
                return gd / den(k, gd, gu) - r_lo

            def c_hi(k):
                (gd, _), (gu, r_hi) = refl(k)
                return gu / den(k, gd, gu) - r_hi

            def c_cross(k):
                (gd, _), (gu, _) = refl(k)
                return gu * gd * np.exp(-k * t) / den(k, gd, gu)

            def bound(kc):
                return 3.0 / (1.0 - math.exp(-2.0 * kc * t))

            d_lo = 2 * t if exact_lo else min(2 * _behind(gap, True), 2 * t)
            d_hi = 2 * t if exact_hi else min(2 * _behind(gap, False), 2 * t)
            lo = SpectralTerm(c_lo, d_lo, bound, length)
            hi = SpectralTerm(c_hi, d_hi, bound, length)
            cross = SpectralTerm(c_cross, t, bound, length)
            out += [Placement(lo, -2 * gap.z_lo, 1, 1), Placement(hi, 2 * gap.z_hi, -1, -1)]
            out += [Placement(cross, t, 1, -1), Placement(cross, t, -1, 1)]
        elif has_lo and not _exact_face(gap, True):
            term = SpectralTerm(
                lambda k: np.subtract(*gap._side_reflection(k, True)),
                2 * _behind(gap, True),
                2.0,
                length,
            )
            out.append(Placement(term, -2 * gap.z_lo, 1, 1))
        elif has_hi and not _exact_face(gap, False):
            term = SpectralTerm(
                lambda k: np.subtract(*gap._side_reflection(k, False)),
                2 * _behind(gap, False),
                2.0,
                length,
            )
            out.append(Placement(term, 2 * gap.z_hi, -1, -1))
        return [p for p in out if _nonzero(p.term.coef, length)]

    def _transmitted_terms(self, below: bool) -> tuple[float, list[Placement]]:
        """Exact coefficient (1 + r_face) and the remainder terms for targets past a face."""
        gap = self.gap
        face = gap.z_lo if below else gap.z_hi
        other = gap.z_hi if below else gap.z_lo
        d = _behind(gap, below)
        t = gap.z_hi - gap.z_lo
        both = math.isfinite(gap.z_lo) and math.isfinite(gap.z_hi)
        length = _slab_length(self.stack, gap)
        r_face = gap._reflections(np.array([1e300]), below)[2]

        def parts(k):
            gd = gap._reflections(k, True)[0]
            gu = gap._reflections(k, False)[0]
            gam, gam_in, _ = gap._reflections(k, below)
            e2d = np.exp(-2 * k * d) if math.isfinite(d) else np.zeros_like(k)
            c1 = (1 + gam) / (1 + gam_in * e2d)
            if both:
                et = np.exp(-k * t)
                dn = 1 - gu * gd * et * et
                far = c1 * (gu if below else gd) * et / dn
                return c1 / dn, far, gam_in
            return c1, np.zeros_like(k), gam_in

        def bound(kc):
            fd = 1.0 - math.exp(-2.0 * kc * d) if math.isfinite(d) else 1.0
            ft = 1.0 - math.exp(-2.0 * kc * t) if both else 1.0
            return 8.0 / (fd * ft)

        # w = distance of the target past the face; source distances to the near/far face.
        sw = -1.0 if below else 1.0  # w = sw (z - face)
        s_near = 1.0 if below else -1.0  # near distance = s_near (z' - face)
        s_far = -s_near  # far distance = s_far (z' - other)
        near_a = SpectralTerm(
            lambda k: parts(k)[0] - (1 + r_face), min(2 * d, 2 * t), bound, length
        )
        near_b = SpectralTerm(lambda k: parts(k)[0] * parts(k)[2], 0.0, bound, length)
        far_a = SpectralTerm(lambda k: parts(k)[1], t, bound, length)
        far_b = SpectralTerm(lambda k: parts(k)[1] * parts(k)[2], t, bound, length)
        dd = 2 * d if math.isfinite(d) else 0.0
        out = [
            # e^{-k w} e^{-k near}: a = sw (z - face) + s_near (z' - face)
            Placement(near_a, -(sw + s_near) * face, sw, s_near),
            # e^{-k (2d - w)} e^{-k near}
            Placement(near_b, dd + sw * face - s_near * face, -sw, s_near),
            Placement(far_a, -sw * face - s_far * other, sw, s_far),
            Placement(far_b, dd + sw * face - s_far * other, -sw, s_far),
        ]
        return 1.0 + r_face, [p for p in out if _nonzero(p.term.coef, length)]

    def _tables(self, placements, targets, sources) -> tuple[np.ndarray, np.ndarray]:
        """Tables (T, NU, NV, 4) and parameters (T, 11) covering every target-source pair."""
        lo = np.minimum(targets.min(axis=0), sources.min(axis=0))
        hi = np.maximum(targets.max(axis=0), sources.max(axis=0))
        rho_max = float(np.hypot(*(hi[:2] - lo[:2]))) * 1.001 + 1e-12 * self.size
        zt, zs = targets[:, 2], sources[:, 2]
        built: dict[int, RemainderTable] = {}
        ranges: dict[int, list[float]] = {}
        for p in placements:
            a_lo = (
                p.alpha
                + min(p.st * zt.min(), p.st * zt.max())
                + min(p.ss * zs.min(), p.ss * zs.max())
            )
            a_hi = (
                p.alpha
                + max(p.st * zt.min(), p.st * zt.max())
                + max(p.ss * zs.min(), p.ss * zs.max())
            )
            r = ranges.setdefault(id(p.term), [math.inf, -math.inf])
            r[0], r[1] = min(r[0], max(a_lo, 0.0)), max(r[1], max(a_hi, 0.0))
        lams = [r[0] + p.term.delta for p in placements for r in [ranges[id(p.term)]]]
        rho_scale = min(lams)
        for p in placements:
            if id(p.term) not in built:
                a_lo, a_hi = ranges[id(p.term)]
                built[id(p.term)] = build_table(
                    p.term, rho_max, a_lo, a_hi, self.size, self.table_rel_tol, rho_scale
                )
        self.tables = list(built.values())
        nu = max(t.values.shape[0] for t in self.tables)
        nv = max(t.values.shape[1] for t in self.tables)
        tabs = np.zeros((len(placements), nu, nv, 4))
        prm = np.zeros((len(placements), 11))
        for i, p in enumerate(placements):
            tb = built[id(p.term)]
            n1, n2 = tb.values.shape[:2]
            tabs[i, :n1, :n2] = tb.values
            floor = math.exp(tb.v0)
            prm[i] = (tb.lam, tb.delta, tb.hu, tb.v0, tb.hv, p.alpha, p.st, p.ss, n1, n2, floor)
        return tabs, prm

    # -- operators -----------------------------------------------------------------------------
    def dense_matrix(self, panels, targets: np.ndarray | None = None) -> np.ndarray:
        """(M, N) collocation matrix at ``targets`` (default: the centroids), in the units of
        :func:`elopt.physics.bem3d.operators.dense_matrix`."""
        corners, centroids, areas, diams = panels.kernel_arrays
        tgt = centroids if targets is None else np.ascontiguousarray(targets, float)
        rules = pint.rules()

        def plain(c, m):
            return pint.dense_potential_matrix(tgt, c, m, areas, diams, False, *rules)

        if self.kind == "two_half_spaces":
            direct = plain(corners, centroids)
            image = plain(*_mirrored(corners, centroids, self.z_i))
            st, ss = self._side(tgt[:, 2]), self._side(centroids[:, 2])
            wd = np.empty(direct.shape)
            wi = np.empty(direct.shape)
            for a in (-1, 0, 1):
                for b in (-1, 0, 1):
                    sel = np.ix_(st == a, ss == b)
                    wd[sel], wi[sel] = self._half_space_weights(a, b)
            return (direct * wd + image * wi) / FOUR_PI
        self._check_inside(tgt)
        out = plain(corners, centroids)
        for z0, coef in self.gap.images:
            out += coef * plain(*_mirrored(corners, centroids, z0))
        placements = self._gap_terms()
        if placements:
            src, owner, w = source_points(panels, self.remainder_points)
            tabs, prm = self._tables(placements, tgt, src)
            if targets is None and self.remainder_points == 1:
                out += remainder_collocation(centroids, areas, tabs, prm)
            else:
                out += remainder_dense(tgt, src, owner, w, panels.n, tabs, prm)
        return out * (self.eps_medium / self.gap.eps_r / FOUR_PI)

    def potential_and_gradient(
        self, panels, dens: np.ndarray, pts: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]:
        """Potential integrals (M, K) and gradients (M, 3, K) of densities (N, K) at points."""
        corners, centroids, areas, diams = panels.kernel_arrays
        out = np.zeros((len(pts), 4, dens.shape[1]))
        if self.kind == "two_half_spaces":
            st, ss = self._side(pts[:, 2]), self._side(centroids[:, 2])
            mirrored = _mirrored(corners, centroids, self.z_i)
            for b in (-1, 0, 1):
                cols = np.nonzero(ss == b)[0]
                if not len(cols):
                    continue
                d = _sums(pts, corners[cols], centroids[cols], areas[cols], diams[cols], dens[cols])
                m = _sums(
                    pts, mirrored[0][cols], mirrored[1][cols], areas[cols], diams[cols], dens[cols]
                )
                for a in (-1, 0, 1):
                    rows = st == a
                    wd, wi = self._half_space_weights(a, b)
                    out[rows] += wd * d[rows] + wi * m[rows]
            out /= FOUR_PI
            return out[:, 0], out[:, 1:]
        gap = self.gap
        kind = self._check_targets(pts)
        scale = self.eps_medium / gap.eps_r / FOUR_PI
        src, owner, w = source_points(panels, self.remainder_points)
        inside = np.nonzero(kind == 0)[0]
        if len(inside):
            p = pts[inside]
            acc = _sums(p, corners, centroids, areas, diams, dens)
            for z0, coef in gap.images:
                acc += coef * _sums(p, *_mirrored(corners, centroids, z0), areas, diams, dens)
            placements = self._gap_terms()
            if placements:
                tabs, prm = self._tables(placements, p, src)
                acc += remainder_sums(p, src, owner, w, dens, tabs, prm)
            out[inside] = acc * scale
        for side, below in ((-1, True), (1, False)):
            rows = np.nonzero(kind == side)[0]
            if not len(rows):
                continue
            p = pts[rows]
            exact, placements = self._transmitted_terms(below)
            acc = exact * _sums(p, corners, centroids, areas, diams, dens)
            if placements:
                tabs, prm = self._tables(placements, p, src)
                acc += remainder_sums(p, src, owner, w, dens, tabs, prm)
            out[rows] = acc * scale
        return out[:, 0], out[:, 1:]

    def eps_r_at(self, points: np.ndarray) -> np.ndarray:
        """Background permittivity (M,) at points (M, 3) (on an interface: the value above)."""
        return self.stack.eps_r_at(np.asarray(points)[:, 2])

    # -- target checks -------------------------------------------------------------------------
    def _check_inside(self, pts: np.ndarray) -> None:
        kind = self._check_targets(pts)
        if np.any(kind != 0):
            raise GeometryError(
                "layered kernel: collocation points must lie in the conductors' gap"
            )

    def _check_targets(self, pts: np.ndarray) -> np.ndarray:
        """(M,) 0 inside the gap, -1 / +1 in the first medium below / above it; others refused."""
        gap = self.gap
        z = pts[:, 2]
        tol = 1e-12 * self.size
        lo = gap.z_lo - (_behind(gap, True) if math.isfinite(gap.z_lo) else 0.0)
        hi = gap.z_hi + (_behind(gap, False) if math.isfinite(gap.z_hi) else 0.0)
        if self.stack.ground_plane and gap.z_lo == 0.0:
            lo = 0.0
        bad = (z < lo - tol) | (z > hi + tol)
        if np.any(bad):
            zb = float(z[np.argmax(bad)])
            raise GeometryError(
                f"point at z = {zb:.6g} m lies beyond the layers next to the conductors' gap "
                f"({lo:.6g} <= z <= {hi:.6g} m); fields in deeper layers are not available"
            )
        return np.where(z < gap.z_lo - tol, -1, np.where(z > gap.z_hi + tol, 1, 0))


def source_points(panels, n_points: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Quadrature points (P, 3), their panel (P,) and weights (P,) in m^2: 1 (centroid) or 3."""
    corners, centroids, areas, _ = panels.kernel_arrays
    if n_points == 1:
        return centroids, np.arange(panels.n), areas
    bary, wts = pint.RULE3_BARY, pint.RULE3_W
    pts = np.einsum("qa,nac->nqc", bary, corners).reshape(-1, 3)
    owner = np.repeat(np.arange(panels.n), len(wts))
    return np.ascontiguousarray(pts), owner, (areas[:, None] * wts[None, :]).ravel()


def _sums(pts, corners, centroids, areas, diams, dens) -> np.ndarray:
    out = np.empty((len(pts), 4, dens.shape[1]))
    c, m = np.ascontiguousarray(corners), np.ascontiguousarray(centroids)
    a, d = np.ascontiguousarray(areas), np.ascontiguousarray(diams)
    q = np.ascontiguousarray(dens)
    for s in range(0, len(pts), _BLOCK):
        out[s : s + _BLOCK] = pint.direct_sums(
            np.ascontiguousarray(pts[s : s + _BLOCK]), c, m, a, d, q, False, *pint.rules()
        )
    return out


@njit(cache=True, inline="always")
def _terms_at(tabs, prm, rho, zt, zs, buf, res) -> None:
    """res = (sum T, sum dT/drho, sum dT/dz) over the placed terms at one pair."""
    rs = prm[0, 0]
    u = math.asinh(rho / rs)
    f = 0.0
    fr = 0.0
    fz = 0.0
    for t in range(prm.shape[0]):
        ad = max(prm[t, 5] + prm[t, 6] * zt + prm[t, 7] * zs + prm[t, 1], prm[t, 10])
        hermite_uv(
            tabs[t],
            int(prm[t, 8]),
            int(prm[t, 9]),
            prm[t, 2],
            prm[t, 3],
            prm[t, 4],
            u,
            math.log(ad),
            buf,
        )
        f += buf[0]
        fr += buf[1]
        fz += buf[2] / ad * prm[t, 6]
    res[0] = f
    res[1] = fr / math.sqrt(rho * rho + rs * rs)
    res[2] = fz


@njit(cache=True, parallel=True)
def remainder_dense(targets, src, owner, w, n_panels, tabs, prm) -> np.ndarray:
    """(M, n_panels): sum over each panel's points of w T(rho, a), summed over the terms."""
    m = targets.shape[0]
    out = np.zeros((m, n_panels))
    for i in prange(m):
        buf = np.empty(3)
        res = np.empty(3)
        for p in range(src.shape[0]):
            dx = targets[i, 0] - src[p, 0]
            dy = targets[i, 1] - src[p, 1]
            _terms_at(tabs, prm, math.sqrt(dx * dx + dy * dy), targets[i, 2], src[p, 2], buf, res)
            out[i, owner[p]] += w[p] * res[0]
    return out


@njit(cache=True, parallel=True)
def remainder_collocation(points, w, tabs, prm) -> np.ndarray:
    """(N, N) of w_j T(x_i, x_j) at the centroids: the summed terms are symmetric in (z, z'),
    so each pair is evaluated once."""
    n = points.shape[0]
    out = np.empty((n, n))
    for i in prange(n):
        buf = np.empty(3)
        res = np.empty(3)
        for j in range(i, n):
            dx = points[i, 0] - points[j, 0]
            dy = points[i, 1] - points[j, 1]
            _terms_at(tabs, prm, math.sqrt(dx * dx + dy * dy), points[i, 2], points[j, 2], buf, res)
            out[i, j] = w[j] * res[0]
            out[j, i] = w[i] * res[0]
    return out


@njit(cache=True, parallel=True)
def remainder_sums(targets, src, owner, w, dens, tabs, prm) -> np.ndarray:
    """(M, 4, K): sum over source points of w dens T and its gradient in the target."""
    m = targets.shape[0]
    nk = dens.shape[1]
    out = np.zeros((m, 4, nk))
    for i in prange(m):
        buf = np.empty(3)
        res = np.empty(3)
        for p in range(src.shape[0]):
            dx = targets[i, 0] - src[p, 0]
            dy = targets[i, 1] - src[p, 1]
            rho = math.sqrt(dx * dx + dy * dy)
            _terms_at(tabs, prm, rho, targets[i, 2], src[p, 2], buf, res)
            gx = res[1] * dx / rho if rho > 0.0 else 0.0
            gy = res[1] * dy / rho if rho > 0.0 else 0.0
            for k in range(nk):
                q = w[p] * dens[owner[p], k]
                out[i, 0, k] += q * res[0]
                out[i, 1, k] += q * gx
                out[i, 2, k] += q * gy
                out[i, 3, k] += q * res[2]
    return out


def layered_background(layout, mesh) -> LayeredBackground | None:
    """The background of ``layout``'s layers for conductor panels ``mesh``; None when the
    layers change no permittivity (the homogeneous operators apply)."""
    if not layout.layers:
        return None
    stack = layout.layer_stack
    if len(stack.interfaces_m) == 0 and all(ly.eps_r == stack.medium_eps_r for ly in stack.layers):
        return None
    if len(stack.interfaces_m) == 0:
        return None
    if layout.applied_field_V_per_m != 0.0:
        raise GeometryError(
            "layout: an applied field with planar layers is not supported in 3-D (the "
            f"unperturbed field is not uniform), got applied_field_V_per_m = "
            f"{layout.applied_field_V_per_m:g}"
        )
    z = mesh.corners_m[..., 2]
    return LayeredBackground(
        stack, float(z.min()), float(z.max()), float(mesh.size_m), "conductors"
    )


def layered_method(method: str) -> str:
    """The solve method of a level with planar layers: dense (the hierarchical matrix does not
    take the layered kernel yet; large levels are refused by the memory estimate)."""
    if method == "fast":
        raise SolverError(
            "method='fast' does not take planar layers yet; use method='dense' or 'auto' "
            "(layered levels are solved densely, within the memory limit)"
        )
    return "dense"

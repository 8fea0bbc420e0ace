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
#: The remainder of a target-panel pair is integrated by the panel's centroid when its length
#: L = (rho^2 + min(a + delta)^2)^(1/2) is at least RULE_FACTORS[0] panel diameters, by the
#: 3-point rule when at least RULE_FACTORS[1], by the 7-point rule when at least
#: RULE_FACTORS[2], else by 7 points on sub-triangles no wider than the smallest L of the
#: tables. Measured on a board stack, relative to the pair's remainder: centroid about
#: 0.05 (h / L)^2 (2e-4 at L = 16 h), 3 points 0.002 (h / L)^4, 7 points under 1e-4 for
#: L >= h. The two sides of an interface integrate different remainders, so the discrete
#: fields are continuous across it to this accuracy (the kernel itself to the tables').
RULE_FACTORS = (16.0, 3.0, 1.0)
#: Most halvings of a panel for the sub-triangle rule.
MAX_SPLITS = 4
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


def _stack_span(stack: LayerStack, gap: Gap) -> float:
    """Twice the span of the finite heights (interfaces, ground plane, gap faces): the
    longest exponent length e^{-2 k d} of a reflection function has (inf: none)."""
    zs = [float(z) for z in stack.interfaces_m] + ([0.0] if stack.ground_plane else [])
    zs += [z for z in (gap.z_lo, gap.z_hi) if math.isfinite(z)]
    span = max(zs) - min(zs) if zs else 0.0
    return 2.0 * span if span > 0 else math.inf


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
        self.factors = RULE_FACTORS
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
        length = _stack_span(self.stack, gap)
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
        length = _stack_span(self.stack, gap)
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
            tabs, prm = self._tables(placements, tgt, corners.reshape(-1, 3))
            rules_ = source_rules(panels, float(np.min(prm[:, 10])))
            out += remainder_matrix(tgt, rules_, np.array(self.factors), tabs, prm)
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
        vertices = corners.reshape(-1, 3)
        inside = np.nonzero(kind == 0)[0]
        if len(inside):
            p = pts[inside]
            acc = _sums(p, corners, centroids, areas, diams, dens)
            for z0, coef in gap.images:
                acc += coef * _sums(p, *_mirrored(corners, centroids, z0), areas, diams, dens)
            placements = self._gap_terms()
            if placements:
                tabs, prm = self._tables(placements, p, vertices)
                rules_ = source_rules(panels, float(np.min(prm[:, 10])))
                acc += remainder_sums(p, rules_, np.array(self.factors), dens, tabs, prm)
            out[inside] = acc * scale
        for side, below in ((-1, True), (1, False)):
            rows = np.nonzero(kind == side)[0]
            if not len(rows):
                continue
            p = pts[rows]
            exact, placements = self._transmitted_terms(below)
            acc = exact * _sums(p, corners, centroids, areas, diams, dens)
            if placements:
                tabs, prm = self._tables(placements, p, vertices)
                rules_ = source_rules(panels, float(np.min(prm[:, 10])))
                acc += remainder_sums(p, rules_, np.array(self.factors), dens, tabs, prm)
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


def _split_bary(m: int) -> np.ndarray:
    """(4^m, 3, 3) barycentric corners of the m-fold midpoint subdivision of a triangle."""
    tris = [np.eye(3)]
    for _ in range(m):
        nxt = []
        for a, b, c in tris:
            ab, bc, ca = (a + b) / 2, (b + c) / 2, (c + a) / 2
            nxt += [np.array(t) for t in ((a, ab, ca), (ab, b, bc), (ca, bc, c), (ab, bc, ca))]
        tris = nxt
    return np.array(tris)


def source_rules(panels, l_min: float) -> tuple[np.ndarray, ...]:
    """Per panel: centroid (N, 3), area (N,), diameter (N,), then points (N, q, 3) and weights
    (N, q) in m^2 of the 3-point rule, the 7-point rule and the 7-point rule on sub-triangles
    no wider than l_min (at most :data:`MAX_SPLITS` halvings)."""
    corners, centroids, areas, diams = panels.kernel_arrays
    p3 = np.einsum("qa,nac->nqc", pint.RULE3_BARY, corners)
    w3 = areas[:, None] * pint.RULE3_W[None, :]
    p7 = np.einsum("qa,nac->nqc", pint.RULE7_BARY, corners)
    w7 = areas[:, None] * pint.RULE7_W[None, :]
    m = min(MAX_SPLITS, max(0, math.ceil(math.log2(max(float(diams.max()) / l_min, 1.0)))))
    sub = _split_bary(m)
    bary = np.einsum("qa,sab->sqb", pint.RULE7_BARY, sub).reshape(-1, 3)
    wf = np.tile(pint.RULE7_W, len(sub)) / len(sub)
    pf = np.einsum("qa,nac->nqc", bary, corners)
    return (
        centroids,
        areas,
        diams,
        np.ascontiguousarray(p3),
        np.ascontiguousarray(w3),
        np.ascontiguousarray(p7),
        np.ascontiguousarray(w7),
        np.ascontiguousarray(pf),
        np.ascontiguousarray(areas[:, None] * wf[None, :]),
    )


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


@njit(cache=True, inline="always")
def _add_point(tx, ty, tz, sx, sy, sz, w, tabs, prm, buf, res, acc) -> None:
    dx = tx - sx
    dy = ty - sy
    rho = math.sqrt(dx * dx + dy * dy)
    _terms_at(tabs, prm, rho, tz, sz, buf, res)
    acc[0] += w * res[0]
    if rho > 0.0:
        acc[1] += w * res[1] * dx / rho
        acc[2] += w * res[1] * dy / rho
    acc[3] += w * res[2]


@njit(cache=True)
def _panel(t, j, rules, factors, tabs, prm, buf, res, acc) -> None:
    """acc = remainder (value, gradient) at target t of panel j, rule chosen by the length."""
    cen, area, diam, p3, w3, p7, w7, pf, wf = rules
    for c in range(4):
        acc[c] = 0.0
    dx = t[0] - cen[j, 0]
    dy = t[1] - cen[j, 1]
    amin = np.inf
    for k in range(prm.shape[0]):
        amin = min(amin, prm[k, 5] + prm[k, 6] * t[2] + prm[k, 7] * cen[j, 2] + prm[k, 1])
    length = math.sqrt(dx * dx + dy * dy + amin * amin)
    if length >= factors[0] * diam[j]:
        c = cen[j]
        _add_point(t[0], t[1], t[2], c[0], c[1], c[2], area[j], tabs, prm, buf, res, acc)
        return
    if length >= factors[1] * diam[j]:
        pts, wts = p3, w3
    elif length >= factors[2] * diam[j]:
        pts, wts = p7, w7
    else:
        pts, wts = pf, wf
    for q in range(pts.shape[1]):
        s = pts[j, q]
        _add_point(t[0], t[1], t[2], s[0], s[1], s[2], wts[j, q], tabs, prm, buf, res, acc)


@njit(cache=True, parallel=True)
def remainder_matrix(targets, rules, factors, tabs, prm) -> np.ndarray:
    """(M, N): the remainder integrated over every panel at every target (``rules`` from
    :func:`source_rules`, ``factors`` :data:`RULE_FACTORS`)."""
    m = targets.shape[0]
    n = rules[0].shape[0]
    out = np.empty((m, n))
    for i in prange(m):
        buf = np.empty(3)
        res = np.empty(3)
        acc = np.empty(4)
        for j in range(n):
            _panel(targets[i], j, rules, factors, tabs, prm, buf, res, acc)
            out[i, j] = acc[0]
    return out


@njit(cache=True, parallel=True)
def remainder_sums(targets, rules, factors, dens, tabs, prm) -> np.ndarray:
    """(M, 4, K): sum over panels of dens times the remainder and its gradient at targets."""
    m = targets.shape[0]
    n = rules[0].shape[0]
    nk = dens.shape[1]
    out = np.zeros((m, 4, nk))
    for i in prange(m):
        buf = np.empty(3)
        res = np.empty(3)
        acc = np.empty(4)
        for j in range(n):
            _panel(targets[i], j, rules, factors, tabs, prm, buf, res, acc)
            for c in range(4):
                for k in range(nk):
                    out[i, c, k] += dens[j, k] * acc[c]
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

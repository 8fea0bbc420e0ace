"""Green's function of a planar layer stack for the 3-D panel solver.

The potential of a unit point charge in the layered background (``Layout.layers`` with the
medium and an optional grounded plane z = 0, :class:`elopt.physics.media.LayerStack`) replaces
1 / (4 pi eps |x - x'|). Every operator here returns integrals in the homogeneous path's units
(:mod:`.operators`, :mod:`.evaluate`): the potential is the result divided by eps0 times the
medium's eps_r. Nothing is truncated beyond the proven 1e-13 Hankel tails.

*Two half-spaces* (one interface z_i, no ground plane): exact by one image with the static
coefficient (docs/references.md item 15, Jackson sec. 4.4). Sources and targets on the same
side s: (G + r_s G*) / e_s with r_s = (e_s - e_other) / (e_s + e_other), G* the source mirrored
in z_i; on opposite sides or on the interface: 2 G / (e_lo + e_hi). A panel lies on the side of
its centroid, so a body crossing the interface should have mesh edges along it.

*General stacks*: every conductor lies in one slab of :class:`elopt.physics.layer_spectrum.
StackSpectrum` (a layer, the medium between layers, or above the ground plane; its faces may be
touched). For targets in any slab t, the shared spectrum gives separable terms
coef(k) e^{-k a(z, z')}; each term's limit coef(inf) is an exact image, limit / |x - x*| with the
source panel mapped to z* = t_ref - t_sign s_sign (z' - s_ref) (a mirror in a slab face, or
the source itself for the direct and the transmitted terms), integrated over the panel by the
closed-form / Gauss rules of :mod:`.panel_integrals`. The smooth remainder coef - limit is
tabulated in (rho, a) by :mod:`.layer_tables` and integrated over each panel by a rule chosen
from its length (:data:`RULE_FACTORS`). Panels lying flat at one height (copper on a board
face) take the tables collapsed per target to 1-D patches in rho (:func:`_collapse`); the
tables are kept across levels and solves of one stack (``layer_tables.TABLE_CACHE``).

*Mirror symmetry*: the kernel depends on the horizontal distance and the two heights only, so
a level symmetric in x = 0 and / or y = 0 is solved on one panel per orbit
(:mod:`.symmetry`), its rows assembled by :meth:`LayeredBackground.dense_matrix` a block at a
time, and fields at symmetric points of symmetric densities are computed once per orbit.

*Dielectric bodies* (:mod:`.bodies`) lie strictly inside one slab (or one half-space). Their
rows (:meth:`LayeredBackground.dense_matrix`) are the normal derivative of the same kernel:
the images' gradients by the homogeneous path's principal-value rules, the remainder's from
the tables' derivatives, all times the permittivity of the body's slab.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import partial

import numpy as np
from numba import njit, prange

from elopt.physics.bem3d import panel_integrals as pint
from elopt.physics.bem3d.layer_tables import (
    TABLE_CACHE,
    TABLE_REL_TOL,
    RemainderTable,
    SpectralTerm,
    TableRange,
    build_tables,
    hermite_uv,
    hermite_value,
)
from elopt.physics.errors import GeometryError, SolverError
from elopt.physics.kernel_cache import drop_stale_kernel_caches
from elopt.physics.layer_spectrum import StackSpectrum
from elopt.physics.media import LayerStack

drop_stale_kernel_caches()

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
    """A remainder term placed in (z, z'): a = alpha + st z + ss z'."""

    term: SpectralTerm
    alpha: float
    st: float
    ss: float


@dataclass(frozen=True)
class Image:
    """An exact image: ``limit`` / |x - x*| with the source's height mapped to c0 + m z'."""

    limit: float
    c0: float
    m: float


@dataclass(frozen=True)
class _Part:
    """Some panels: corners (N, 3, 3), centroids (N, 3), areas (N,), diameters (N,)."""

    corners: np.ndarray
    centroids: np.ndarray
    areas: np.ndarray
    diams: np.ndarray

    def __post_init__(self) -> None:
        for name in ("corners", "centroids", "areas", "diams"):
            object.__setattr__(self, name, np.ascontiguousarray(getattr(self, name)))


def _mapped(corners: np.ndarray, centroids: np.ndarray, c0: float, m: float):
    """Corners and centroids with z -> c0 + m z (m = -1: a mirror, +1 with c0 = 0: itself)."""
    if m == 1.0 and c0 == 0.0:
        return corners, centroids
    c = corners.copy()
    c[..., 2] = c0 + m * c[..., 2]
    g = centroids.copy()
    g[:, 2] = c0 + m * g[:, 2]
    return np.ascontiguousarray(c), np.ascontiguousarray(g)


def _distinct_images(images: list[Image], part: _Part) -> list[tuple[float, tuple]]:
    """(summed limit, (corners, centroids)) per distinct image geometry: a panel lying in a
    mirror plane is its own image, so its integrals are computed once."""
    out: list[tuple[float, tuple]] = []
    for img in images:
        geom = _mapped(part.corners, part.centroids, img.c0, img.m)
        for i, (coef, other) in enumerate(out):
            if np.array_equal(other[0], geom[0]):
                out[i] = (coef + img.limit, other)
                break
        else:
            out.append((img.limit, geom))
    return out


def _remainder_coef(spec: StackSpectrum, t: int, s: int, idx: int, k: np.ndarray) -> np.ndarray:
    term = spec.terms(t, s, k)[idx]
    return term.coef - term.limit


def _remainder_bound(spec: StackSpectrum, t: int, s: int, idx: int, k_cut: float) -> float:
    return spec.terms(t, s, np.array([k_cut]), k_cut)[idx].bound


def _exponent_span(spec: StackSpectrum) -> float:
    """Twice the span of the finite slab bounds: the longest exponent length e^{-2 k d} of a
    reflection function (inf: none). The k-panels resolve it (see :mod:`.layer_tables`)."""
    zs = [v for sl in spec.slabs for v in (sl.z_lo, sl.z_hi) if math.isfinite(v)]
    span = max(zs) - min(zs) if zs else 0.0
    return 2.0 * span if span > 0 else math.inf


class LayeredBackground:
    """The layered Green's function of one stack for the panels of some conductors.

    ``conductor_heights``: per conductor (z_min, z_max, name); in a general stack each
    conductor lies in one slab (conductors may lie in different slabs). ``body_heights``: the
    same per dielectric body; a body lies strictly inside one slab (it touches no layer face),
    so the medium just outside its surface is that slab's (or an enclosing body's).
    """

    def __init__(
        self,
        stack: LayerStack,
        conductor_heights: list[tuple[float, float, str]],
        size: float,
        body_heights: list[tuple[float, float, str]] = (),
    ):
        self.stack = stack
        self.size = float(size)
        self.eps_medium = float(stack.medium_eps_r)
        self.table_rel_tol = TABLE_REL_TOL
        self.factors = RULE_FACTORS
        self.tables: list[RemainderTable] = []
        ifaces = stack.interfaces_m
        if len(ifaces) == 1 and not stack.ground_plane:
            self.kind = "two_half_spaces"
            self.z_i = float(ifaces[0])
            self.e_lo = stack.eps_r_below(self.z_i)
            self.e_hi = stack.eps_r_above(self.z_i)
            self.conductor_eps = np.array(
                [self._half_space_eps(lo, hi) for lo, hi, _ in conductor_heights]
            )
            self.body_slab = np.array(
                [self._body_side(lo, hi, n) for lo, hi, n in body_heights], dtype=int
            )
            self.body_eps = np.where(self.body_slab > 0, self.e_hi, self.e_lo)
        else:
            self.kind = "stack"
            self.spectrum = StackSpectrum(stack)
            self.conductor_slab = np.array(
                [
                    self._find_source_slab(lo, hi, f"conductor '{n}'")
                    for lo, hi, n in conductor_heights
                ],
                dtype=int,
            )
            self.body_slab = np.array(
                [self._body_slab(lo, hi, n) for lo, hi, n in body_heights], dtype=int
            )
            eps = np.array([sl.eps_r for sl in self.spectrum.slabs])
            self.conductor_eps = eps[self.conductor_slab]
            self.body_eps = eps[self.body_slab]

    def source_slabs(self, panels) -> np.ndarray:
        """(N,) slab of each panel (its conductor's or body's; in two half-spaces the side)."""
        owner, region = panels.owner, panels.region
        if self.kind == "two_half_spaces":
            return self._side(panels.mesh.centroids_m[:, 2])
        cond = self.conductor_slab[np.maximum(owner, 0)] if len(self.conductor_slab) else 0
        body = self.body_slab[np.maximum(region, 0)] if len(self.body_slab) else 0
        return np.where(owner >= 0, cond, body)

    def _refuse_body(self, what: str, z_min: float, z_max: float, face: float) -> None:
        raise GeometryError(
            f"{what}: spans heights {z_min:.6g} .. {z_max:.6g} m and reaches the layer face at "
            f"z = {face:.6g} m; a dielectric body must lie strictly inside one slab between "
            "layer interfaces (apart from its faces)"
        )

    def _body_slab(self, z_min: float, z_max: float, what: str) -> int:
        """The slab holding a body strictly inside it."""
        tol = 1e-9 * self.size
        s = int(self.spectrum.slab_of(np.array([0.5 * (z_min + z_max)]))[0])
        slab = self.spectrum.slabs[max(s, 0)]
        lo_ok = z_min > slab.z_lo + tol or (slab.z_lo == 0.0 and self.stack.ground_plane)
        if s < 0 or not lo_ok:
            self._refuse_body(what, z_min, z_max, slab.z_lo)
        if z_max >= slab.z_hi - tol:
            self._refuse_body(what, z_min, z_max, slab.z_hi)
        return s

    def _body_side(self, z_min: float, z_max: float, what: str) -> int:
        tol = 1e-9 * self.size
        if z_min > self.z_i + tol:
            return 1
        if z_max < self.z_i - tol:
            return -1
        self._refuse_body(what, z_min, z_max, self.z_i)
        return 0

    def _half_space_eps(self, z_min: float, z_max: float) -> float:
        """The permittivity around a conductor in two half-spaces (its mid-height's side)."""
        return self.e_hi if 0.5 * (z_min + z_max) >= self.z_i else self.e_lo

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

    # -- general stacks ------------------------------------------------------------------------
    def _find_source_slab(self, z_min: float, z_max: float, what: str) -> int:
        """The slab holding every source height (on an interface only: the slab above)."""
        tol = 1e-12 * self.size
        mid = z_min if z_max - z_min <= tol else 0.5 * (z_min + z_max)
        s = int(self.spectrum.slab_of(np.array([mid]))[0])
        slab = self.spectrum.slabs[max(s, 0)]
        if s < 0 or z_min < slab.z_lo - tol or z_max > slab.z_hi + tol:
            face = slab.z_lo if (s < 0 or z_min < slab.z_lo - tol) else slab.z_hi
            raise GeometryError(
                f"{what}: span heights {z_min:.6g} .. {z_max:.6g} m across the layer interface "
                f"at z = {face:.6g} m; every conductor must lie in one slab between layer "
                "interfaces (it may rest on a face, or straddle the single interface of two "
                "half-spaces)"
            )
        return s

    def target_slabs(self, pts: np.ndarray) -> np.ndarray:
        """Slab (M,) of each target (on an interface: the slab above); points below a grounded
        plane are refused."""
        z = pts[:, 2]
        out = self.spectrum.slab_of(z)
        if np.any(out < 0):
            zb = float(z[np.argmax(out < 0)])
            raise GeometryError(f"point at z = {zb:.6g} m lies below the grounded plane z = 0")
        return out

    def slab_terms(self, target: int, s: int) -> tuple[list[Image], list[Placement]]:
        """Exact images and remainder placements for targets in slab ``target``, sources in
        slab ``s``."""
        spec = self.spectrum
        images: list[Image] = []
        placements: list[Placement] = []
        length = _exponent_span(spec)
        for idx, term in enumerate(spec.terms(target, s, np.array([1.0]), 1.0)):
            if term.direct:
                images.append(Image(term.limit, 0.0, 1.0))
                continue
            m = -float(term.t_sign * term.s_sign)
            if term.limit != 0.0:
                c0 = term.t_ref + term.t_sign * term.s_sign * term.s_ref
                images.append(Image(term.limit, float(c0), m))
            if term.bound > 0.0 and math.isfinite(term.decay):
                st = SpectralTerm(
                    partial(_remainder_coef, spec, target, s, idx),
                    float(term.decay),
                    partial(_remainder_bound, spec, target, s, idx),
                    length,
                    spec.pole_distance,
                )
                alpha = -term.t_sign * term.t_ref - term.s_sign * term.s_ref
                placements.append(Placement(st, float(alpha), term.t_sign, term.s_sign))
        return images, placements

    def _tables(
        self, placements, targets, sources, t: int | None = None, s: int | None = None
    ) -> tuple[np.ndarray, np.ndarray]:
        """Tables (T, NU, NV, 4) and parameters (T, 11) covering every target-source pair
        (targets in slab t, sources in slab s), from :data:`layer_tables.TABLE_CACHE` when a
        kept group covers them (levels and companion solves on one stack share them; without
        the slabs t and s they are built afresh)."""
        lo = np.minimum(targets.min(axis=0), sources.min(axis=0))
        hi = np.maximum(targets.max(axis=0), sources.max(axis=0))
        rho_max = float(np.hypot(*(hi[:2] - lo[:2]))) * 1.001 + 1e-12 * self.size
        zt, zs = targets[:, 2], sources[:, 2]
        ranges = []
        for p in placements:
            at = (p.st * zt.min(), p.st * zt.max())
            as_ = (p.ss * zs.min(), p.ss * zs.max())
            a_lo = max(p.alpha + min(at) + min(as_), 0.0)
            a_hi = max(p.alpha + max(at) + max(as_), 0.0)
            ranges.append((a_lo, a_hi))
        want = TableRange(rho_max, tuple(ranges), self.size, self.table_rel_tol)
        terms = [p.term for p in placements]
        if t is None or s is None:
            built = build_tables(terms, want)
        else:
            built = TABLE_CACHE.tables((self.stack, t, s), terms, want)
        self.tables = built
        nu = max(t.values.shape[0] for t in built)
        nv = max(t.values.shape[1] for t in built)
        tabs = np.zeros((len(placements), nu, nv, 4))
        prm = np.zeros((len(placements), 11))
        for i, (p, tb) in enumerate(zip(placements, built, strict=True)):
            n1, n2 = tb.values.shape[:2]
            tabs[i, :n1, :n2] = tb.values
            floor = math.exp(tb.v0)
            prm[i] = (tb.lam, tb.delta, tb.hu, tb.v0, tb.hv, p.alpha, p.st, p.ss, n1, n2, floor)
        return tabs, prm

    # -- operators -----------------------------------------------------------------------------
    def dense_matrix(self, panels, rows: np.ndarray | None = None) -> np.ndarray:
        """(N, N) rows at the centroids, in the units of
        :func:`elopt.physics.bem3d.operators.dense_matrix`: the single layer S on conductor
        rows; on interface rows the normal derivative K of the layered kernel times the
        permittivity of the body's slab (its direct part the homogeneous K, so the jump of a
        sheet is sigma there), without the identity, the contrast or Gauss's diagonal.

        ``rows`` (M,): only these panels' rows, (M, N); the remainder tables are those of the
        whole level's targets, so the rows equal those of the full matrix bit for bit.
        """
        corners, centroids, areas, diams = panels.kernel_arrays
        nc = panels.n_conductor_panels
        normals = panels.mesh.normals
        rules = pint.rules()
        sel = np.arange(panels.n) if rows is None else np.asarray(rows, dtype=np.int64)
        out = np.empty((len(sel), panels.n))
        if self.kind == "two_half_spaces":
            st, ss = self._side(centroids[sel, 2]), self._side(centroids[:, 2])
            mirrored = _mapped(corners, centroids, 2.0 * self.z_i, -1.0)
            parts = ((corners, centroids), mirrored)
            for pos, kind in ((np.nonzero(sel < nc)[0], "S"), (np.nonzero(sel >= nc)[0], "K")):
                if not len(pos):
                    continue
                r = sel[pos]
                tgt = np.ascontiguousarray(centroids[r])
                if kind == "S":
                    d, m = (
                        pint.dense_potential_matrix(tgt, c, g, areas, diams, False, *rules)
                        for c, g in parts
                    )
                else:
                    d, m = (
                        gradient_matrix(tgt, normals[r], c, g, areas, diams) * FOUR_PI
                        for c, g in parts
                    )
                block = np.empty(d.shape)
                for a in (-1, 0, 1):
                    for b in (-1, 0, 1):
                        cells = np.ix_(st[pos] == a, ss == b)
                        wd, wi = self._half_space_weights(a, b)
                        if kind == "K":
                            scale = (self.e_hi if a > 0 else self.e_lo) / self.eps_medium
                            wd, wi = wd * scale, wi * scale
                        block[cells] = d[cells] * wd + m[cells] * wi
                out[pos] = block / FOUR_PI
            return out
        slabs = self.source_slabs(panels)
        eps = np.array([sl.eps_r for sl in self.spectrum.slabs])
        for pos, cols, tgt, part, t, s in self._slab_pairs(panels, centroids[sel], slabs[sel]):
            span = centroids[slabs == t]
            pot = sel[pos] < nc
            if np.any(pot):
                block = self._block(tgt[pot], part, t, s, None, span=span)[:, 0]
                out[np.ix_(pos[pot], cols)] = block * (self.eps_medium / FOUR_PI)
            if not np.all(pot):
                r = sel[pos[~pot]]
                block = self._block(tgt[~pot], part, t, s, None, normals[r], span=span)[:, 0]
                out[np.ix_(pos[~pot], cols)] = block * (eps[t] / FOUR_PI)
        return out

    def _slab_pairs(self, panels, pts: np.ndarray, slabs: np.ndarray):
        """(rows, cols, targets, panels part, target slab, source slab) for every pair of a
        slab holding targets (``slabs`` (M,) of ``pts``) and one holding sources."""
        corners, centroids, areas, diams = panels.kernel_arrays
        src = self.source_slabs(panels)
        for t in np.unique(slabs):
            rows = np.nonzero(slabs == t)[0]
            tgt = np.ascontiguousarray(pts[rows])
            for s in np.unique(src):
                cols = np.nonzero(src == s)[0]
                part = _Part(corners[cols], centroids[cols], areas[cols], diams[cols])
                yield rows, cols, tgt, part, int(t), int(s)

    def _block(
        self,
        tgt: np.ndarray,
        part: _Part,
        t: int,
        s: int,
        dens: np.ndarray | None,
        dirs: np.ndarray | None = None,
        span: np.ndarray | None = None,
    ):
        """Targets (M, 3) in slab t, panels ``part`` in slab s: the matrix (M, 1, N) of
        potential integrals (with ``dirs`` (M, 3): of their derivatives along dirs), or with
        ``dens`` (N, K) the sums (M, 4, K). The remainder tables cover the targets ``span``
        (default ``tgt``)."""
        images, placements = self.slab_terms(t, s)
        rules = pint.rules()
        n = len(part.areas)
        acc = np.zeros((len(tgt), 1, n) if dens is None else (len(tgt), 4, dens.shape[1]))
        for coef, (c, m) in _distinct_images(images, part):
            if dens is None and dirs is None:
                v = pint.dense_potential_matrix(tgt, c, m, part.areas, part.diams, False, *rules)
                v = v[:, None, :]
            elif dens is None:
                v = gradient_matrix(tgt, dirs, c, m, part.areas, part.diams)[:, None, :]
                v *= FOUR_PI
            else:
                v = _sums(tgt, c, m, part.areas, part.diams, dens)
            v *= coef
            acc += v
        if placements:
            span = tgt if span is None else span
            tabs, prm = self._tables(placements, span, part.corners.reshape(-1, 3), t, s)
            rules_ = source_rules(part, float(np.min(prm[:, 10])))
            factors = np.array(self.factors)
            if dens is None:
                flat = dirs is None and _one_height(part.corners)
                rem = remainder_matrix(tgt, rules_, factors, tabs, prm, dirs, flat=flat)
                acc += rem[:, None, :]
            else:
                acc += remainder_sums(tgt, rules_, factors, dens, tabs, prm)
        return acc

    def potential_and_gradient(
        self, panels, dens: np.ndarray, pts: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]:
        """Potential integrals (M, K) and gradients (M, 3, K) of densities (N, K) at points.

        When the panels, the densities and the points are mirror symmetric (the field
        samples of a symmetric solve), the points of one orbit are computed once and the
        others take their mirrored values (the kernel keeps the mirrors)."""
        orbits = symmetric_points(panels, dens, pts)
        if orbits is None:
            return self._potential_and_gradient(panels, dens, pts)
        pot_r, grad_r = self._potential_and_gradient(panels, dens, pts[orbits.reps], pts)
        pot = np.empty((len(pts), dens.shape[1]))
        grad = np.empty((len(pts), 3, dens.shape[1]))
        for img, flip in zip(orbits.images, mirror_signs(orbits.planes), strict=True):
            idx = img[orbits.reps]
            pot[idx] = pot_r
            grad[idx] = grad_r * flip[None, :, None]
        return pot, grad

    def _potential_and_gradient(
        self, panels, dens: np.ndarray, pts: np.ndarray, span: np.ndarray | None = None
    ) -> tuple[np.ndarray, np.ndarray]:
        """As :meth:`potential_and_gradient` on every point; the remainder tables cover the
        points ``span`` (default ``pts``)."""
        corners, centroids, areas, diams = panels.kernel_arrays
        out = np.zeros((len(pts), 4, dens.shape[1]))
        if self.kind == "two_half_spaces":
            st, ss = self._side(pts[:, 2]), self._side(centroids[:, 2])
            mirrored = _mapped(corners, centroids, 2.0 * self.z_i, -1.0)
            for b in (-1, 0, 1):
                cols = np.nonzero(ss == b)[0]
                if not len(cols):
                    continue
                a_, d_ = areas[cols], diams[cols]
                d = _sums(pts, corners[cols], centroids[cols], a_, d_, dens[cols])
                m = _sums(pts, mirrored[0][cols], mirrored[1][cols], a_, d_, dens[cols])
                for a in (-1, 0, 1):
                    rows = st == a
                    wd, wi = self._half_space_weights(a, b)
                    out[rows] += wd * d[rows] + wi * m[rows]
            out /= FOUR_PI
            return out[:, 0], out[:, 1:]
        span_slabs = None if span is None else self.target_slabs(span)
        for rows, cols, tgt, part, t, s in self._slab_pairs(panels, pts, self.target_slabs(pts)):
            sp = None if span is None else span[span_slabs == t]
            out[rows] += self._block(tgt, part, t, s, np.ascontiguousarray(dens[cols]), span=sp)
        out *= self.eps_medium / FOUR_PI
        return out[:, 0], out[:, 1:]

    def eps_r_at(self, points: np.ndarray) -> np.ndarray:
        """Background permittivity (M,) at points (M, 3) (on an interface: the value above)."""
        return self.stack.eps_r_at(np.asarray(points)[:, 2])


def mirror_signs(planes: tuple[str, ...]) -> list[np.ndarray]:
    """Gradient signs (3,) per group element, in the order of
    :attr:`elopt.physics.bem3d.symmetry.MirrorSymmetry.images` (identity, each plane, both)."""
    flips = [np.ones(3)]
    for name in planes:
        f = np.ones(3)
        f["xy".index(name)] = -1.0
        flips.append(f)
    if len(planes) == 2:
        flips.append(flips[1] * flips[2])
    return flips


def symmetric_points(panels, dens: np.ndarray, pts: np.ndarray):
    """Orbits of the points under the panels' mirror symmetry when the densities (N, K) are
    the same on every orbit and the points (M, 3) map onto themselves, else None."""
    from elopt.physics.bem3d.symmetry import mirror_symmetry, point_orbits

    sym = mirror_symmetry(panels)
    if sym is None or len(pts) < 2:
        return None
    tol = 1e-12 * float(np.max(np.abs(dens)))
    if any(np.max(np.abs(dens[img] - dens)) > tol for img in sym.images[1:]):
        return None
    return point_orbits(pts, sym.planes, panels.mesh.size_m)


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


def source_rules(part: _Part, l_min: float) -> tuple[np.ndarray, ...]:
    """Per panel: centroid (N, 3), area (N,), diameter (N,), then points (N, q, 3) and weights
    (N, q) in m^2 of the 3-point rule, the 7-point rule and the 7-point rule on sub-triangles
    no wider than l_min (at most :data:`MAX_SPLITS` halvings)."""
    corners, centroids, areas, diams = part.corners, part.centroids, part.areas, part.diams
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
def _terms_at(tabs, prm, rho, zt, zs, buf, res, value_only) -> None:
    """res = (sum T, sum dT/drho, sum dT/dz) over the placed terms at one pair (with
    ``value_only`` res[0] alone)."""
    rs = prm[0, 0]
    u = math.asinh(rho / rs)
    f = 0.0
    fr = 0.0
    fz = 0.0
    for t in range(prm.shape[0]):
        ad = max(prm[t, 5] + prm[t, 6] * zt + prm[t, 7] * zs + prm[t, 1], prm[t, 10])
        if value_only:
            nu, nv = int(prm[t, 8]), int(prm[t, 9])
            f += hermite_value(tabs[t], nu, nv, prm[t, 2], prm[t, 3], prm[t, 4], u, math.log(ad))
            continue
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
    if value_only:
        return
    res[1] = fr / math.sqrt(rho * rho + rs * rs)
    res[2] = fz


@njit(cache=True, inline="always")
def _add_point(tx, ty, tz, sx, sy, sz, w, tabs, prm, buf, res, acc, value_only) -> None:
    dx = tx - sx
    dy = ty - sy
    rho = math.sqrt(dx * dx + dy * dy)
    _terms_at(tabs, prm, rho, tz, sz, buf, res, value_only)
    acc[0] += w * res[0]
    if value_only:
        return
    if rho > 0.0:
        acc[1] += w * res[1] * dx / rho
        acc[2] += w * res[1] * dy / rho
    acc[3] += w * res[2]


@njit(cache=True, inline="always")
def _near_rule(length, diam, factors, rules):
    """Points and weights of the rule for a pair ``length`` long to a panel ``diam`` wide
    (nearer than factors[0] diameters): the 3-point, 7-point or sub-triangle rule of
    :func:`source_rules`."""
    if length >= factors[1] * diam:
        return rules[3], rules[4]
    if length >= factors[2] * diam:
        return rules[5], rules[6]
    return rules[7], rules[8]


@njit(cache=True)
def _panel(t, j, rules, factors, tabs, prm, buf, res, acc, value_only) -> None:
    """acc = remainder (value, gradient) at target t of panel j, rule chosen by the length
    (with ``value_only`` acc[0] alone)."""
    cen, area, diam = rules[0], rules[1], rules[2]
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
        _add_point(
            t[0], t[1], t[2], c[0], c[1], c[2], area[j], tabs, prm, buf, res, acc, value_only
        )
        return
    pts, wts = _near_rule(length, diam[j], factors, rules)
    for q in range(pts.shape[1]):
        s = pts[j, q]
        _add_point(
            t[0], t[1], t[2], s[0], s[1], s[2], wts[j, q], tabs, prm, buf, res, acc, value_only
        )


@njit(cache=True, parallel=True)
def _remainder(targets, rules, factors, tabs, prm, dens, matrix, sums, dirs) -> None:
    """Fill ``matrix`` (M, N) with the remainder of every panel at every target (its
    derivative along ``dirs`` (M, 3) when that has rows) when it has rows, else ``sums``
    (M, 4, K) with its dens-weighted sums and gradients."""
    m = targets.shape[0]
    n = rules[0].shape[0]
    nk = dens.shape[1]
    fill = matrix.shape[0] > 0
    along = dirs.shape[0] > 0
    for i in prange(m):
        buf = np.empty(3)
        res = np.empty(3)
        acc = np.empty(4)
        for j in range(n):
            _panel(targets[i], j, rules, factors, tabs, prm, buf, res, acc, fill and not along)
            if fill and along:
                d = dirs[i]
                matrix[i, j] = acc[1] * d[0] + acc[2] * d[1] + acc[3] * d[2]
            elif fill:
                matrix[i, j] = acc[0]
            else:
                for c in range(4):
                    for k in range(nk):
                        sums[i, c, k] += dens[j, k] * acc[c]


def _one_height(points: np.ndarray) -> bool:
    """Whether every point (..., 3) lies at one height (copper on a board face)."""
    z = points[..., 2]
    return bool(np.all(z == z.flat[0]))


@njit(cache=True)
def _collapse(tabs, prm, zt, zs, line) -> None:
    """line (T, NU, 2) = T and dT/du at the u nodes of every table at the exponent of the
    heights zt, zs: the bicubic patch at a fixed v is the cubic Hermite interpolant in u of
    these values, so a pair of one height each needs the 1-D patch only."""
    buf = np.empty(3)
    for t in range(prm.shape[0]):
        nu, nv = int(prm[t, 8]), int(prm[t, 9])
        ad = max(prm[t, 5] + prm[t, 6] * zt + prm[t, 7] * zs + prm[t, 1], prm[t, 10])
        v = math.log(ad)
        for i in range(nu):
            hermite_uv(tabs[t], nu, nv, prm[t, 2], prm[t, 3], prm[t, 4], i * prm[t, 2], v, buf)
            line[t, i, 0] = buf[0]
            line[t, i, 1] = buf[1]


@njit(cache=True, inline="always")
def _line_value(line, prm, rho) -> float:
    """Sum over the tables of T at horizontal distance rho from their 1-D patches."""
    u = math.asinh(rho / prm[0, 0])
    f = 0.0
    for t in range(prm.shape[0]):
        hu = prm[t, 2]
        x = u / hu
        i = min(max(int(x), 0), int(prm[t, 8]) - 2)
        s = x - i
        h0 = (1.0 + 2.0 * s) * (1.0 - s) * (1.0 - s)
        h1 = s * s * (3.0 - 2.0 * s)
        g0 = s * (1.0 - s) * (1.0 - s)
        g1 = s * s * (s - 1.0)
        f += h0 * line[t, i, 0] + h1 * line[t, i + 1, 0]
        f += hu * (g0 * line[t, i, 1] + g1 * line[t, i + 1, 1])
    return f


@njit(cache=True, parallel=True)
def _flat_remainder(targets, rules, factors, tabs, prm, zs, matrix) -> None:
    """:func:`_remainder`'s matrix for panels lying flat at one height zs: per target the
    tables collapsed to 1-D patches at its exponents (:func:`_collapse`), then the same rule
    per pair (chosen by the same length) with T from the patches."""
    cen, area, diam = rules[0], rules[1], rules[2]
    for i in prange(targets.shape[0]):
        tx, ty, tz = targets[i, 0], targets[i, 1], targets[i, 2]
        line = np.empty((prm.shape[0], tabs.shape[1], 2))
        _collapse(tabs, prm, tz, zs, line)
        amin = np.inf
        for k in range(prm.shape[0]):
            amin = min(amin, prm[k, 5] + prm[k, 6] * tz + prm[k, 7] * zs + prm[k, 1])
        for j in range(cen.shape[0]):
            dx = tx - cen[j, 0]
            dy = ty - cen[j, 1]
            length = math.sqrt(dx * dx + dy * dy + amin * amin)
            if length >= factors[0] * diam[j]:
                matrix[i, j] = area[j] * _line_value(line, prm, math.sqrt(dx * dx + dy * dy))
                continue
            pts, wts = _near_rule(length, diam[j], factors, rules)
            acc = 0.0
            for q in range(pts.shape[1]):
                ex = tx - pts[j, q, 0]
                ey = ty - pts[j, q, 1]
                acc += wts[j, q] * _line_value(line, prm, math.sqrt(ex * ex + ey * ey))
            matrix[i, j] = acc


def remainder_matrix(targets, rules, factors, tabs, prm, dirs=None, flat=False) -> np.ndarray:
    """(M, N): the remainder integrated over every panel at every target (``rules`` from
    :func:`source_rules`, ``factors`` :data:`RULE_FACTORS`), or its derivative along
    ``dirs`` (M, 3). ``flat``: every panel lies flat at one height (then the tables are
    collapsed per target to 1-D patches in rho: the same values to rounding; measured 5
    times faster on the demo key's copper, 1628 x 1628 pairs)."""
    out = np.empty((len(targets), len(rules[0])))
    if flat and dirs is None and len(targets) and len(rules[0]):
        _flat_remainder(targets, rules, factors, tabs, prm, float(rules[0][0, 2]), out)
        return out
    d = np.zeros((0, 3)) if dirs is None else np.ascontiguousarray(dirs, dtype=float)
    _remainder(targets, rules, factors, tabs, prm, np.zeros((0, 1)), out, np.zeros((0, 4, 1)), d)
    return out


def remainder_sums(targets, rules, factors, dens, tabs, prm) -> np.ndarray:
    """(M, 4, K): sum over panels of dens times the remainder and its gradient at targets."""
    out = np.zeros((len(targets), 4, dens.shape[1]))
    _remainder(targets, rules, factors, tabs, prm, dens, np.zeros((0, 0)), out, np.zeros((0, 3)))
    return out


def gradient_matrix(tgt, dirs, corners, centroids, areas, diams) -> np.ndarray:
    """(M, N) derivative along ``dirs`` (M, 3) at ``tgt`` (M, 3) of (1/4 pi) integral over
    each panel of 1/|x - x'| (principal value on a panel's own plane), as the homogeneous K."""
    from elopt.physics.bem3d.hmatrix import _dense_entries

    corners = np.ascontiguousarray(corners)
    gp = np.ascontiguousarray(np.einsum("qk,tkc->tqc", pint.RULE3_BARY, corners))
    return _dense_entries(
        np.ascontiguousarray(tgt, dtype=float),
        np.ascontiguousarray(dirs, dtype=float),
        True,
        corners,
        np.ascontiguousarray(centroids),
        np.ascontiguousarray(areas),
        np.ascontiguousarray(diams),
        gp,
        False,
        *pint.rules(),
    )


def layered_background(
    layout, mesh, owner: np.ndarray, region: np.ndarray
) -> LayeredBackground | None:
    """The background of ``layout``'s layers for the panels ``mesh`` (``owner`` (N,) the
    conductor of each panel or -1, ``region`` (N,) the body or -1); None when the layers
    change no permittivity."""
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
    heights = []
    for k, c in enumerate(layout.conductors):
        zk = z[owner == k]
        heights.append((float(zk.min()), float(zk.max()), c.name))
    bodies = []
    for k, r in enumerate(layout.regions):
        zk = z[region == k]
        bodies.append((float(zk.min()), float(zk.max()), f"region '{r.name}'"))
    return LayeredBackground(stack, heights, float(mesh.size_m), bodies)


def extra_dense_bytes(n_panels: int, n_rows: int | None = None) -> int:
    """Memory beyond the homogeneous dense estimate while a layered matrix is assembled: two
    more (N, N) blocks (the block being built and one image's integrals); with ``n_rows``
    (a mirror-reduced matrix built that many rows at a time) four (n_rows, N) blocks (the
    rows, the block being built, one image's integrals, the remainder)."""
    if n_rows is None:
        return 2 * 8 * n_panels * n_panels
    return 4 * 8 * n_rows * n_panels


def layered_method(method: str, chosen: str, bodies: bool) -> str:
    """The solve method of a level with planar layers, given the one ``chosen`` for its size
    (``method`` "auto": dense up to the dense limit, else fast): the compressed layered
    operator (:mod:`.hmatrix_layered`) takes conductors only, so with dielectric ``bodies``
    "auto" stays dense (large levels are refused by the memory estimate) and "fast" is
    refused."""
    if chosen == "fast" and bodies:
        if method == "fast":
            raise SolverError(
                "method='fast' does not take planar layers with dielectric bodies yet; use "
                "method='dense' or 'auto' (such levels are solved densely, within the memory "
                "limit)"
            )
        return "dense"
    return chosen

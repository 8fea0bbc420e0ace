"""Ring-charge kernels of a planar layered background (layers infinite in r, optional ground).

All operators here return factors of ``q ds' / eps0`` for a ring density q (C/m^2) on a node,
so that phi = T @ q / eps0; the background permittivity enters the kernel itself.

Two exact forms are used.

*Two half-spaces* (one interface z = z_i, permittivity e_lo below and e_hi above, no ground
plane): sources and targets may lie on either side or on the interface. With G the
free-space ring kernel and G* that of the source mirrored in z_i (docs/references.md item 15,
Jackson sec. 4.4):

    same side s:          phi = (G + r_s G*) / e_s,   r_s = (e_s - e_other) / (e_s + e_other)
    opposite sides or on: phi = 2 G / (e_lo + e_hi)

*Sources in one gap* z_lo < z' < z_hi of a general stack (layers, ground plane z = 0). In the
gap (permittivity e_s) the potential of a unit ring is, by the Hankel transform of 1/R,

    phi = (1/e_s) (r'/2) int_0^inf J0(k r) J0(k r') g(k; z, z') dk,
    g = e^{-k|z-z'|} + [Gd e^{-k(z+z'-2 z_lo)} + Gu e^{-k(2 z_hi-z-z')}
                        + Gu Gd e^{-2kt} (e^{-k(z-z')} + e^{-k(z'-z)})] / (1 - Gu Gd e^{-2kt}),

t = z_hi - z_lo, Gd and Gu the reflection functions of the stack below and above the gap,
built by the recursion G = (r + G' e^{-2k d}) / (1 + r G' e^{-2k d}) over the layers (r the
static reflection coefficient (e_near - e_far) / (e_near + e_far) of one interface, -1 for the
grounded plane, d the thickness of the layer behind it). The large-k limits Gd -> r_lo,
Gu -> r_hi are taken out as two exact image rings (mirrored in z_lo and z_hi, handled by the
ordinary near-field rules); the remainder S(k) = g - e^{-k|z-z'|} - r_lo e^{..} - r_hi e^{..}
is smooth, decays at least like e^{-k s} with s the smallest of (z - z_lo) + (z' - z_lo),
(z_hi - z) + (z_hi - z') and t over targets z and sources z', and is bounded by
|S| <= 6 e^{-k s} / (1 - e^{-2kt}) because every reflection function and coefficient has
modulus <= 1 (passive media). The integral is cut at K where that bound leaves a tail below
1e-13 of the kernel scale (a proven bound, independent of the permittivity contrast:
eps_r = 80 costs nothing extra), and integrated by composite 16-point Gauss-Legendre panels
no wider than 5 / r_max, 8 / s and 4 / (thinnest layer or gap). Every term is
a product of a target factor and a source factor, so the remainder matrix is U diag(w) V^T.

Targets in the first medium past either face of the gap (inside a film, a slab, a half-space)
take the transmitted form of :func:`transmitted_matrix`, the same kind of separable integral;
its integrand obeys the same bound within a factor 8 / (6 (1 - e^{-2Kd})), d the thickness of
that medium, which the same K covers for any d above 0.1 s (a factor below 1.4).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np
from scipy.special import j0, j1

from elopt.physics.bem_axi.mesh import KIND_ARC, KIND_ELLIPSE, KIND_SEGMENT, AxiMesh
from elopt.physics.bem_axi.operators import collocation_matrix, field_matrix, potential_matrix
from elopt.physics.errors import GeometryError
from elopt.physics.media import LayerStack
from elopt.physics.quadrature import gauss_legendre

#: Relative size of the truncated Hankel tail against the kernel scale 1 / (layout size).
_TAIL_TOL = 1e-13
_GAUSS_K = 16


def mirror_mesh(mesh: AxiMesh, z_plane: float) -> AxiMesh:
    """The mesh reflected in the plane z = z_plane (same node order and weights)."""
    coef = mesh.coef.copy()
    seg = mesh.kind == KIND_SEGMENT
    coef[seg, 1] = 2 * z_plane - coef[seg, 1]
    coef[seg, 3] = 2 * z_plane - coef[seg, 3]
    arc = mesh.kind == KIND_ARC
    coef[arc, 1] = 2 * z_plane - coef[arc, 1]
    coef[arc, 3:5] = -coef[arc, 3:5]
    ell = mesh.kind == KIND_ELLIPSE
    coef[ell, 0] = 2 * z_plane - coef[ell, 0]
    coef[ell, 3:5] = -coef[ell, 3:5]
    flip = np.array([1.0, -1.0])
    pts = mesh.points_m * flip + np.array([0.0, 2 * z_plane])
    return replace(
        mesh,
        coef=coef,
        center_m=mesh.center_m * flip + np.array([0.0, 2 * z_plane]),
        points_m=pts,
        tangents=mesh.tangents * flip,
        normals=mesh.normals * flip,
    )


def _reflection(eps_near: float, eps_far: float) -> float:
    return (eps_near - eps_far) / (eps_near + eps_far)


@dataclass(frozen=True)
class Gap:
    """The gap z_lo < z < z_hi (either may be infinite) holding every source, and its stack."""

    stack: LayerStack
    z_lo: float
    z_hi: float
    eps_r: float

    def _beyond(self, below: bool) -> tuple[list[tuple[float, float]], bool]:
        """Media (eps, thickness) beyond the gap face, nearest first, and whether the last
        finite one ends on the ground plane."""
        z0 = self.z_lo if below else self.z_hi
        media: list[tuple[float, float]] = []
        z = z0
        while True:
            eps = self.stack.eps_r_below(z) if below else self.stack.eps_r_above(z)
            nxt = _next_interface(self.stack, z, below)
            media.append((eps, math.inf if nxt is None else abs(z - nxt)))
            if nxt is None:
                return media, False
            if below and self.stack.ground_plane and nxt == 0.0:
                return media, True
            z = nxt

    def _reflections(self, k: np.ndarray, below: bool) -> tuple[np.ndarray, np.ndarray, float]:
        """Reflection functions (Q,) seen from the gap at its face (Gamma) and from the first
        medium beyond at its far side (Gamma'), and the large-k limit of Gamma."""
        z0 = self.z_lo if below else self.z_hi
        if not math.isfinite(z0):
            return np.zeros_like(k), np.zeros_like(k), 0.0
        if below and self.stack.ground_plane and z0 == 0.0:
            return -np.ones_like(k), np.zeros_like(k), -1.0
        media, grounded = self._beyond(below)
        gam = np.full_like(k, -1.0 if grounded else 0.0)
        eps_list = [self.eps_r] + [e for e, _ in media]
        inner = gam
        for j in range(len(media), 0, -1):
            inner = gam
            r = _reflection(eps_list[j - 1], eps_list[j])
            thick = media[j - 1][1]
            e = np.exp(-2 * k * thick) if math.isfinite(thick) else np.zeros_like(k)
            gam = (r + gam * e) / (1 + r * gam * e)
        return gam, inner, _reflection(self.eps_r, eps_list[1])

    def _side_reflection(self, k: np.ndarray, below: bool) -> tuple[np.ndarray, float]:
        """Reflection function (Q,) seen from the gap looking down (below) or up, and its
        large-k limit (the static coefficient of the first interface, -1 for the ground)."""
        gam, _, r0 = self._reflections(k, below)
        return gam, r0

    @property
    def images(self) -> tuple[tuple[float, float], ...]:
        """Exact image planes and coefficients: (z_plane, coefficient)."""
        out = []
        for z0, below in ((self.z_lo, True), (self.z_hi, False)):
            if math.isfinite(z0):
                _, r = self._side_reflection(np.array([1e300]), below)
                if r != 0.0:
                    out.append((z0, r))
        return tuple(out)


def _next_interface(stack: LayerStack, z: float, below: bool) -> float | None:
    """The nearest height beyond z (downwards or upwards) where the permittivity changes or
    the ground plane lies; None if there is none."""
    cands = [v for v in stack.interfaces_m if (v < z if below else v > z)]
    if below and stack.ground_plane and z > 0.0:
        cands.append(0.0)
    if not cands:
        return None
    return max(cands) if below else min(cands)


def find_gap(stack: LayerStack, z_min: float, z_max: float, what: str) -> Gap:
    """The gap of ``stack`` containing the height range [z_min, z_max] of every source."""
    ifaces = [float(v) for v in stack.interfaces_m]
    below = [v for v in ifaces if v <= z_min]
    # sources all in one plane that is an interface: the gap above it holds them
    above = [v for v in ifaces if v > z_max or (v == z_max and z_max > z_min)]
    inside = [v for v in ifaces if z_min < v < z_max]
    if inside:
        raise GeometryError(
            f"{what}: spans heights {z_min:.6g} .. {z_max:.6g} m across the layer interface at "
            f"z = {inside[0]:.6g} m; every conductor and region must lie in one gap between "
            "layer interfaces (they may rest on a face; or straddle the single interface of "
            "two half-spaces)"
        )
    z_lo = max(below) if below else (0.0 if stack.ground_plane else -math.inf)
    z_hi = min(above) if above else math.inf
    mid = 0.5 * (z_lo + z_hi) if math.isfinite(z_lo + z_hi) else 0.5 * (z_min + z_max)
    if not math.isfinite(mid) or not (z_lo < mid < z_hi):
        mid = z_hi - 1.0 if math.isfinite(z_hi) else max(z_lo, z_max) + 1.0
    eps = float(stack.eps_r_at(np.array([mid]))[0])
    return Gap(stack, float(z_lo), float(z_hi), eps)


@dataclass(frozen=True)
class HankelRule:
    """Nodes k (Q,) in 1/m and weights (Q,) of the truncated remainder integral."""

    k: np.ndarray
    w: np.ndarray


def decay_length(gap: Gap, z_targets: np.ndarray, z_sources: np.ndarray) -> float:
    """Smallest exponent length s of the remainder's terms (targets in the gap): for a face,
    target and source distances to it plus twice the thickness of the medium behind it (the
    reflection function minus its limit falls like e^{-2kd}; no term when it is exact), and
    the gap thickness t for the multiple reflections."""
    cands = [math.inf]
    for face, sign, below in ((gap.z_lo, 1.0, True), (gap.z_hi, -1.0, False)):
        if not math.isfinite(face):
            continue
        behind = gap._beyond(below)[0][0][1] if not _exact_face(gap, below) else math.inf
        extra = min(2.0 * behind, 2.0 * (gap.z_hi - gap.z_lo))
        dt = float(np.min(sign * (z_targets - face)))
        cands.append(dt + float(np.min(sign * (z_sources - face))) + extra)
    if math.isfinite(gap.z_lo) and math.isfinite(gap.z_hi):
        cands.append(gap.z_hi - gap.z_lo)
    return min(cands)


def _exact_face(gap: Gap, below: bool) -> bool:
    """Whether the face's reflection function equals its limit for every k (the ground plane
    right at the face, or one half-space behind it)."""
    if below and gap.stack.ground_plane and gap.z_lo == 0.0:
        return True
    media, grounded = gap._beyond(below)
    return len(media) == 1 and not grounded and not math.isfinite(media[0][1])


def hankel_rule(gap: Gap, s: float, r_max: float, size: float) -> HankelRule | None:
    """Quadrature for a spectral integrand bounded by 6 e^{-k s} / (1 - e^{-2kt}); None when
    the integrand vanishes (s infinite)."""
    if not math.isfinite(s):
        return None
    if s <= 0:
        raise GeometryError(
            f"a source lies on a layer interface (decay length {s:.3g} m); keep sources off"
        )
    t = gap.z_hi - gap.z_lo
    scale = max(size, s)
    # tail bound: 6 e^{-K s} / (s (1 - e^{-2Kt})) <= tol / scale; 2Kt >= 2Ks > 60 so the
    # denominator is >= 1/2.
    k_max = (math.log(12.0 * scale / (s * _TAIL_TOL))) / s
    thin = [layer.thickness_m for layer in gap.stack.layers if math.isfinite(layer.thickness_m)]
    widths = [5.0 / max(r_max, 1e-300), 8.0 / s]
    if thin:
        widths.append(4.0 / min(thin))
    if math.isfinite(t):
        widths.append(4.0 / t)
    h = min(widths)
    n = max(math.ceil(k_max / h), 4)
    x, w = gauss_legendre(_GAUSS_K)
    edges = np.linspace(0.0, k_max, n + 1)
    a, b = edges[:-1, None], edges[1:, None]
    return HankelRule(
        (0.5 * (a + b) + 0.5 * (b - a) * x).ravel(), (0.5 * (b - a) * w).ravel() * np.ones(1)
    )


def _remainder_terms(gap: Gap, k: np.ndarray):
    """[(c_ab(k) (Q,), a, b)] with a, b in {'lo', 'hi'}: S = sum c u_a(z) u_b(z')."""
    gd, r_lo = gap._side_reflection(k, True)
    gu, r_hi = gap._side_reflection(k, False)
    terms = []
    has_lo, has_hi = math.isfinite(gap.z_lo), math.isfinite(gap.z_hi)
    if has_lo and has_hi:
        t = gap.z_hi - gap.z_lo
        et = np.exp(-k * t)
        d = 1.0 - gu * gd * et * et
        terms.append((gd / d - r_lo, "lo", "lo"))
        terms.append((gu / d - r_hi, "hi", "hi"))
        cross = gu * gd * et / d
        terms.append((cross, "lo", "hi"))
        terms.append((cross, "hi", "lo"))
    elif has_lo:
        terms.append((gd - r_lo, "lo", "lo"))
    elif has_hi:
        terms.append((gu - r_hi, "hi", "hi"))
    return [(c, a, b) for c, a, b in terms if np.any(np.abs(c) > 0)]


def _u(gap: Gap, side: str, k: np.ndarray, z: np.ndarray) -> np.ndarray:
    """(M, Q): e^{-k (z - z_lo)} or e^{-k (z_hi - z)}."""
    dz = z - gap.z_lo if side == "lo" else gap.z_hi - z
    return np.exp(-np.outer(dz, k))


def remainder_matrix(
    gap: Gap, rule: HankelRule, targets: np.ndarray, mesh: AxiMesh, field: bool
) -> np.ndarray:
    """Spectral remainder (M, N) of the potential, or (M, N, 2) of (E_r, E_z), per q ds'/eps0."""
    k, w = rule.k, rule.w
    terms = _remainder_terms(gap, k)
    m, n = len(targets), mesh.n_nodes
    out = np.zeros((m, n, 2) if field else (m, n))
    if not terms:
        return out
    src = mesh.points_m
    src_fac = j0(np.outer(src[:, 0], k)) * (0.5 * src[:, 0] * mesh.weights_m)[:, None]
    kr = np.outer(targets[:, 0], k)
    tj0 = j0(kr)
    tj1 = j1(kr) * k if field else None
    for c, a, b in terms:
        wc = (w * c) / gap.eps_r
        ua = _u(gap, a, k, targets[:, 1])
        vb = src_fac * _u(gap, b, k, src[:, 1])
        if not field:
            out += (tj0 * ua * wc) @ vb.T
        else:
            out[..., 0] += (tj1 * ua * wc) @ vb.T
            sign = 1.0 if a == "lo" else -1.0
            out[..., 1] += (sign * tj0 * ua * (wc * k)) @ vb.T
    return out


def transmitted_decay(gap: Gap, w_targets: np.ndarray, z_sources: np.ndarray, below: bool) -> float:
    """Decay length of the transmitted remainder: distances of targets past the face and of
    sources to it, plus the smaller of the medium's and the gap's thickness (inf: none)."""
    face = gap.z_lo if below else gap.z_hi
    d = gap._beyond(below)[0][0][1]
    t = gap.z_hi - gap.z_lo
    extra = min(d, t)
    if not math.isfinite(extra):
        return math.inf
    ds = float(np.min(np.abs(z_sources - face)))
    return float(np.min(w_targets)) + ds + extra


def transmitted_matrix(
    gap: Gap, rule: HankelRule, targets: np.ndarray, mesh: AxiMesh, field: bool, below: bool
) -> np.ndarray:
    """Remainder (M, N) of the potential, or (M, N, 2) of the field, per q ds'/eps0 at targets
    in the first medium past a gap face (below: z_lo - d <= z <= z_lo; above: z_hi <= z <=
    z_hi + d), after the exact part (1 + r_face) G / eps_s (the transmitted image of
    docs/references.md item 15) is taken out.

    With X(k; z') the wave arriving at the face (direct plus the multiple reflections in the
    gap), continuity of phi and of eps dphi/dz at the face give, w the distance past the face,
    phi = X (1 + Gamma) / (1 + Gamma' e^{-2kd}) [e^{-kw} + Gamma' e^{-k(2d - w)}].
    """
    k, w = rule.k, rule.w
    gd, gd_in, _ = gap._reflections(k, True)
    gu, gu_in, _ = gap._reflections(k, False)
    gam, gam_in, r_face = gap._reflections(k, below)
    face = gap.z_lo if below else gap.z_hi
    thick = gap._beyond(below)[0][0][1]
    src = mesh.points_m
    src_fac = j0(np.outer(src[:, 0], k)) * (0.5 * src[:, 0] * mesh.weights_m)[:, None]
    near_side, far_side = ("lo", "hi") if below else ("hi", "lo")
    e2d = np.exp(-2 * k * thick) if math.isfinite(thick) else np.zeros_like(k)
    c1 = (1 + gam) / (1 + gam_in * e2d)
    terms_src = []  # (coefficient of e^{-kw} (Q,), of the reflected wave (Q,), source factor)
    near = src_fac * _u(gap, near_side, k, src[:, 1])
    if math.isfinite(gap.z_lo) and math.isfinite(gap.z_hi):
        et = np.exp(-k * (gap.z_hi - gap.z_lo))
        dn = 1 - gu * gd * et * et
        other = gu if below else gd
        terms_src.append((c1 / dn - (1 + r_face), c1 / dn, near))
        far = src_fac * _u(gap, far_side, k, src[:, 1])
        terms_src.append((c1 * other * et / dn, c1 * other * et / dn, far))
    else:
        terms_src.append((c1 - (1 + r_face), c1, near))
    dist = (face - targets[:, 1]) if below else (targets[:, 1] - face)
    a = np.exp(-np.outer(dist, k))
    b = (
        gam_in * np.exp(-np.outer(2 * thick - dist, k))
        if math.isfinite(thick)
        else np.zeros_like(a)
    )
    kr = np.outer(targets[:, 0], k)
    tj0 = j0(kr)
    out = np.zeros((len(targets), mesh.n_nodes, 2) if field else (len(targets), mesh.n_nodes))
    # E_z = -dphi/dz, dw/dz = -1 below, +1 above; dphi/dw = k (-a ca + b cb)
    sign = 1.0 if below else -1.0
    for ca, cb, vb in terms_src:
        wa, wb = w * ca / gap.eps_r, w * cb / gap.eps_r
        wave = a * wa + b * wb
        if not field:
            out += (tj0 * wave) @ vb.T
        else:
            out[..., 0] += (j1(kr) * k * wave) @ vb.T
            out[..., 1] += (sign * tj0 * k * (b * wb - a * wa)) @ vb.T
    return out


class LayeredKernel:
    """Potential and field operators of conductors/interfaces in a layered background.

    ``kind`` is "homogeneous" (one medium, optional ground plane), "two_half_spaces" or "gap".
    """

    def __init__(self, stack: LayerStack, z_nodes: np.ndarray, size: float, what: str) -> None:
        self.stack = stack
        self.size = size
        ifaces = stack.interfaces_m
        if len(ifaces) == 0:
            self.kind = "homogeneous"
            self.eps_default = stack.medium_eps_r
        elif len(ifaces) == 1 and not stack.ground_plane:
            self.kind = "two_half_spaces"
            self.z_i = float(ifaces[0])
            self.e_lo = stack.eps_r_below(self.z_i)
            self.e_hi = stack.eps_r_above(self.z_i)
        else:
            self.kind = "gap"
            self.gap = find_gap(stack, float(np.min(z_nodes)), float(np.max(z_nodes)), what)

    # -- helpers -------------------------------------------------------------------------------
    def side(self, z: np.ndarray) -> np.ndarray:
        """-1 below the interface, 0 on it, +1 above (two half-spaces only)."""
        tol = 1e-12 * self.size
        return np.where(z > self.z_i + tol, 1, np.where(z < self.z_i - tol, -1, 0))

    def _weights(self, zt: np.ndarray, zs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        st, ss = self.side(zt)[:, None], self.side(zs)[None, :]
        e_lo, e_hi = self.e_lo, self.e_hi
        cross = 2.0 / (e_lo + e_hi)
        direct = np.where(
            (st == ss) & (st > 0), 1 / e_hi, np.where((st == ss) & (st < 0), 1 / e_lo, cross)
        )
        r_hi = _reflection(e_hi, e_lo) / e_hi
        r_lo = _reflection(e_lo, e_hi) / e_lo
        image = np.where((st == ss) & (st > 0), r_hi, np.where((st == ss) & (st < 0), r_lo, 0.0))
        return direct, image

    def _combine(self, mesh: AxiMesh, targets: np.ndarray, direct_mat: np.ndarray, field: bool):
        ground = self.stack.ground_plane
        if self.kind == "homogeneous":
            return direct_mat / self.eps_default
        build = field_matrix if field else potential_matrix
        if self.kind == "two_half_spaces":
            wd, wi = self._weights(targets[:, 1], mesh.points_m[:, 1])
            img = build(mirror_mesh(mesh, self.z_i), targets, False)
            img = np.where(np.isfinite(img), img, 0.0)
            if field:
                return direct_mat * wd[..., None] + img * wi[..., None]
            return direct_mat * wd + img * wi
        gap = self.gap
        out = direct_mat.copy()
        real = None
        for z0, coef in gap.images:
            if ground and z0 == 0.0:
                continue  # the ground image is inside direct_mat already
            img = build(mirror_mesh(mesh, z0), targets, False)
            on = np.abs(mesh.points_m[:, 1] - z0) <= 1e-12 * self.size
            if np.any(on):
                # a source resting on the face is its own mirror image: reuse the real columns
                if self._ground_in_direct():
                    real = build(mesh, targets, False) if real is None else real
                    img[:, on] = real[:, on]
                else:
                    img[:, on] = direct_mat[:, on]
            out += coef * img
        r_max = float(max(np.max(targets[:, 0]), np.max(mesh.points_m[:, 0])))
        s = decay_length(gap, targets[:, 1], mesh.points_m[:, 1])
        rule = hankel_rule(gap, s, r_max, self.size)
        if rule is None:
            return out / gap.eps_r
        return out / gap.eps_r + remainder_matrix(gap, rule, targets, mesh, field)

    def _ground_in_direct(self) -> bool:
        """Whether the plain operators should include the -1 image in z = 0."""
        if self.kind == "homogeneous":
            return self.stack.ground_plane
        if self.kind == "gap":
            return any(z0 == 0.0 and self.stack.ground_plane for z0, _ in self.gap.images)
        return False

    # -- operators -----------------------------------------------------------------------------
    def collocation(self, mesh: AxiMesh) -> np.ndarray:
        """(N, N) potential at every node per q ds'/eps0, self panels integrated exactly."""
        direct = collocation_matrix(mesh, self._ground_in_direct())
        return self._combine(mesh, mesh.points_m, direct, False)

    def potential(self, mesh: AxiMesh, targets: np.ndarray) -> np.ndarray:
        """(M, N) potential at targets off the surfaces per q ds'/eps0."""
        return self._evaluate(mesh, targets, False)

    def field(self, mesh: AxiMesh, targets: np.ndarray) -> np.ndarray:
        """(M, N, 2) field (E_r, E_z) at targets off the surfaces per q ds'/eps0."""
        return self._evaluate(mesh, targets, True)

    def _evaluate(self, mesh: AxiMesh, targets: np.ndarray, field: bool) -> np.ndarray:
        t = np.ascontiguousarray(targets, float)
        build = field_matrix if field else potential_matrix
        if self.kind != "gap":
            return self._combine(mesh, t, build(mesh, t, self._ground_in_direct()), field)
        self.check_targets(t)
        gap = self.gap
        below = t[:, 1] <= gap.z_lo
        above = t[:, 1] >= gap.z_hi
        inside = ~(below | above)
        out = np.zeros((len(t), mesh.n_nodes, 2) if field else (len(t), mesh.n_nodes))
        if np.any(inside):
            ti = t[inside]
            out[inside] = self._combine(mesh, ti, build(mesh, ti, self._ground_in_direct()), field)
        for sel, is_below in ((below, True), (above, False)):
            if not np.any(sel):
                continue
            ts = t[sel]
            r_face = gap._reflections(np.array([1e300]), is_below)[2]
            part = (1 + r_face) / gap.eps_r * build(mesh, ts, False)
            face = gap.z_lo if is_below else gap.z_hi
            w_t = np.abs(ts[:, 1] - face)
            s = transmitted_decay(gap, w_t, mesh.points_m[:, 1], is_below)
            r_max = float(max(np.max(ts[:, 0]), np.max(mesh.points_m[:, 0])))
            rule = hankel_rule(gap, s, r_max, self.size)
            if rule is not None:
                part = part + transmitted_matrix(gap, rule, ts, mesh, field, is_below)
            out[sel] = part
        return out

    def target_eps_r(self, z: np.ndarray) -> np.ndarray:
        """Permittivity of the background at target heights (M,), for D = eps E."""
        return self.stack.eps_r_at(np.asarray(z, float))

    def check_targets(self, targets: np.ndarray) -> None:
        """Raise GeometryError for targets beyond the first layer on either side of the gap
        that holds the conductors (deeper layers are not evaluated)."""
        if self.kind != "gap":
            return
        z = targets[:, 1]
        gap = self.gap
        lo = gap.z_lo - (self.gap._beyond(True)[0][0][1] if math.isfinite(gap.z_lo) else 0.0)
        hi = gap.z_hi + (self.gap._beyond(False)[0][0][1] if math.isfinite(gap.z_hi) else 0.0)
        if gap.z_lo == 0.0 and self.stack.ground_plane:
            lo = 0.0
        bad = (z < lo) | (z > hi)
        if np.any(bad):
            zb = float(z[np.argmax(bad)])
            raise GeometryError(
                f"point at z = {zb:.6g} m lies beyond the layers next to the conductors' gap "
                f"({lo:.6g} <= z <= {hi:.6g} m); fields in deeper layers are not available"
            )

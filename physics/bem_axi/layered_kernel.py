"""Ring-charge kernels of a planar layered background (layers infinite in r, optional ground).

All operators here return factors of ``q ds' / eps0`` for a ring density q (C/m^2) on a node,
so that phi = T @ q / eps0; the background permittivity enters the kernel itself.

The background is the slab column of :class:`elopt.physics.layer_spectrum.StackSpectrum`.
Sources (nodes) and targets may lie in any slabs; every (target slab, source slab) pair is one
block. A unit ring of radius r' at height z' in slab s gives at (r, z) in slab t

    phi = (r'/2) int_0^inf J0(k r) J0(k r') g(k; z, z') dk,

g the spectral kernel of the module (direct term, separable terms). Each term's large-k limit
is an exact ring image evaluated by the ordinary near-field rules: the direct ring / eps_s
(t = s), mirror rings in the two faces of slab s with r_dn / eps_s and r_up / eps_s (t = s;
docs/references.md item 15, Jackson sec. 4.4; -1 at the grounded plane), the ring itself with
(1 + r) / eps_s across one face (|t - s| = 1), nothing for deeper slabs. The remainder
coef - limit is integrated by the module's Hankel rule, cut where its proven tail bound falls
below TAIL_TOL of the kernel scale (1 / size for potentials, 1 / size^2 for fields); every
term is a product of a target factor and a source factor, so a block is U diag(w) V^T.

A node on a layer face belongs to the slab above (the kernel is continuous there, so either
side gives the same potential); a source resting on a face is its own mirror image. Points
below a grounded plane lie in the conductor: potential and field 0.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
from scipy.special import j0, j1

from elopt.physics.bem_axi.mesh import KIND_ARC, KIND_ELLIPSE, KIND_SEGMENT, AxiMesh
from elopt.physics.bem_axi.operators import collocation_matrix, field_matrix, potential_matrix
from elopt.physics.errors import GeometryError
from elopt.physics.layer_spectrum import TAIL_TOL, StackSpectrum
from elopt.physics.media import LayerStack

#: Nodes closer than this fraction of the layout size to a face count as lying on it.
_ON_FACE = 1e-12


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


def sub_mesh(mesh: AxiMesh, panels: np.ndarray) -> AxiMesh:
    """The panels ``panels`` (indices, ascending) of ``mesh`` as a mesh of their own."""
    nodes = (panels[:, None] * mesh.order + np.arange(mesh.order)).ravel()
    per_panel = ("conductor", "kind", "coef", "length_m", "center_m", "at_corner")
    per_node = ("points_m", "tangents", "normals", "jac_m", "weights_m", "arc_m")
    return replace(
        mesh,
        **{f: getattr(mesh, f)[panels] for f in per_panel},
        **{f: getattr(mesh, f)[nodes] for f in per_node},
        interp_jac=mesh.density_scale[nodes],
    )


def applied_potential(stack: LayerStack, d0: float, z: np.ndarray) -> np.ndarray:
    """Unperturbed potential (M,) V of a uniform applied displacement D = eps0 d0 e_z (d0 =
    E0 eps_r of the medium, V/m): phi0 = -d0 int_0^z dz / eps_r(z), piecewise linear with
    D_z continuous; 0 on and below a grounded plane."""
    z = np.asarray(z, float)
    total = np.zeros_like(z)
    for slab in StackSpectrum(stack).slabs:
        span = np.clip(z, slab.z_lo, slab.z_hi) - np.clip(0.0, slab.z_lo, slab.z_hi)
        total += span / slab.eps_r
    return -d0 * total


def applied_field_z(stack: LayerStack, d0: float, z: np.ndarray) -> np.ndarray:
    """Unperturbed E_z (M,) V/m = d0 / eps_r(z) (0 below a grounded plane)."""
    z = np.asarray(z, float)
    out = d0 / stack.eps_r_at(z)
    return np.where(stack.ground_plane & (z < 0.0), 0.0, out)


class LayeredKernel:
    """Potential and field operators of conductors/interfaces in a layered background.

    ``kind`` is "homogeneous" (one medium, optional ground plane) or "layered".
    ``z_nodes`` (N,) are the source heights, checked against a grounded plane for ``what``.
    """

    def __init__(self, stack: LayerStack, z_nodes: np.ndarray, size: float, what: str) -> None:
        self.stack = stack
        self.size = size
        if stack.ground_plane and np.any(np.asarray(z_nodes) < -_ON_FACE * size):
            zb = float(np.min(z_nodes))
            raise GeometryError(
                f"{what}: reach below the grounded plane (z = {zb:.6g} m); keep z >= 0"
            )
        if len(stack.interfaces_m) == 0:
            self.kind = "homogeneous"
            self.eps_default = stack.medium_eps_r
        else:
            self.kind = "layered"
            self.spectrum = StackSpectrum(stack)

    # -- operators -----------------------------------------------------------------------------
    def collocation(self, mesh: AxiMesh) -> np.ndarray:
        """(N, N) potential at every node per q ds'/eps0, self panels integrated exactly."""
        if self.kind == "homogeneous":
            return collocation_matrix(mesh, self.stack.ground_plane) / self.eps_default
        direct = collocation_matrix(mesh, False)
        return self._layered(mesh, mesh.points_m, direct, False)

    def potential(self, mesh: AxiMesh, targets: np.ndarray) -> np.ndarray:
        """(M, N) potential at targets off the surfaces per q ds'/eps0."""
        return self._evaluate(mesh, targets, False)

    def field(self, mesh: AxiMesh, targets: np.ndarray) -> np.ndarray:
        """(M, N, 2) field (E_r, E_z) at targets off the surfaces per q ds'/eps0."""
        return self._evaluate(mesh, targets, True)

    def principal_value_normal_field(
        self, mesh: AxiMesh, rows: np.ndarray, delta: np.ndarray
    ) -> np.ndarray:
        """(R, N) principal value of the normal field at nodes ``rows`` per q ds'/eps0.

        M(d) = mean of the normal fields a distance d (``delta`` (R, 1) m) off both sides =
        PV + c d + O(d^2) (the one-sided normal derivatives differ); Richardson 2 M(d) - M(2d)
        removes the linear term. The spectral remainder is smooth through a node off the layer
        faces, so there it is evaluated once, at the node.
        """
        nrm = mesh.normals[rows]
        pts = mesh.points_m[rows]

        def mean_normal(d: np.ndarray, remainder: bool) -> np.ndarray:
            f = self._evaluate(mesh, pts + d * nrm, True, remainder)
            f = f + self._evaluate(mesh, pts - d * nrm, True, remainder)
            return 0.5 * np.einsum("mnc,mc->mn", f, nrm)

        smooth = self.kind == "layered"
        pv = 2 * mean_normal(delta, not smooth) - mean_normal(2 * delta, not smooth)
        if smooth:
            faces = self.stack.interfaces_m
            on = np.any(
                np.abs(pts[:, 1:2] - faces[None, :]) <= 4 * np.max(delta, axis=1, keepdims=True),
                axis=1,
            )
            off = np.nonzero(~on)[0]
            if len(off):
                rem = np.zeros((len(off), mesh.n_nodes, 2))
                at = pts[off]
                slabs = self.spectrum.slab_of(at[:, 1])
                self._remainder(rem, mesh, at, slabs, self._node_slabs(mesh), True)
                pv[off] += np.einsum("mnc,mc->mn", rem, nrm[off])
            if np.any(on):
                sel = np.nonzero(on)[0]
                sub = self.principal_value_remainder(mesh, rows[sel], delta[sel])
                pv[sel] += sub
        return pv

    def principal_value_remainder(
        self, mesh: AxiMesh, rows: np.ndarray, delta: np.ndarray
    ) -> np.ndarray:
        """(R, N) Richardson mean normal field of the spectral remainder alone at nodes on a
        layer face (there its normal component jumps with the background permittivity)."""
        nrm = mesh.normals[rows]
        pts = mesh.points_m[rows]
        s_slab = self._node_slabs(mesh)
        means = []
        for d in (delta, 2 * delta):
            f = np.zeros((len(rows), mesh.n_nodes, 2))
            for side in (1.0, -1.0):
                x = pts + side * d * nrm
                self._remainder(f, mesh, x, self.spectrum.slab_of(x[:, 1]), s_slab, True)
            means.append(0.5 * np.einsum("mnc,mc->mn", f, nrm))
        return 2 * means[0] - means[1]

    def target_eps_r(self, z: np.ndarray) -> np.ndarray:
        """Permittivity of the background at target heights (M,), for D = eps E."""
        return self.stack.eps_r_at(np.asarray(z, float))

    def _evaluate(
        self, mesh: AxiMesh, targets: np.ndarray, field: bool, remainder: bool = True
    ) -> np.ndarray:
        t = np.ascontiguousarray(targets, float)
        build = field_matrix if field else potential_matrix
        if self.kind == "homogeneous":
            return build(mesh, t, self.stack.ground_plane) / self.eps_default
        return self._layered(mesh, t, build(mesh, t, False), field, remainder)

    # -- layered blocks ------------------------------------------------------------------------
    def _panel_slabs(self, mesh: AxiMesh) -> np.ndarray:
        """Slab (P,) of every panel: that of its lowest node lifted onto a face it rests on."""
        z = mesh.points_m[:, 1].reshape(-1, mesh.order).min(axis=1)
        faces = self.stack.interfaces_m
        if len(faces):
            near = np.abs(z[:, None] - faces[None, :]) <= _ON_FACE * self.size
            hit = near.any(axis=1)
            z = np.where(hit, faces[np.argmax(near, axis=1)], z)
        return self.spectrum.slab_of(z)

    def _node_slabs(self, mesh: AxiMesh) -> np.ndarray:
        return np.repeat(self._panel_slabs(mesh), mesh.order)

    def _layered(
        self,
        mesh: AxiMesh,
        targets: np.ndarray,
        direct: np.ndarray,
        field: bool,
        remainder: bool = True,
    ) -> np.ndarray:
        sp = self.spectrum
        build = field_matrix if field else potential_matrix
        n_s = sp.n_slabs
        t_slab = sp.slab_of(targets[:, 1])
        p_slab = self._panel_slabs(mesh)
        s_slab = np.repeat(p_slab, mesh.order)
        # exact parts of the direct ring: 1/eps_s in its slab, (1 + r)/eps_s one face away
        wd = np.zeros((n_s + 1, n_s))  # row n_s (index -1): below the grounded plane
        for s, slab in enumerate(sp.slabs):
            wd[s, s] = 1.0 / slab.eps_r
            if s + 1 < n_s:
                wd[s + 1, s] = (1.0 + sp.r_up[s]) / slab.eps_r
            if s > 0:
                wd[s - 1, s] = (1.0 + sp.r_dn[s]) / slab.eps_r
        ts, ss = np.unique(t_slab), np.unique(s_slab)
        if len(ts) == 1 and len(ss) == 1:
            out = direct * wd[ts[0], ss[0]]
        else:
            w = wd[t_slab][:, s_slab]
            out = direct * (w[..., None] if field else w)
        for s in np.unique(p_slab):
            rows = np.nonzero(t_slab == s)[0]
            if not len(rows):
                continue
            panels = np.nonzero(p_slab == s)[0]
            cols = (panels[:, None] * mesh.order + np.arange(mesh.order)).ravel()
            sub = mesh if len(panels) == mesh.n_panels else sub_mesh(mesh, panels)
            slab = sp.slabs[s]
            for z0, r in ((slab.z_lo, sp.r_dn[s]), (slab.z_hi, sp.r_up[s])):
                if r is None:
                    continue
                img = build(mirror_mesh(sub, z0), targets[rows], False)
                on = np.abs(sub.points_m[:, 1] - z0) <= _ON_FACE * self.size
                if np.any(on):
                    # a source resting on the face is its own mirror image
                    img[:, on] = direct[rows][:, cols[on]]
                _add_block(out, rows, cols, (r / slab.eps_r) * img)
        if remainder:
            self._remainder(out, mesh, targets, t_slab, s_slab, field)
        return out

    def _remainder(self, out, mesh, targets, t_slab, s_slab, field: bool) -> None:
        """Add the spectral remainder of every (target slab, source slab) block to ``out``."""
        sp = self.spectrum
        src = mesh.points_m
        tol = TAIL_TOL / (self.size**2 if field else self.size)
        for t in np.unique(t_slab[t_slab >= 0]):
            rows = np.nonzero(t_slab == t)[0]
            tg = targets[rows]
            for s in np.unique(s_slab):
                cols = np.nonzero(s_slab == s)[0]
                sc = src[cols]
                r_max = float(max(tg[:, 0].max(), sc[:, 0].max()))
                rule = sp.quadrature(t, s, tg[:, 1], sc[:, 1], r_max, tol, int(field))
                if rule is None:
                    continue
                same = not field and targets is src and np.array_equal(rows, cols)
                block = self._remainder_block(int(t), int(s), rule, tg, sc, same, field)
                w_src = 0.5 * sc[:, 0] * mesh.weights_m[cols]
                block *= w_src[:, None] if field else w_src
                _add_block(out, rows, cols, block)

    def _remainder_block(self, t, s, rule, tg, sc, same: bool, field: bool) -> np.ndarray:
        """Remainder (M, N) or (M, N, 2) of targets ``tg`` (M, 2) in slab t and sources
        ``sc`` (N, 2) in slab s per unit ring weight r'/2 ds'. ``same``: the targets are the
        sources (the collocation), so both sides share the Bessel and exponential factors and
        the block is U diag(w) U^T."""
        k, wk = rule.k, rule.w
        sj0 = _per_value(j0, sc[:, 0], k)
        tj0 = sj0 if same else _per_value(j0, tg[:, 0], k)
        exps: dict[tuple[int, float, bool], np.ndarray] = {}

        def decay(sign: int, ref: float, target: bool) -> np.ndarray:
            key = (sign, ref, target and not same)
            if key not in exps:
                z = (tg if key[2] else sc)[:, 1]
                exps[key] = _per_value(np.exp, -np.maximum(sign * (z - ref), 0.0), k)
            return exps[key]

        # terms sharing a target factor share one product: sum their source sides
        groups: dict[tuple[int, float], np.ndarray] = {}
        for term in self.spectrum.terms(t, s, k):
            if term.direct:
                continue
            side = (sj0 * decay(term.s_sign, term.s_ref, False)) * (wk * (term.coef - term.limit))
            key_t = (term.t_sign, term.t_ref)
            groups[key_t] = groups[key_t] + side if key_t in groups else side
        if not field:
            return sum((tj0 * decay(*key, True)) @ side.T for key, side in groups.items())
        tj1 = _per_value(j1, tg[:, 0], k) * k
        block = np.zeros((len(tg), len(sc), 2))
        for (t_sign, t_ref), side in groups.items():
            ua = decay(t_sign, t_ref, True)
            block[..., 0] += (tj1 * ua) @ side.T
            block[..., 1] += (t_sign * tj0 * ua * k) @ side.T
        return block


def _per_value(fn, x: np.ndarray, k: np.ndarray) -> np.ndarray:
    """fn(x k) (M, Q) for values x (M,) and nodes k (Q,), evaluated once per distinct x
    (nodes on a wall share their radius, nodes on a face their height)."""
    xu, inv = np.unique(x, return_inverse=True)
    return fn(np.outer(xu, k))[inv]


def _add_block(out: np.ndarray, rows: np.ndarray, cols: np.ndarray, block: np.ndarray) -> None:
    """out[rows, cols] += block (rows (M,), cols (N,) ascending); in place, without the
    fancy-indexed copy when they cover the whole matrix."""
    if len(rows) == out.shape[0] and len(cols) == out.shape[1]:
        out += block
    else:
        out[np.ix_(rows, cols)] += block

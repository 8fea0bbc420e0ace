"""Axisymmetric solve with dielectric regions and planar layers (free + polarisation charge).

Unknowns: a ring density q (C/m^2) on every conductor node and on every dielectric interface
node, all radiating through the Green's function G_b of the planar background (layers,
ground plane; :mod:`elopt.physics.bem_axi.layered_kernel`), so phi(x) = (1/eps0) int G_b q ds'
(G_b includes 1/eps of the background at the source). Regions are
accounted for by q on their boundaries: the polarisation charge relative to the background.

Conductor node x on conductor k (first kind):

    (1/eps0) int G_b(x, x') q(x') ds' = V_k - phi0(z),

phi0 the unperturbed potential of the applied field: E0 in the layout's medium, D_z = eps0
eps_m E0 continuous through the layers, so phi0 = -eps_m E0 int_0^z dz / eps_r(z) (piecewise
linear; -E0 z without layers).

Interface node x between eps_- (inside the region) and eps_+ (outside), normal n from - to +.
With E^{+-} the normal fields on either side, the principal value E^PV = (E^+ + E^-)/2 (the
normal derivative of the ring kernel, K(m) and E(m) terms, plus the applied field) and the
jump of the background displacement eps_b+ E^+ - eps_b- E^- = q / eps0 (eps_b+- the
background just off either side; equal except on a layer face), no free charge on a
dielectric, eps_+ E^+ = eps_- E^-, is the second-kind equation

    q(x) + 2 eps0 kappa(x) E^PV[q](x) = -eps0 eps_m E0 n_z (eps_+/eps_b+ - eps_-/eps_b-)
                                         (eps_b+ + eps_b-) / (eps_+ + eps_-),
    kappa = (eps_+ eps_b- - eps_- eps_b+) / (eps_+ + eps_-)   (= eps_b lambda off faces,
    lambda = (eps_+ - eps_-) / (eps_+ + eps_-)),

the right side from the applied normal field eps_m E0 n_z / eps_b+- on either side (-2 eps0
kappa E0 n_z without layers).

E^PV is taken from the means M(d) of the normal fields a distance d off both sides
(computed with the graded near-field rules; the mean cancels the jump exactly), extrapolated
as 2 M(d) - M(2d) with d = 1e-5 panel lengths, which leaves an O(d^2) error; without layers
only the node's own panel is offset (d, 2d, 4d, cubic extrapolation) and the others are
summed at the node itself, in one compiled pass
(:mod:`elopt.physics.bem_axi.bound_rows`). Free charge on a
closed conductor's face touching medium eps_f: sigma_f = (eps_f / eps_b+) q (only the outside
carries field: eps_b+ E = q / eps0, D_n = eps_f E); the field there is sigma_f / (eps0 eps_f).
An open sheet's faces follow from E_front - E_back = 2 E^PV and the same displacement jump.
C_ij is the free charge on conductor i with conductor j at 1 V, the others at 0. Where an
interface ends on a conductor (a junction of metal and two media) the density is singular like at a sharp corner:
the conductor's curve is graded there, and a peak field found there is flagged singular.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from functools import cached_property, lru_cache
from typing import Any

import numpy as np
import scipy.linalg

from elopt.physics.bem_axi.bound_rows import principal_normal_field_matrix
from elopt.physics.bem_axi.dielectric_geometry import (
    DielectricGeometry,
    build_dielectric_geometry,
    junction_exponents,
    node_piece,
    piece_media,
    region_outline,
)
from elopt.physics.bem_axi.layered_kernel import LayeredKernel, applied_potential
from elopt.physics.bem_axi.mesh import AxiMesh, MeshRule, build_mesh, panel_geometry
from elopt.physics.bem_axi.operators import collocation_matrix
from elopt.physics.bem_axi.solve import (
    COARSE_ENTRY_ERROR,
    COARSE_RULE,
    CONDUCTOR_COARSE_RULE,
    DENSE_BYTES_PER_ENTRY,
    default_order,
    mesh_rule,
)
from elopt.physics.errors import GeometryError, SolverError
from elopt.physics.geometry import Corner, Curve
from elopt.physics.layout import EPS0_F_PER_M, Layout, driven
from elopt.physics.media import LayerStack
from elopt.physics.quadrature import lagrange_matrix
from elopt.physics.refinement import (
    Convergence,
    LevelPeak,
    LevelPlan,
    SolveOptions,
    make_options,
    peaks_per_conductor,
    refine,
)
from elopt.physics.solution import excitation_potentials

#: Offset (in panel lengths) of the points whose mean normal field gives the principal value.
PV_OFFSET = 1e-5
#: A conductor piece whose points all lie this close to a layer face (relative to the layout
#: size) rests on it.
ON_FACE_TOL = 1e-9
#: Relative errors refinement does not reduce (capacitance, peak) per nodes per panel: the
#: principal-value extrapolation (measured 5e-11 with 4 and 1.5e-10 with 6 nodes on
#: docs/references.md item 11) and the truncated Hankel remainder (1e-13); the peak floors
#: are those of the bare solver.
NOISE_FLOORS = {4: (3e-10, 1e-8), 6: (3e-10, 1e-9), 8: (3e-10, 1e-9)}


@dataclass(frozen=True)
class _GradedCurve(Curve):
    """A curve graded at interface junctions by their strength: ``joint_angles`` (piece
    index, opening angle) sets the corner at the joint after that piece to the conductor
    angle of the same exponent (:func:`equivalent_angle`; singular below pi), replacing a
    tangent break there; ``smooth_ends`` (start, end) drops a sheet end's free-edge corner
    where the junction is regular."""

    joint_angles: tuple[tuple[int, float], ...] = ()
    smooth_ends: tuple[bool, bool] = (False, False)

    def corners(self) -> tuple[Corner, ...]:
        joints = dict(self.joint_angles)
        out = [
            c
            for c in super().corners()
            if not (c.angle == 0.0 and self.smooth_ends[int(c.at_end)])
            and not (c.at_end and c.angle > 0.0 and c.piece_index in joints)
        ]
        out += [Corner(self.pieces[i].end, i, True, a) for i, a in self.joint_angles]
        return tuple(out)


def equivalent_angle(nu: float) -> float:
    """Opening angle (rad) of a conductor corner whose density goes like rho^(nu - 1) in one
    medium (nu = pi / (2 pi - angle)); nu = 0 (unknown) gives a free edge."""
    return 0.0 if nu <= 0.0 else 2.0 * math.pi - math.pi / min(nu, 4.0)


def _normal_sign(curve: Curve) -> float:
    if curve.kind == "sheet":
        return 1.0
    o = region_outline(curve)
    x, y = o[:, 0], o[:, 1]
    return 1.0 if np.sum(x[:-1] * y[1:] - x[1:] * y[:-1]) >= 0 else -1.0


@dataclass(frozen=True)
class DielectricModel:
    """Everything about a layout that does not depend on the refinement level."""

    layout: Layout
    geom: DielectricGeometry
    mesh_layout: Layout  # conductors with junction-graded curves
    chain_layouts: tuple[Layout, ...]
    size: float
    singular_junctions: np.ndarray  # (J, 2) the junctions whose density is singular
    loose: bool  # regular junctions graded like blunt corners (loose requests)

    @cached_property
    def conductor_pieces(self) -> tuple[tuple[np.ndarray, np.ndarray, np.ndarray], ...]:
        """Per conductor, per piece of its curve (level-independent): the media (P, 2) on the
        normal side and the other, the layer face it rests on (P,; NaN: none) and the arc
        length (P,) m from the curve's start to the piece's end."""
        out = []
        for cond in self.layout.conductors:
            pieces = cond.shape.pieces
            media = piece_media(
                self.geom, cond.shape, _normal_sign(cond.shape), f"conductor '{cond.name}'"
            )
            heights = [face_height(pc, self.layout.layer_stack, self.size) for pc in pieces]
            ends = np.cumsum([pc.length for pc in pieces])
            out.append((media, np.asarray(heights), ends))
        return tuple(out)


#: Mesh rule of loose requests (the homogeneous solver's COARSE_RULE would apply) for
#: layouts with regions but no layers: the conductors-only solves' ratio-8 grading, two steps at level 0 and one per
#: level, neighbours within a factor 8. Measured on the spindle probe with a spacer
#: (tests/benchmarks/bench_axi_dielectric.py): 128 + 256 unknowns against 164 + 328, the
#: level-1 error 0.32 times the change that estimates it; the dielectric honesty tests pass.
#: Without the conductors-only rule's mapped corner panels (the bound-charge rows and the
#: junction grading do not handle them).
REGION_COARSE_RULE = replace(CONDUCTOR_COARSE_RULE, mapped_steps=None)
#: Relative error of the conductor and bound-charge rows' entries with REGION_COARSE_RULE
#: (the homogeneous solve's COARSE_ENTRY_ERROR; 1e-8 otherwise), and the noise floors it sets
#: (capacitance, peak). Measured as the change against 1e-8 entries, levels 0-3, on the
#: published shell (docs/references.md item 11, eps_r 4) and the demo probe's spacer (eps_r 3
#: and 80): C moves by 5.7e-7 at level 0, 1.8e-7 at level 1, 6e-8 at level 2; the largest
#: surface charge density by 6.1e-6 (a bound on the peak field's change).
REGION_ENTRY_ERROR = COARSE_ENTRY_ERROR
REGION_ENTRY_FLOORS = (3e-7, 1e-5)
#: A junction exponent at least this is regular: the field stays finite there.
REGULAR_EXPONENT = 1.0 - 1e-6


@lru_cache(maxsize=8)
def dielectric_model(layout: Layout, loose: bool = False) -> DielectricModel:
    """Validate the layout's regions and layers and prepare the meshes' layouts.

    Every interface junction is graded like a singular corner, except, when ``loose`` (the
    coarse mesh rule of loose requests), a regular one (exponent >= 1, :func:`junction_exponents`):
    the conductor's joint like a blunt corner, the interface's end not at all. Regular is not
    smooth: where the medium and the wall's curvature change together the density keeps a
    weak term; measured on the spindle probe with a spacer
    (tests/benchmarks/bench_axi_dielectric.py), without grading per level a 1e-8 request
    needs 3.5 times the unknowns, while at 1e-4 the blunt grading halves them (true error 3x
    below the estimate).
    """
    geom = build_dielectric_geometry(layout)
    size = max(c.shape.size for c in layout.conductors)
    tol = 1e-7 * size
    # interface junctions are graded like a sharp corner, a regular one under ``loose`` like
    # a blunt corner of the same exponent; points where a conductor leaves a layer face like
    # a sharp corner (the field there stays finite but varies on ever smaller scales, see
    # layer_face_junctions)
    nu = junction_exponents(geom, geom.junctions, tol)
    blunt = loose & (nu >= REGULAR_EXPONENT)
    angles = [equivalent_angle(v) if b else math.pi / 2 for v, b in zip(nu, blunt, strict=True)]
    face = layer_face_junctions(layout, size)
    points = np.concatenate([geom.junctions, face])
    angles += [math.pi / 2] * len(face)
    conductors = [
        replace(cond, shape=_graded_at(cond.shape, points, angles, tol))
        for cond in layout.conductors
    ]
    mesh_layout = Layout(tuple(conductors), eps_r=layout.eps_r, ground_plane=layout.ground_plane)
    regular = geom.junctions[blunt]
    chain_layouts = tuple(
        Layout((driven(f"{ch.region}#{k}", _graded_chain(ch.curve, geom, regular, tol), 0.0),))
        for k, ch in enumerate(geom.chains)
    )
    _check_layers(layout, size)
    singular = geom.junctions[nu < REGULAR_EXPONENT]
    return DielectricModel(layout, geom, mesh_layout, chain_layouts, size, singular, loose)


def layer_face_junctions(layout: Layout, size: float) -> np.ndarray:
    """Joints (J, 2) where a conductor leaves a layer face it rests on: one piece lies along
    the face, the next one does not. Metal, layer and the medium above meet there. Where the
    conductor leaves tangentially (a rounded rim on a sheet) the field stays finite but varies
    on ever smaller scales towards the joint: in the thin wedge of medium between rim and face
    it tends to eps_layer / eps_medium times the field in the layer at the rim (D_n
    continuous; measured). The mesh is graded there like at a sharp corner; a leave at an
    angle is a corner of the curve and graded anyway."""
    stack = layout.layer_stack
    out = []
    for zi in stack.interfaces_m:
        for cond in layout.conductors:
            curve = cond.shape
            pieces = curve.pieces
            flat = [face_height(p, stack, size) == zi for p in pieces]
            pairs = list(zip(range(len(pieces) - 1), range(1, len(pieces)), strict=True))
            if curve.kind == "ring":
                pairs.append((len(pieces) - 1, 0))
            for i, j in pairs:
                if flat[i] != flat[j]:
                    out.append(pieces[i].end)
    return np.asarray(out, float).reshape(-1, 2)


def face_height(piece, stack: LayerStack, size: float) -> float:
    """Height of the layer face ``piece`` lies along (within ON_FACE_TOL), else NaN."""
    z = piece.points(np.linspace(-1.0, 1.0, 9))[:, 1]
    for zi in stack.interfaces_m:
        if np.all(np.abs(z - zi) <= ON_FACE_TOL * size):
            return float(zi)
    return math.nan


def _graded_chain(curve: Curve, geom: DielectricGeometry, regular: np.ndarray, tol: float) -> Curve:
    """The chain's curve, graded like a sharp corner at smooth joints where another interface
    ends (a layer face crossing a region meets its side there: the density is singular); its
    ends are free edges except at ``regular`` junctions (J, 2), which are not graded."""
    ends = [
        e for ch in geom.chains if ch.curve is not curve for e in (ch.curve.start, ch.curve.end)
    ]
    graded = _graded_at(curve, ends, [math.pi / 2] * len(ends), tol)
    smooth = tuple(
        bool(len(regular)) and float(np.min(np.linalg.norm(regular - np.asarray(e), axis=1))) <= tol
        for e in (curve.start, curve.end)
    )
    if curve.kind != "sheet" or not any(smooth):
        return graded
    joints = graded.joint_angles if isinstance(graded, _GradedCurve) else ()
    return _GradedCurve(curve.pieces, joints, smooth)


def _graded_at(curve: Curve, points, angles: list[float], tol: float) -> Curve:
    """``curve`` with a corner of opening angle ``angles[k]`` at every joint between pieces
    that lies within ``tol`` (m) of ``points[k]`` ((K, 2) or a list of (r, z); the smallest
    angle where several do); unchanged when none does."""
    pts = np.asarray(points, dtype=float).reshape(-1, 2)
    if not len(pts):
        return curve
    n = len(curve.pieces)
    joints = []
    for i in range(n if curve.kind == "ring" else n - 1):
        near = np.linalg.norm(pts - np.asarray(curve.pieces[i].end), axis=1) <= tol
        if np.any(near):
            joints.append((i, float(min(np.asarray(angles)[near]))))
    return _GradedCurve(curve.pieces, tuple(joints)) if joints else curve


def _check_layers(layout: Layout, size: float) -> None:
    stack = layout.layer_stack
    ifaces = stack.interfaces_m
    if len(ifaces) == 0:
        return
    two_half = len(ifaces) == 1 and not layout.ground_plane
    for cond in layout.conductors:
        pts = cond.shape.sample(32)
        for zi in ifaces:
            lo, hi = float(pts[:, 1].min()), float(pts[:, 1].max())
            if not (lo < zi < hi):
                continue
            if not two_half:
                layer = next(
                    (ly for ly in layout.layers if zi in (ly.z_bottom_m, ly.z_top_m)), None
                )
                lname = layer.name if layer is not None else "?"
                raise GeometryError(
                    f"conductor '{cond.name}': reaches into layer '{lname}' (conductor spans z = "
                    f"{lo:.6g} .. {hi:.6g} m, layer face at z = {zi:.6g} m); conductors must lie "
                    "in one gap between layers (a layer may not bury a conductor)"
                )
            for piece in cond.shape.pieces:
                zz = piece.points(np.linspace(-1, 1, 33))[:, 1]
                if zz.min() < zi - 1e-9 * size and zz.max() > zi + 1e-9 * size:
                    raise GeometryError(
                        f"conductor '{cond.name}': a piece from ({piece.start[0]:.6g}, "
                        f"{piece.start[1]:.6g}) to ({piece.end[0]:.6g}, {piece.end[1]:.6g}) m "
                        f"crosses the interface z = {zi:.6g} m; split it at the interface"
                    )


def applied_displacement(layout: Layout) -> float:
    """d0 = D0 / eps0 (V/m) of the applied field: E0 (``applied_field_V_per_m``) is the field
    in the layout's medium, so D0 = eps0 eps_r E0 is uniform and E_z = d0 / eps_r(z) in every
    layer (:func:`elopt.physics.bem_axi.layered_kernel.applied_potential`)."""
    return layout.applied_field_V_per_m * layout.eps_r


def _concat(meshes: list[AxiMesh]) -> AxiMesh:
    """One mesh of several (panel-major arrays joined; conductor indices renumbered)."""
    base = meshes[0]
    offset = 0
    parts: dict[str, list] = {k: [] for k in ("conductor", "arc_m")}
    for m in meshes:
        parts["conductor"].append(m.conductor + offset)
        parts["arc_m"].append(m.arc_m)
        offset += int(m.conductor.max()) + 1 if len(m.conductor) else 0
    fields = {}
    for name in (
        "kind",
        "coef",
        "length_m",
        "center_m",
        "at_corner",
        "points_m",
        "tangents",
        "normals",
        "jac_m",
        "weights_m",
    ):
        fields[name] = np.concatenate([getattr(m, name) for m in meshes])
    fields["interp_jac"] = np.concatenate([m.density_scale for m in meshes])
    return replace(
        base,
        conductor=np.concatenate(parts["conductor"]),
        arc_m=np.concatenate(parts["arc_m"]),
        **fields,
    )


@dataclass(frozen=True, eq=False)
class DielectricLevel:
    """One refinement level: the joined mesh (conductor nodes first), the kernel, the
    solutions u = q / eps0 (N, n + 1) per unit potential column and the applied field, the
    free charge density on conductor nodes (Nc, n + 1), per-node media, and C."""

    layout: Layout
    junctions: np.ndarray  # (J, 2) interface junction points (singular like corners)
    mesh: AxiMesh
    n_conductor_nodes: int
    kernel: LayeredKernel
    u: np.ndarray
    sigma_free: np.ndarray
    sigma_faces: np.ndarray  # (Nc, 2, n + 1) free density on front / back face
    eps_face: np.ndarray  # (Nc, 2) medium on the front / back face of conductor nodes
    eps_bg: np.ndarray  # (N, 2) background permittivity on the normal side / other side
    capacitance_F: np.ndarray
    applied_charges_C: np.ndarray

    @property
    def n_unknowns(self) -> int:
        return self.mesh.n_nodes

    def excitation(self) -> tuple[np.ndarray, np.ndarray]:
        """Conductor potentials (n,) V and the node solution u (N,) at the excitation."""
        volts = excitation_potentials(self.layout, self.capacitance_F, self.applied_charges_C)
        n = len(volts)
        return volts, self.u[:, :n] @ volts + self.u[:, n]

    @cached_property
    def faces(self) -> np.ndarray:
        """Free density (Nc, 2) on the front / back face of conductor nodes at the excitation;
        for a sheet in one medium the total is split by the normal field just off each face."""
        volts, u = self.excitation()
        n = len(volts)
        faces = self.sigma_faces[:, :, :n] @ volts + self.sigma_faces[:, :, n]
        nc = self.n_conductor_nodes
        owner = self.mesh.node_conductor[:nc]
        sheet = np.array([c.shape.kind == "sheet" for c in self.layout.conductors])[owner]
        bg = self.eps_bg[:nc]
        uniform = (self.eps_face[:, 0] == self.eps_face[:, 1]) & (bg[:, 0] == bg[:, 1])
        idx = np.nonzero(sheet & uniform)[0]
        if len(idx):
            # one column, the excitation: sheet_face_fields adds E0 n_z to it
            e_front, e_back = sheet_face_fields(
                self.kernel,
                self.mesh,
                idx,
                u[:, None],
                self.eps_bg,
                applied_displacement(self.layout),
            )
            faces[idx, 0] = EPS0_F_PER_M * self.eps_face[idx, 0] * e_front[:, 0]
            faces[idx, 1] = EPS0_F_PER_M * self.eps_face[idx, 1] * e_back[:, 0]
        return faces

    def peaks(self) -> tuple[LevelPeak, ...]:
        return self._peaks

    @cached_property
    def _peaks(self) -> tuple[LevelPeak, ...]:
        """Per conductor: the peak of |sigma_face| / (eps0 eps_face) over the interpolated
        densities (4p + 1 samples per panel); singular at corners and interface junctions."""
        mesh = self.mesh
        p = mesh.order
        nc = self.n_conductor_nodes
        npan = nc // p
        tau = np.linspace(-1.0, 1.0, 4 * p + 1)
        lag = lagrange_matrix(tau, p).T
        e = np.abs(self.faces) / (EPS0_F_PER_M * self.eps_face)
        vals = np.maximum(e[:, 0].reshape(-1, p) @ lag, e[:, 1].reshape(-1, p) @ lag)
        pts, _ = panel_geometry(
            mesh.kind[:npan], mesh.coef[:npan], np.broadcast_to(tau, (npan, len(tau)))
        )
        singular = np.repeat(mesh.at_corner[:npan], len(tau))
        flat = pts.reshape(-1, 2)
        if len(self.junctions):
            reach = np.repeat(1.01 * mesh.length_m[:npan], len(tau))
            dist = np.min(np.linalg.norm(flat[:, None, :] - self.junctions[None], axis=2), axis=1)
            singular = singular | (dist <= reach)
        return peaks_per_conductor(
            self.layout.names,
            np.repeat(mesh.conductor[:npan], len(tau)),
            vals.ravel(),
            flat,
            singular,
        )


def build_level_mesh(
    model: DielectricModel,
    level: int,
    order: int,
    rule: MeshRule | None = None,
    meshes: tuple[AxiMesh, ...] | None = None,
):
    """Joined mesh and per-node data of one level: the media on conductor faces (Nc, 2), inside
    and outside interface nodes (Ni,), and the layer face each node rests on (N,; NaN: none).
    ``rule`` grades the meshes (None: the default rule of ``order``); ``meshes`` are those of
    :func:`level_meshes` when already built."""
    if meshes is None:
        meshes = level_meshes(model, level, order, rule)
    mesh_c = meshes[0]
    mesh = _concat(list(meshes))
    nc = mesh_c.n_nodes
    normals = mesh.normals.copy()
    eps_face = np.empty((nc, 2))
    face_z = np.full(mesh.n_nodes, math.nan)
    # the piece of a node: that of its panel, found by the arc length of the panel's middle
    # (the graded mesh curves keep the conductors' pieces)
    mid_arc = np.repeat(mesh_c.arc_m.reshape(-1, order).mean(axis=1), order)
    for ci, (media, heights, ends) in enumerate(model.conductor_pieces):
        idx = np.nonzero(mesh_c.node_conductor == ci)[0]
        piece = np.searchsorted(ends[:-1], mid_arc[idx], side="right")
        eps_face[idx] = media[piece]
        face_z[idx] = heights[piece]
    iface_in, iface_out = [], []
    start = nc
    for ch, m in zip(model.geom.chains, meshes[1:], strict=True):
        sl = slice(start, start + m.n_nodes)
        tan = m.tangents
        normals[sl] = ch.normal_sign * np.stack([tan[:, 1], -tan[:, 0]], axis=1)
        piece = node_piece(ch.curve, m.points_m)
        iface_in.append(np.full(m.n_nodes, ch.eps_inside))
        iface_out.append(np.asarray(ch.eps_outside)[piece])
        start += m.n_nodes
    mesh = replace(mesh, normals=normals)
    eps_in = np.concatenate(iface_in) if iface_in else np.zeros(0)
    eps_out = np.concatenate(iface_out) if iface_out else np.zeros(0)
    return mesh, nc, eps_face, eps_in, eps_out, face_z


def principal_value_normal_field(
    kernel: LayeredKernel,
    mesh: AxiMesh,
    rows: np.ndarray,
    delta: np.ndarray,
    entry_error: float | None = None,
) -> np.ndarray:
    """(R, N) principal value of the normal field at nodes ``rows`` per q ds'/eps0: one
    compiled pass without layers (:func:`principal_normal_field_matrix`, entries to relative
    error ``entry_error``, default the operators' own), else
    :meth:`LayeredKernel.principal_value_normal_field`."""
    if kernel.kind == "homogeneous":
        gp = kernel.stack.ground_plane
        pv = principal_normal_field_matrix(mesh, rows, delta, gp, entry_error)
        return pv / kernel.eps_default
    return kernel.principal_value_normal_field(mesh, rows, delta)


def sheet_face_fields(
    kernel: LayeredKernel,
    mesh: AxiMesh,
    rows: np.ndarray,
    u: np.ndarray,
    eps_bg: np.ndarray,
    applied: float,
) -> tuple[np.ndarray, np.ndarray]:
    """Outward normal field (R, cols) on the front and back face of sheet nodes ``rows``.

    The principal value (the mean over both sides) gives E_front - E_back = 2 PV; the jump of
    the background displacement gives eps_bg+ E_front + eps_bg- E_back = u (u = q / eps0 per
    column, eps_bg (N, 2) the background on the normal side and the other; they differ only for
    a sheet resting on a layer face). The last column, the applied-field one, adds the mean of
    the applied normal fields on both faces, d0 n_z (1/eps_bg+ + 1/eps_bg-) / 2 (d0 = D0 / eps0,
    :func:`applied_displacement`), to PV.
    """
    delta = PV_OFFSET * mesh.length_m[rows // mesh.order][:, None]
    pv = principal_value_normal_field(kernel, mesh, rows, delta) @ u
    bp, bm = eps_bg[rows, 0][:, None], eps_bg[rows, 1][:, None]
    pv[:, -1] += applied * mesh.normals[rows, 1] * 0.5 * (1.0 / bp + 1.0 / bm)[:, 0]
    e_back = (u[rows] - 2.0 * bp * pv) / (bp + bm)
    return e_back + 2.0 * pv, e_back


def _face_sigma(
    kernel: LayeredKernel,
    mesh: AxiMesh,
    u: np.ndarray,
    nc: int,
    eps_face: np.ndarray,
    eps_bg: np.ndarray,
    sheet: np.ndarray,
    applied: float,
) -> np.ndarray:
    """Free density (Nc, 2, cols) on the front and back face of every conductor node."""
    cols = u.shape[1]
    out = np.zeros((nc, 2, cols))
    # a closed conductor has field on its outside only: q = eps0 eps_bg+ E there
    closed = ~sheet
    out[closed, 0, :] = (eps_face[closed, 0] / eps_bg[:nc][closed, 0])[:, None] * u[:nc][closed]
    uniform = (eps_face[:, 0] == eps_face[:, 1]) & (eps_bg[:nc, 0] == eps_bg[:nc, 1])
    same = sheet & uniform
    # one medium on both faces: the total is (eps_f / eps_bg) q; the split matters only for
    # the field and is done at the excitation (DielectricLevel.faces)
    out[same, 0, :] = (eps_face[same, 0] / eps_bg[:nc][same, 0])[:, None] * u[:nc][same]
    idx = np.nonzero(sheet & ~uniform)[0]
    if len(idx):
        e_front, e_back = sheet_face_fields(kernel, mesh, idx, u, eps_bg, applied)
        out[idx, 0, :] = eps_face[idx, 0][:, None] * e_front
        out[idx, 1, :] = eps_face[idx, 1][:, None] * e_back
    return out * EPS0_F_PER_M


def background_sides(
    stack: LayerStack, z_m: np.ndarray, normal_z: np.ndarray, face_z_m: np.ndarray
) -> np.ndarray:
    """Background permittivity (N, 2) on the normal side and the other side of nodes at
    heights ``z_m`` (N,) with normal z-components ``normal_z`` (N,).

    Only a node whose piece rests on a layer face (``face_z_m`` (N,) its height, NaN for
    none) has two backgrounds; any other node has the medium at its own height on both sides,
    however close to a face it lies (a rim leaving a face tangentially: a probe a fixed
    distance off the node would land across the face once the mesh is fine enough).
    """
    z = np.asarray(z_m, dtype=float)
    out = np.repeat(stack.eps_r_at(z)[:, None], 2, axis=1)
    for zi in np.unique(face_z_m[np.isfinite(face_z_m)]):
        on = face_z_m == zi
        up = normal_z[on] > 0
        above, below = stack.eps_r_above(float(zi)), stack.eps_r_below(float(zi))
        out[on, 0] = np.where(up, above, below)
        out[on, 1] = np.where(up, below, above)
    return out


def solve_dielectric_level(
    model: DielectricModel,
    level: int,
    order: int,
    rule: MeshRule | None = None,
    meshes: tuple[AxiMesh, ...] | None = None,
    entry_error: float | None = None,
) -> DielectricLevel:
    """Assemble and solve one refinement level (one LU for every column); ``entry_error``:
    relative error of the conductor and bound-charge rows' entries in a layout without layers
    (default the operators' own)."""
    layout = model.layout
    mesh, nc, eps_face, eps_in, eps_out, face_z = build_level_mesh(
        model, level, order, rule, meshes
    )
    kernel = LayeredKernel(
        layout.layer_stack,
        mesh.points_m[:, 1],
        model.size,
        "conductors and regions",
    )
    n = len(layout.conductors)
    d0 = applied_displacement(layout)
    owner = mesh.node_conductor
    sheet = np.array([c.shape.kind == "sheet" for c in layout.conductors])[owner[:nc]]
    eps_bg = background_sides(layout.layer_stack, mesh.points_m[:, 1], mesh.normals[:, 1], face_z)
    if kernel.kind == "homogeneous":
        a = collocation_matrix(mesh, kernel.stack.ground_plane, entry_error) / kernel.eps_default
    else:
        a = kernel.collocation(mesh)
    rhs = np.zeros((mesh.n_nodes, n + 1))
    rhs[np.arange(nc), owner[:nc]] = 1.0
    if d0:
        rhs[:nc, n] = -applied_potential(layout.layer_stack, d0, mesh.points_m[:nc, 1])
    if mesh.n_nodes > nc:
        ii = np.arange(nc, mesh.n_nodes)
        nrm = mesh.normals[ii]
        delta = PV_OFFSET * mesh.length_m[ii // mesh.order][:, None]
        pv = principal_value_normal_field(kernel, mesh, ii, delta, entry_error)
        # eps_+ E+ = eps_- E-, E+ + E- = 2 PV, eps_bg+ E+ - eps_bg- E- = u (module text)
        bp, bm = eps_bg[ii, 0], eps_bg[ii, 1]
        scale = 2.0 * (eps_out * bm - eps_in * bp) / (eps_out + eps_in)
        rows = scale[:, None] * pv
        rows[np.arange(len(ii)), ii] += 1.0
        a[ii] = rows
        # applied normal field d0 n_z / eps_bg on either side (module text)
        rho = eps_out / bp - eps_in / bm
        rhs[ii, n] = -d0 * nrm[:, 1] * rho * (bp + bm) / (eps_out + eps_in)
    if not np.all(np.isfinite(a)):
        raise SolverError("dielectric system matrix has non-finite entries; check the geometry")
    lu = scipy.linalg.lu_factor(a, check_finite=False)
    u = scipy.linalg.lu_solve(lu, rhs, check_finite=False)
    faces = _face_sigma(kernel, mesh, u, nc, eps_face, eps_bg, sheet, d0)
    sigma_free = faces.sum(axis=1)
    area = mesh.ring_area_m2[:nc]
    charges = np.zeros((n, n + 1))
    np.add.at(charges, owner[:nc], sigma_free * area[:, None])
    return DielectricLevel(
        layout=layout,
        junctions=model.singular_junctions,
        mesh=mesh,
        n_conductor_nodes=nc,
        kernel=kernel,
        u=u,
        sigma_free=sigma_free,
        sigma_faces=faces,
        eps_face=eps_face,
        eps_bg=eps_bg,
        capacitance_F=charges[:, :n],
        applied_charges_C=charges[:, n],
    )


def solve_dielectric(layout: Layout, options: SolveOptions | None = None, **overrides: Any):
    """Solve a layout with regions and/or layers through the shared refinement loop
    (:func:`elopt.physics.refinement.refine`; options as for
    :func:`elopt.physics.bem_axi.solve.solve_axisymmetric`)."""
    from elopt.physics.bem_axi.dielectric_solution import DielectricSolution

    opts = make_options(options, overrides)
    order = opts.order
    tightest = min(opts.rel_accuracy, opts.peak_rel_accuracy or 1.0)
    if order is None:
        order = default_order(tightest)
    if not 2 <= order <= 16:
        raise SolverError(f"order (nodes per panel) must lie in [2, 16], got {order}")
    # the homogeneous solver's rule for this request (coarser grading for loose requests);
    # regions without layers take the ratio-8 one of REGION_COARSE_RULE there
    rule = mesh_rule(order, tightest)
    loose = rule == COARSE_RULE
    entry_error = None
    if loose and not layout.layers:
        rule = REGION_COARSE_RULE
        entry_error = REGION_ENTRY_ERROR
    model = dielectric_model(layout, loose)

    def plan(level: int) -> LevelPlan:
        meshes = level_meshes(model, level, order, rule)
        n = sum(m.n_nodes for m in meshes)
        return LevelPlan(
            level,
            n,
            DENSE_BYTES_PER_ENTRY * n * n,
            "dense solve",
            lambda _: solve_dielectric_level(model, level, order, rule, meshes, entry_error),
        )

    floors = NOISE_FLOORS[max((p for p in NOISE_FLOORS if p <= order), default=4)]
    if entry_error is not None:
        floors = REGION_ENTRY_FLOORS
    # the two-level prior ratio is the shared measured one (changes shrank by 0.01 - 0.08 per
    # level on the dielectric test layouts, below it)
    convergence = Convergence(capacitance_floor=floors[0], peak_floor=floors[1])
    refinement = refine(plan, opts, convergence, covered=layout.estimate_indices)
    return DielectricSolution(layout, model, refinement, order, rule)


def level_meshes(
    model: DielectricModel, level: int, order: int, rule: MeshRule | None = None
) -> tuple[AxiMesh, ...]:
    """Conductor mesh and interface-chain meshes of one level (a level's plan builds them
    once for its count and its solve)."""
    return (build_mesh(model.mesh_layout, level, order, rule),) + tuple(
        build_mesh(lay, level, order, rule) for lay in model.chain_layouts
    )

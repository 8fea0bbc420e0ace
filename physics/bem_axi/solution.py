"""Result of an axisymmetric solve: charges, fields, capacitance matrix and its derivatives.

Points are (r, z) pairs in metres. Surface densities are the node values of the finest
level; the coarser level supplies error estimates. For an open thin sheet the density is the
sum over both faces; each face's share comes from the normal field just off it, and the
reported surface field is that of the more charged face.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np

from elopt.physics.bem_axi.mesh import KIND_MAPPED, AxiMesh, panel_geometry
from elopt.physics.bem_axi.operators import field_matrix, potential_matrix
from elopt.physics.errors import SolverError
from elopt.physics.layout import Layout
from elopt.physics.quadrature import gauss_legendre, lagrange_matrix
from elopt.physics.refinement import LevelPeak, Refinement, peaks_per_conductor
from elopt.physics.solution import ChargeSolution, SurfaceSamples, excitation_potentials

#: Evaluation points per block when building target-by-source matrices.
_CHUNK = 2048


@dataclass(frozen=True, eq=False)
class LevelResult:
    """One refinement level: mesh, unit-potential densities (N, n) in C/m^2 per V,
    the applied-field response (N,), the capacitance matrix (n, n) F and applied charges (n,)."""

    layout: Layout
    mesh: AxiMesh
    sigma_unit: np.ndarray
    sigma_applied: np.ndarray
    capacitance_F: np.ndarray
    applied_charges_C: np.ndarray

    @property
    def n_unknowns(self) -> int:
        return self.mesh.n_nodes

    def peaks(self) -> tuple[LevelPeak, ...]:
        """Peak surface field per conductor at the excitation (see :func:`_peaks`)."""
        return self._peaks

    @cached_property
    def _peaks(self) -> tuple[LevelPeak, ...]:
        return _peaks(self, self.layout)

    @cached_property
    def faces(self) -> np.ndarray:
        """(N, 2) density on the front and back face of every node (:func:`face_densities`)."""
        return face_densities(self, self.layout)

    def excitation(self, layout: Layout) -> tuple[np.ndarray, np.ndarray]:
        """Conductor potentials (n,) V and node densities (N,) at the layout's excitation."""
        volts = excitation_potentials(layout, self.capacitance_F, self.applied_charges_C)
        return volts, self.sigma_unit @ volts + self.sigma_applied


class AxisymmetricSolution(ChargeSolution):
    """See :class:`elopt.physics.solution.ChargeSolution`; ``levels`` holds every level solved."""

    point_dim = 2

    def __init__(self, layout: Layout, refinement: Refinement) -> None:
        self.layout = layout
        self._adopt(refinement)
        fine = self._take_finest_level()
        self.mesh = fine.mesh
        self.level = fine.mesh.level
        self.n_unknowns = fine.mesh.n_nodes

    @property
    def eps(self) -> float:
        return self.layout.eps_F_per_m

    # -- fields anywhere ---------------------------------------------------------------------
    def _blocks(self, points: np.ndarray, build, sigma: np.ndarray) -> np.ndarray:
        pts = np.atleast_2d(np.asarray(points, dtype=float))
        if pts.shape[-1] != 2:
            raise SolverError(f"points must have shape (M, 2) of (r, z) in m, got {pts.shape}")
        if np.any(pts[:, 0] < 0):
            raise SolverError("points must have r >= 0")
        out = [
            np.tensordot(
                build(self.mesh, pts[k : k + _CHUNK], self.layout.ground_plane),
                sigma,
                axes=([1], [0]),
            )
            for k in range(0, len(pts), _CHUNK)
        ]
        return np.concatenate(out) / self.eps

    def potential_at(self, points_m: np.ndarray) -> np.ndarray:
        pts = np.atleast_2d(np.asarray(points_m, dtype=float))
        phi = self._blocks(pts, potential_matrix, self.sigma_C_per_m2)
        return phi - self.layout.applied_field_V_per_m * pts[:, 1]

    def field_at(self, points_m: np.ndarray) -> np.ndarray:
        e = self._blocks(points_m, field_matrix, self.sigma_C_per_m2)
        e[:, 1] += self.layout.applied_field_V_per_m
        return e

    # -- surface -----------------------------------------------------------------------------
    def _nodes_of(self, name: str) -> np.ndarray:
        return np.nonzero(self.mesh.node_conductor == self.layout.index(name))[0]

    def surface_samples(self, conductor: str) -> SurfaceSamples:
        """See :class:`SurfaceSamples`: one profile sample per node (closed body), or two
        (front face +1, then back face -1) on an open sheet."""
        k = self.layout.index(conductor)
        idx = self._nodes_of(conductor)
        idx = idx[np.argsort(self.mesh.arc_m[idx], kind="stable")]
        faces = self._fine.faces[idx]
        normal = self.mesh.normals[idx]
        if self.layout.conductors[k].shape.kind == "sheet":
            face = np.repeat(np.array([1, -1], dtype=np.int8), len(idx))
            sigma = np.concatenate([faces[:, 0], faces[:, 1]])
            idx2 = np.concatenate([idx, idx])
            normal = np.concatenate([normal, -normal])
        else:
            face = np.zeros(len(idx), dtype=np.int8)
            sigma = faces[:, 0]
            idx2 = idx
        return SurfaceSamples(
            conductor=conductor,
            kind="profile",
            points_m=self.mesh.points_m[idx2],
            sigma_C_per_m2=sigma,
            field_V_per_m=np.abs(sigma) / self.eps,
            area_m2=self.mesh.ring_area_m2[idx2],
            face=face,
            normal=normal,
            arc_length_m=self.mesh.arc_m[idx2],
        )

    # -- sensitivities -----------------------------------------------------------------------
    @cached_property
    def _plane_rule(self) -> tuple[np.ndarray, np.ndarray]:
        return _plane_quadrature(self.mesh)

    @cached_property
    def _plane_unit_density(self) -> np.ndarray:
        """Plane charge density (Q, n) on the plane rule for each unit-potential column."""
        r, _ = self._plane_rule
        return self._plane_density_columns(r, self._fine.sigma_unit)

    def _plane_density_columns(self, r_m: np.ndarray, sigma: np.ndarray) -> np.ndarray:
        if not self.layout.ground_plane:
            raise SolverError("the layout has no ground plane (set ground_plane=True)")
        pts = np.stack([np.asarray(r_m, float), np.zeros(len(r_m))], axis=1)
        ez = self._blocks(pts, field_matrix, sigma)[:, 1]
        return self.eps * ez

    def plane_charge_density(self, r_m: np.ndarray) -> np.ndarray:
        """Induced charge density (M,) C/m^2 on the ground plane at radii r_m (M,)."""
        pts = np.stack([np.asarray(r_m, float), np.zeros(len(r_m))], axis=1)
        return self.eps * self.field_at(pts)[:, 1]

    def plane_capacitance_derivative_F_per_m(self) -> np.ndarray:
        r, w = self._plane_rule
        s = self._plane_unit_density
        return np.einsum("q,qi,qj->ij", 2 * np.pi * r * w, s, s) / self.eps

    def plane_sensitivity_density(self, i: int, j: int, points_m: np.ndarray) -> np.ndarray:
        s = self._plane_density_columns(
            np.asarray(points_m, float), self._fine.sigma_unit[:, [i, j]]
        )
        return s[:, 0] * s[:, 1] / self.eps

    def conductor_capacitance_derivative_F_per_m(self, name: str) -> np.ndarray:
        """dC/d(delta) (n, n) F/m for conductor ``name`` translated by delta along +z.

        Hadamard formula dC_ij = (1/eps) integral sigma_i sigma_j n_z dA over its surface.
        """
        k = self.layout.index(name)
        if self.layout.conductors[k].shape.kind == "sheet":
            raise SolverError(
                f"conductor '{name}' is an open sheet; its shape derivative needs the density of "
                "each face, which this solver does not separate"
            )
        idx = self._nodes_of(name)
        s = self._fine.sigma_unit[idx]
        wts = self.mesh.ring_area_m2[idx] * self.mesh.normals[idx, 1]
        return np.einsum("q,qi,qj->ij", wts, s, s) / self.eps


#: Offset, in panel lengths, of the points where a sheet's face fields are evaluated.
_FACE_OFFSET = 1e-7


def face_densities(level: LevelResult, layout: Layout) -> np.ndarray:
    """Charge density (N, 2) on the front (normal side) and back face of every node, C/m^2.

    A closed body carries all its charge on the outside: (sigma, 0). For an open sheet the
    single-layer density is the sum of both faces; each face's share is eps times the normal
    field just off that face (evaluated 1e-7 panel lengths out).
    """
    mesh = level.mesh
    _, sigma = level.excitation(layout)
    faces = np.stack([sigma, np.zeros_like(sigma)], axis=1)
    sheet = np.array([c.shape.kind == "sheet" for c in layout.conductors])[mesh.node_conductor]
    idx = np.nonzero(sheet)[0]
    if len(idx) == 0:
        return faces
    n = mesh.normals[idx]
    delta = _FACE_OFFSET * mesh.length_m[idx // mesh.order][:, None]
    eps = layout.eps_F_per_m
    applied = np.array([0.0, layout.applied_field_V_per_m])
    for col, side in ((0, 1.0), (1, -1.0)):
        pts = mesh.points_m[idx] + side * delta * n
        field = (
            np.tensordot(field_matrix(mesh, pts, layout.ground_plane), sigma, axes=([1], [0])) / eps
        )
        faces[idx, col] = eps * side * np.einsum("ij,ij->i", field + applied, n)
    return faces


def _peaks(level: LevelResult, layout: Layout) -> tuple[LevelPeak, ...]:
    """Per conductor: the peak surface field, its (r, z), and whether it sits at a corner."""
    mesh = level.mesh
    faces = level.faces
    p = mesh.order
    # The peak of the interpolated density, not just of the nodes: 4p + 1 samples per panel.
    tau = np.linspace(-1.0, 1.0, 4 * p + 1)
    mapped = mesh.kind == KIND_MAPPED
    if mapped.any():
        # A mapped panel's density s^(alpha - 1) is unbounded at its corner: sampled from its
        # node nearest the corner on (sigma there is as a graded panel's own corner value).
        x0 = gauss_legendre(p)[0][0]
        inner = x0 + 0.5 * (tau + 1.0) * (1.0 - x0)
        tau = np.tile(tau, (mesh.n_panels, 1))
        tau[mapped] = np.where(mesh.coef[mapped, 4:5] > 0, inner, -inner[::-1])
    pts, _ = panel_geometry(mesh.kind, mesh.coef, np.broadcast_to(tau, (mesh.n_panels, 4 * p + 1)))
    vals = np.maximum(
        np.abs(panel_densities(mesh, faces[:, 0], tau)),
        np.abs(panel_densities(mesh, faces[:, 1], tau)),
    )
    owner = np.repeat(mesh.conductor, 4 * p + 1)
    singular = np.repeat(mesh.at_corner, 4 * p + 1)
    return peaks_per_conductor(
        layout.names, owner, vals.ravel() / layout.eps_F_per_m, pts.reshape(-1, 2), singular
    )


def panel_densities(mesh: AxiMesh, sigma: np.ndarray, tau: np.ndarray) -> np.ndarray:
    """Density (P, S) at parameters ``tau`` ((S,) on every panel, or (P, S)) from node values
    ``sigma`` (N,): each panel's Lagrange interpolant; on a mapped corner panel that of sigma
    times the length element (``mesh.interp_jac``), divided by the element at ``tau``."""
    p = mesh.order
    mapped = mesh.kind == KIND_MAPPED
    if tau.ndim == 1 and not mapped.any():
        return sigma.reshape(-1, p) @ lagrange_matrix(tau, p).T
    tau = np.broadcast_to(tau, (mesh.n_panels, tau.shape[-1]))
    q = (sigma * mesh.density_scale).reshape(-1, p)
    values = np.einsum("bsk,bk->bs", lagrange_matrix(tau, p), q)
    if not mapped.any():
        return values
    _, der = panel_geometry(mesh.kind, mesh.coef, tau)
    return values / np.where(mapped[:, None], np.linalg.norm(der, axis=-1), 1.0)


def _plane_quadrature(mesh: AxiMesh) -> tuple[np.ndarray, np.ndarray]:
    """Radii (Q,) and weights (Q,) (of dr) for integrals over the plane z = 0, r in [0, inf).

    Intervals are no longer than 0.75 times the distance from the plane point to the nearest
    surface node, out to ten times the largest conductor radius; a mapped rule covers the tail.
    """
    xg, wg = gauss_legendre(8)
    nodes = mesh.points_m
    r_far = 10.0 * float(np.max(nodes[:, 0]) + np.max(nodes[:, 1]))
    edges = [0.0]
    while edges[-1] < r_far:
        r = edges[-1]
        scale = float(np.min(np.hypot(nodes[:, 0] - r, nodes[:, 1])))
        edges.append(min(r + 0.75 * scale, r_far))
    e = np.array(edges)
    a, b = e[:-1, None], e[1:, None]
    r = (0.5 * (a + b) + 0.5 * (b - a) * xg).ravel()
    w = (0.5 * (b - a) * wg).ravel()
    xt, wt = gauss_legendre(16)
    s = 0.5 * (xt + 1.0)
    r_tail = r_far / s
    w_tail = 0.5 * wt * r_far / s**2
    return np.concatenate([r, r_tail]), np.concatenate([w, w_tail])

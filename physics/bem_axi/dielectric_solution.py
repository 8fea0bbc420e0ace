"""Result of an axisymmetric solve with dielectrics: free charge, fields, C and derivatives.

Points are (r, z) in metres. Densities on conductors are free charge (C/m^2); the surface
field of a face is sigma_free / (eps0 eps_r of the medium touching that face). Potentials and
fields are available anywhere, inside regions and in every layer included (0 below a grounded
plane); an applied field E0 is the field in the layout's medium (D_z continuous through the
layers).
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from elopt.physics.bem_axi.dielectric_solve import (
    DielectricModel,
    applied_displacement,
    solve_dielectric_level,
)
from elopt.physics.bem_axi.layered_kernel import applied_field_z, applied_potential
from elopt.physics.bem_axi.mesh import MeshRule
from elopt.physics.bem_axi.solution import _plane_quadrature
from elopt.physics.errors import SolverError
from elopt.physics.geometry import Arc, Curve, EllipseArc, Segment
from elopt.physics.layout import EPS0_F_PER_M, Layout
from elopt.physics.refinement import Refinement
from elopt.physics.solution import ChargeSolution, SurfaceSamples

_CHUNK = 1024


@dataclass(frozen=True)
class FiniteDifference:
    """A derivative by central differences at one mesh level (so discretisation errors largely
    cancel between the solves): ``value`` is the Richardson combination D(h) + (D(h) - D(2h))/3
    of the steps h and 2h; ``rel_error_estimate`` = max |D(h) - D(2h)| / 3, entry (i, j) scaled
    by sqrt(|D_ii D_jj|), is the truncation error of the plain D(h) and so an upper estimate
    for ``value``."""

    value: np.ndarray
    step: float
    rel_error_estimate: float


class DielectricSolution(ChargeSolution):
    """See :class:`elopt.physics.solution.ChargeSolution`; ``levels`` holds every level."""

    point_dim = 2

    def __init__(
        self,
        layout: Layout,
        model: DielectricModel,
        refinement: Refinement,
        order: int,
        rule: MeshRule | None = None,
    ) -> None:
        self.layout = layout
        self.model = model
        self.order = order
        self.rule = rule
        self._adopt(refinement)
        fine = self.levels[-1]
        self._fine = fine
        self.mesh = fine.mesh
        self.level = fine.mesh.level
        self.n_unknowns = fine.mesh.n_nodes
        self._d0 = applied_displacement(layout)
        self.capacitance_matrix_F = fine.capacitance_F
        self.potentials_V, self._u = fine.excitation()
        self.charges_C = fine.capacitance_F @ self.potentials_V + fine.applied_charges_C
        n = len(layout.conductors)
        self.sigma_C_per_m2 = fine.sigma_free[:, :n] @ self.potentials_V + fine.sigma_free[:, n]

    # -- fields anywhere ---------------------------------------------------------------------
    def _points(self, points_m: np.ndarray) -> np.ndarray:
        pts = np.atleast_2d(np.asarray(points_m, dtype=float))
        if pts.shape[-1] != 2:
            raise SolverError(f"points must have shape (M, 2) of (r, z) in m, got {pts.shape}")
        if np.any(pts[:, 0] < 0):
            raise SolverError("points must have r >= 0")
        return pts

    def potential_at(self, points_m: np.ndarray) -> np.ndarray:
        pts = self._points(points_m)
        k = self._fine.kernel
        phi = np.concatenate(
            [
                k.potential(self.mesh, pts[i : i + _CHUNK]) @ self._u
                for i in range(0, len(pts), _CHUNK)
            ]
        )
        return phi + applied_potential(self.layout.layer_stack, self._d0, pts[:, 1])

    def field_at(self, points_m: np.ndarray) -> np.ndarray:
        pts = self._points(points_m)
        k = self._fine.kernel
        e = np.concatenate(
            [
                np.tensordot(k.field(self.mesh, pts[i : i + _CHUNK]), self._u, axes=([1], [0]))
                for i in range(0, len(pts), _CHUNK)
            ]
        )
        e[:, 1] += applied_field_z(self.layout.layer_stack, self._d0, pts[:, 1])
        return e

    def eps_r_at(self, points_m: np.ndarray) -> np.ndarray:
        """Relative permittivity (M,) at points (M, 2)."""
        return self.model.geom.eps_r_at(np.atleast_2d(np.asarray(points_m, float)))

    def displacement_at(self, points_m: np.ndarray) -> np.ndarray:
        """D = eps0 eps_r E (M, 2) in C/m^2."""
        pts = np.atleast_2d(np.asarray(points_m, float))
        return EPS0_F_PER_M * self.eps_r_at(pts)[:, None] * self.field_at(pts)

    def bound_charge_C(self, region: str) -> float:
        """Total polarisation charge (C) on the interfaces of ``region`` that border the
        background (at the layout's excitation); zero for a neutral body in one medium."""
        fine = self._fine
        nc = fine.n_conductor_nodes
        names = [r.name for r in self.layout.regions]
        if region not in names:
            raise KeyError(f"no region '{region}'; regions are {names}")
        chains = self.model.geom.chains
        owner = fine.mesh.node_conductor[nc:] - len(self.layout.conductors)
        sel = np.array([chains[int(c)].region == region for c in owner], bool)
        q = EPS0_F_PER_M * self._u[nc:][sel]
        return float(np.sum(q * fine.mesh.ring_area_m2[nc:][sel]))

    # -- surface -----------------------------------------------------------------------------
    def _nodes_of(self, name: str) -> np.ndarray:
        """Conductor nodes (indices into the joined mesh) of conductor ``name``."""
        nc = self._fine.n_conductor_nodes
        return np.nonzero(self.mesh.node_conductor[:nc] == self.layout.index(name))[0]

    def surface_samples(self, conductor: str) -> SurfaceSamples:
        """See :class:`SurfaceSamples`: free charge per node (closed body), or per face (front
        +1, then back -1) on an open sheet; the field is |sigma| / (eps0 eps_r) of the medium
        touching that face."""
        k = self.layout.index(conductor)
        idx = self._nodes_of(conductor)
        idx = idx[np.argsort(self.mesh.arc_m[idx], kind="stable")]
        faces = self._fine.faces[idx]
        eps = self._fine.eps_face[idx]
        normal = self.mesh.normals[idx]
        if self.layout.conductors[k].shape.kind == "sheet":
            face = np.repeat(np.array([1, -1], dtype=np.int8), len(idx))
            sigma = np.concatenate([faces[:, 0], faces[:, 1]])
            eps_s = np.concatenate([eps[:, 0], eps[:, 1]])
            idx2 = np.concatenate([idx, idx])
            normal = np.concatenate([normal, -normal])
        else:
            face = np.zeros(len(idx), dtype=np.int8)
            sigma, eps_s, idx2 = faces[:, 0], eps[:, 0], idx
        return SurfaceSamples(
            conductor=conductor,
            kind="profile",
            points_m=self.mesh.points_m[idx2],
            sigma_C_per_m2=sigma,
            field_V_per_m=np.abs(sigma) / (EPS0_F_PER_M * eps_s),
            area_m2=self.mesh.ring_area_m2[idx2],
            face=face,
            normal=normal,
            arc_length_m=self.mesh.arc_m[idx2],
        )

    # -- sensitivities -----------------------------------------------------------------------
    def _plane_density_columns(self, r_m: np.ndarray, cols: np.ndarray) -> np.ndarray:
        if not self.layout.ground_plane:
            raise SolverError("the layout has no ground plane (set ground_plane=True)")
        fine = self._fine
        pts = np.stack([np.asarray(r_m, float), np.full(len(r_m), 0.0)], axis=1)
        eps = self.model.geom.eps_r_at(pts + np.array([0.0, 1e-9 * self.model.size]))
        f = np.concatenate(
            [
                fine.kernel.field(self.mesh, pts[i : i + _CHUNK])[..., 1]
                for i in range(0, len(pts), _CHUNK)
            ]
        )
        return EPS0_F_PER_M * eps[:, None] * (f @ cols), eps

    def _require_bare_plane(self) -> None:
        if self.layout.layers:
            raise SolverError(
                "with a layer on the target the one-solve plane derivative does not hold; use "
                "standoff_derivative_fd()"
            )

    def plane_capacitance_derivative_F_per_m(self) -> np.ndarray:
        """Hadamard formula dC_ij = int sigma_i sigma_j / (eps0 eps_r) dA over the bare plane
        (eps_r of the medium touching the plane); one solve."""
        self._require_bare_plane()
        r, w = _plane_quadrature(self.mesh)
        n = len(self.layout.conductors)
        s, eps = self._plane_density_columns(r, self._fine.u[:, :n])
        return np.einsum("q,qi,qj->ij", 2 * np.pi * r * w / (EPS0_F_PER_M * eps), s, s)

    def plane_sensitivity_density(self, i: int, j: int, points_m: np.ndarray) -> np.ndarray:
        """sigma_i sigma_j / (eps0 eps_r) on the plane (F/m^3), eps_r of the medium touching it.
        Bare plane: the integrand of :meth:`plane_capacitance_derivative_F_per_m`; under a layer,
        that of the plane moving up into the layer (the layer thinning), a spot indicator."""
        s, eps = self._plane_density_columns(np.asarray(points_m, float), self._fine.u[:, [i, j]])
        return s[:, 0] * s[:, 1] / (EPS0_F_PER_M * eps)

    def _solve_variant(self, layout: Layout) -> np.ndarray:
        """C (n, n) of a perturbed layout at this solution's finest level and order."""
        from elopt.physics.bem_axi.dielectric_solve import dielectric_model

        model = dielectric_model(layout, self.model.loose)
        level = solve_dielectric_level(model, self.level, self.order, self.rule)
        return level.capacitance_F

    def central_difference(self, make_layout, step: float) -> FiniteDifference:
        """dC/dp by central differences of ``make_layout(p_offset)`` at offsets -+h and -+2h,
        h = ``step``, with the Richardson estimate of the truncation error."""
        c = {s: self._solve_variant(make_layout(s * step)) for s in (-2, -1, 1, 2)}
        d1 = (c[1] - c[-1]) / (2 * step)
        d2 = (c[2] - c[-2]) / (4 * step)
        value = d1 + (d1 - d2) / 3.0
        scale = np.sqrt(np.abs(np.outer(np.diag(d1), np.diag(d1)))) + 1e-300
        err = float(np.max(np.abs(d1 - d2) / 3.0 / scale))
        return FiniteDifference(value, step, err)

    def eps_derivative(self, name: str, rel_step: float = 1e-2) -> FiniteDifference:
        """dC/d(eps_r) (n, n) F per unit eps_r of the region or layer ``name``."""
        found = [
            (group, k)
            for group in ("regions", "layers")
            for k, item in enumerate(getattr(self.layout, group))
            if item.name == name
        ]
        if not found:
            raise KeyError(f"no region or layer '{name}'")
        group, k = found[0]
        eps_r = getattr(self.layout, group)[k].eps_r
        return self.central_difference(
            lambda dv: _with_item(self.layout, group, k, eps_r=eps_r + dv), rel_step * eps_r
        )

    def standoff_derivative_fd(self, rel_step: float = 1e-2) -> FiniteDifference:
        """dC/d(delta) (n, n) F/m for the grounded plane and every layer moving up by delta (the
        standoff shrinking), by central differences: conductors and regions move down instead.
        The step is ``rel_step`` times the smallest height of a conductor above the top layer."""
        if not self.layout.ground_plane:
            raise SolverError("the layout has no ground plane (set ground_plane=True)")
        top = max([0.0] + [ly.z_top_m for ly in self.layout.layers])
        low = min(float(c.shape.sample(8)[:, 1].min()) for c in self.layout.conductors)
        h = rel_step * (low - top)

        def make(dz: float) -> Layout:
            conds = tuple(
                replace(c, shape=translate_curve(c.shape, -dz)) for c in self.layout.conductors
            )
            regs = tuple(
                replace(r, shape=translate_curve(r.shape, -dz)) for r in self.layout.regions
            )
            return replace(self.layout, conductors=conds, regions=regs)

        return self.central_difference(make, h)

    def layer_thickness_derivative(self, name: str, rel_step: float = 1e-2) -> FiniteDifference:
        """dC/d(thickness) (n, n) F/m of layer ``name``, its top face moving (bottom fixed)."""
        layers = {ly.name: k for k, ly in enumerate(self.layout.layers)}
        if name not in layers:
            raise KeyError(f"no layer '{name}'; layers are {list(layers)}")
        k = layers[name]
        base = self.layout.layers[k]
        return self.central_difference(
            lambda dt: _with_item(self.layout, "layers", k, z_top_m=base.z_top_m + dt),
            rel_step * base.thickness_m,
        )


def _with_item(layout: Layout, group: str, k: int, **change: float) -> Layout:
    """``layout`` with item ``k`` of its ``regions`` or ``layers`` changed by ``change``."""
    items = list(getattr(layout, group))
    items[k] = replace(items[k], **change)
    return replace(layout, **{group: tuple(items)})


def translate_curve(curve: Curve, dz: float) -> Curve:
    """``curve`` moved by ``dz`` metres along z."""
    pieces = []
    for p in curve.pieces:
        if isinstance(p, Segment):
            pieces.append(Segment((p.start[0], p.start[1] + dz), (p.end[0], p.end[1] + dz)))
        elif isinstance(p, Arc):
            pieces.append(replace(p, center=(p.center[0], p.center[1] + dz)))
        elif isinstance(p, EllipseArc):
            pieces.append(replace(p, center_z=p.center_z + dz))
        else:
            raise TypeError(f"unsupported curve piece {type(p).__name__}")
    return Curve(tuple(pieces))

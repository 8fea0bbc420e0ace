"""Result of a 3-D panel solve: charges, fields, capacitance matrix and shape derivatives.

Points are (x, y, z) in metres. Densities are the panel values of the finest level; the
coarser levels give the error estimates. The level densities (``sigma_unit``,
``sigma_applied``, ``sigma_C_per_m2``) are the total (free + polarisation) charge of every
panel, conductors' and dielectric bodies' (:mod:`.solve`), from which the potential and field
anywhere follow; surface samples, charges and peak fields are of the free charge, in the
medium touching each conductor panel. On an open thin sheet the unknown is the density
summed over both faces; :meth:`PanelSolution.surface_samples` splits it into the two faces
from the normal field just off each face (one sample per face and panel, normals pointing
out of that face), so a sheet's samples cover both faces.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np

from elopt.physics.bem3d.evaluate import EVAL_TOL, directional_derivative, potential_and_gradient
from elopt.physics.bem3d.faces import face_samples
from elopt.physics.bem3d.operators import SolveStats
from elopt.physics.bem3d.panels import PanelSet
from elopt.physics.bem3d.peak_search import searched_peaks
from elopt.physics.bem3d.plane_rule import plane_rule
from elopt.physics.bem3d.symmetry import mirror_symmetry, point_orbits
from elopt.physics.errors import SolverError
from elopt.physics.layout import Layout
from elopt.physics.refinement import LevelPeak, Refinement
from elopt.physics.solution import ChargeSolution, SurfaceSamples, excitation_potentials


@dataclass(frozen=True, eq=False)
class LevelResult3D:
    """One level: panels, total unit-potential densities (N, n) C/m^2 per V of every panel,
    applied-field response (N,), capacitance matrix (n, n) F of the free charges,
    applied-field charges (n,) C, solve stats."""

    layout: Layout
    panels: PanelSet
    sigma_unit: np.ndarray
    sigma_applied: np.ndarray
    capacitance_F: np.ndarray
    applied_charges_C: np.ndarray
    stats: SolveStats

    def excitation(self, layout: Layout) -> tuple[np.ndarray, np.ndarray]:
        """Conductor potentials (n,) V and panel densities (N,) at the layout's excitation."""
        volts = excitation_potentials(layout, self.capacitance_F, self.applied_charges_C)
        return volts, self.sigma_unit @ volts + self.sigma_applied

    @property
    def n_unknowns(self) -> int:
        return self.panels.n

    @cached_property
    def excitation_samples(self) -> dict:
        """Face samples (see :func:`face_samples`) of the density at the excitation."""
        _, sigma = self.excitation(self.layout)
        return face_samples(self, self.layout, sigma[:, None], applied=True)

    def peaks(self) -> tuple[LevelPeak, ...]:
        """Peak surface field per conductor at the excitation: the largest face sample, found
        by :func:`.peak_search.searched_peaks` (the faces that can hold it)."""
        return self._peaks

    @cached_property
    def _peaks(self) -> tuple[LevelPeak, ...]:
        return searched_peaks(self)


class PanelSolution(ChargeSolution):
    """See :class:`elopt.physics.solution.ChargeSolution`; ``levels`` holds every level solved.

    Beyond the contract: ``capacitance_matrix_extrapolated_F`` (Richardson, or None),
    ``convergence_rate`` (observed or assumed order in h, or None), ``level``,
    :meth:`plane_tilt_derivative_F_per_rad` and :meth:`conductor_capacitance_derivative_F_per_m`.
    """

    point_dim = 3

    def __init__(
        self,
        layout: Layout,
        refinement: Refinement,
        capacitance_extrapolated_F: np.ndarray | None,
        convergence_rate: float | None,
    ) -> None:
        self.layout = layout
        self._adopt(refinement)
        self.capacitance_matrix_extrapolated_F = capacitance_extrapolated_F
        self.convergence_rate = convergence_rate
        fine = self._take_finest_level()
        self.panels = fine.panels
        self.level = fine.panels.level
        self.n_unknowns = fine.panels.n

    @property
    def eps(self) -> float:
        return self.layout.eps_F_per_m

    @property
    def eval_tol(self) -> float:
        """Compression tolerance of field evaluations: a tenth of the tightest request, at
        most 1e-4 and at least :data:`~.evaluate.EVAL_TOL` (compressed blocks move a field by
        about their tolerance, which then stays ten times below what was asked)."""
        o = self.options
        tight = min(o.rel_accuracy, o.peak_rel_accuracy or 1.0)
        return max(EVAL_TOL, min(1e-4, 0.1 * tight))

    # -- fields anywhere ---------------------------------------------------------------------
    def _points(self, points_m: np.ndarray) -> np.ndarray:
        pts = np.atleast_2d(np.asarray(points_m, dtype=float))
        if pts.ndim != 2 or pts.shape[1] != 3:
            raise SolverError(f"points must have shape (M, 3) of (x, y, z) in m, got {pts.shape}")
        if not np.all(np.isfinite(pts)):
            raise SolverError("points must be finite")
        return pts

    def _integrals(self, level: LevelResult3D, dens: np.ndarray, pts: np.ndarray):
        return potential_and_gradient(level.panels, dens, pts, self.eval_tol)

    def potential_at(self, points_m: np.ndarray) -> np.ndarray:
        pts = self._points(points_m)
        pot, _ = self._integrals(self._fine, self.sigma_C_per_m2, pts)
        return pot[:, 0] / self.eps - self.layout.applied_field_V_per_m * pts[:, 2]

    def field_at(self, points_m: np.ndarray) -> np.ndarray:
        pts = self._points(points_m)
        _, grad = self._integrals(self._fine, self.sigma_C_per_m2, pts)
        e = -grad[:, :, 0] / self.eps
        e[:, 2] += self.layout.applied_field_V_per_m
        return e

    # -- surface -----------------------------------------------------------------------------
    @cached_property
    def _unit_samples(self) -> dict:
        return face_samples(self._fine, self.layout, self._fine.sigma_unit, applied=False)

    def panel_field_V_per_m(self) -> np.ndarray:
        """(Nc,) surface field at the excitation on each conductor panel of the finest level:
        |free sigma| / eps of the medium touching the face, the larger face of a sheet."""
        s = self._fine.excitation_samples
        out = np.zeros(self.panels.n_conductor_panels)
        np.maximum.at(out, s["panel"], np.abs(s["sigma"][:, 0]) / s["eps_F_per_m"])
        return out

    def surface_samples(self, conductor: str) -> SurfaceSamples:
        """See :class:`SurfaceSamples`: one sample per panel of a closed surface; on an open
        sheet one per panel and face, the +1 faces first."""
        k = self.layout.index(conductor)
        s = self._fine.excitation_samples
        sel = np.nonzero(s["owner"] == k)[0]
        sel = sel[np.argsort(-s["face"][sel], kind="stable")]
        sigma = s["sigma"][sel, 0]
        return SurfaceSamples(
            conductor=conductor,
            kind="panels",
            points_m=s["points_m"][sel],
            sigma_C_per_m2=sigma,
            field_V_per_m=np.abs(sigma) / s["eps_F_per_m"][sel],
            area_m2=s["area_m2"][sel],
            face=s["face"][sel],
            normal=s["normals"][sel],
            arc_length_m=None,
        )

    # -- the ground plane --------------------------------------------------------------------
    def _require_plane(self) -> None:
        if not self.layout.ground_plane:
            raise SolverError("the layout has no ground plane (set ground_plane=True)")
        if self.panels.background is not None:
            raise SolverError(
                "ground-plane charge and plane derivatives are not available with planar "
                "layers in 3-D (the layer on the plane changes with it)"
            )

    @cached_property
    def _plane_rule(self) -> tuple[np.ndarray, np.ndarray]:
        return plane_rule(self.panels)

    def _plane_unit_density(self, xy_m: np.ndarray, columns: list[int] | None = None) -> np.ndarray:
        """Plane charge density (M, K) C/m^2 at xy (M, 2) for unit-potential columns."""
        self._require_plane()
        xy = np.atleast_2d(np.asarray(xy_m, dtype=float))
        if xy.ndim != 2 or xy.shape[1] != 2:
            raise SolverError(f"plane points must have shape (M, 2) of (x, y) in m, got {xy.shape}")
        pts = np.concatenate([xy, np.zeros((len(xy), 1))], axis=1)
        dens = self._fine.sigma_unit if columns is None else self._fine.sigma_unit[:, columns]
        up = np.tile([0.0, 0.0, 1.0], (len(pts), 1))
        # sigma_plane = eps E_z(z = 0+) = -d/dz of the potential integral (1/eps cancels).
        return -directional_derivative(self._fine.panels, dens, pts, up, self.eval_tol)

    @cached_property
    def _plane_unit_on_rule(self) -> np.ndarray:
        xy, _ = self._plane_rule
        # Mirror-symmetric panels carry symmetric unit densities: one point per orbit will do.
        sym = mirror_symmetry(self.panels)
        points = None if sym is None else point_orbits(xy, sym.planes, self.panels.mesh.size_m)
        if points is None:
            return self._plane_unit_density(xy)
        return self._plane_unit_density(xy[points.reps])[points.orbit]

    def plane_quadrature(self) -> tuple[np.ndarray, np.ndarray]:
        """The rule the plane integrals use: points (Q, 2) in m and weights (Q,) in m^2."""
        self._require_plane()
        return self._plane_rule

    def plane_unit_charge_densities(self) -> np.ndarray:
        """(Q, n) C/m^2 per V: the plane's charge density at the rule's points with each
        conductor in turn at 1 V and the rest at 0."""
        return self._plane_unit_on_rule

    def plane_charge_density(self, xy_m: np.ndarray) -> np.ndarray:
        """Induced charge density (M,) C/m^2 on the ground plane at xy (M, 2), excitation."""
        self._require_plane()
        xy = np.atleast_2d(np.asarray(xy_m, dtype=float))
        pts = np.concatenate([xy, np.zeros((len(xy), 1))], axis=1)
        return self.eps * self.field_at(pts)[:, 2]

    def plane_capacitance_derivative_F_per_m(self) -> np.ndarray:
        _, w = self._plane_rule
        s = self._plane_unit_on_rule
        return np.einsum("q,qi,qj->ij", w, s, s) / self.eps

    def plane_sensitivity_density(self, i: int, j: int, points_m: np.ndarray) -> np.ndarray:
        s = self._plane_unit_density(points_m, [i, j])
        return s[:, 0] * s[:, 1] / self.eps

    def plane_tilt_derivative_F_per_rad(
        self,
        axis_point_m: tuple[float, float] = (0.0, 0.0),
        axis_direction: tuple[float, float] = (0.0, 1.0),
    ) -> np.ndarray:
        """dC/d(theta), (n, n) in F/rad, for the plane tilted by theta about an axis in it.

        The axis passes through ``axis_point_m`` (x, y) along ``axis_direction`` (x, y);
        positive theta turns the plane right-handedly about the axis, so a plane point moves
        by dz = theta * (a_x (y - y0) - a_y (x - x0)) (toward +z where positive). Hadamard:
        dC_ij/dtheta = (1/eps) integral sigma_i sigma_j dz/dtheta dA.
        """
        a = np.asarray(axis_direction, dtype=float)
        if a.shape != (2,) or not np.linalg.norm(a) > 0:
            raise SolverError(f"axis_direction must be a nonzero (x, y) pair, got {axis_direction}")
        a = a / np.linalg.norm(a)
        xy, w = self._plane_rule
        s = self._plane_unit_on_rule
        dz = a[0] * (xy[:, 1] - axis_point_m[1]) - a[1] * (xy[:, 0] - axis_point_m[0])
        return np.einsum("q,qi,qj->ij", w * dz, s, s) / self.eps

    def conductor_capacitance_derivative_F_per_m(
        self, name: str, direction: tuple[float, float, float] = (0.0, 0.0, 1.0)
    ) -> np.ndarray:
        """dC/d(delta) (n, n) F/m for conductor ``name`` translated by delta along ``direction``.

        Hadamard formula dC_ij = integral sigma_i sigma_j / eps_f (n . d) dA over its surface
        (both faces of a sheet; sigma free, eps_f of the medium touching it, which moves with
        neither the conductor nor any body).
        """
        k = self.layout.index(name)
        d = np.asarray(direction, dtype=float)
        d = d / np.linalg.norm(d)
        s = self._unit_samples
        sel = s["owner"] == k
        wts = s["area_m2"][sel] * (s["normals"][sel] @ d) / s["eps_F_per_m"][sel]
        sig = s["sigma"][sel]
        return np.einsum("q,qi,qj->ij", wts, sig, sig)

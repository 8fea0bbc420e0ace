"""Result of a 2-D solve: charges per unit length, fields, the capacitance matrix per metre.

Points are (x, z) in metres; "area" is per metre of length (m^2/m). In periodic mode every
quantity is per cell of one period. Sheet faces are split as described in
:mod:`elopt.physics.bem2d.samples`.
"""

from __future__ import annotations

import numpy as np

from elopt.physics.bem2d.assemble import potential_matrix
from elopt.physics.bem2d.samples import excitation, potential, xy
from elopt.physics.bem2d.solve import Problem2D
from elopt.physics.errors import SolverError
from elopt.physics.layout import Layout
from elopt.physics.refinement import Refinement
from elopt.physics.solution import ChargeSolution, SurfaceSamples


def _as_complex(points_m: np.ndarray) -> np.ndarray:
    p = np.asarray(points_m, dtype=float)
    if p.ndim != 2 or p.shape[1] != 2:
        raise SolverError(f"2-D points must have shape (M, 2) as (x, z), got {p.shape}")
    return p[:, 0] + 1j * p[:, 1]


class Solution2D(ChargeSolution):
    """See :class:`elopt.physics.solution.ChargeSolution` (point_dim 2, per unit length).

    Beyond the contract: ``problem``, ``period_m`` (None when open), ``panels``, ``level``.
    """

    point_dim = 2
    planar = True

    def __init__(self, problem: Problem2D, refinement: Refinement) -> None:
        self._adopt(refinement)
        self.problem = problem
        self.layout: Layout = problem.layout
        self.period_m = problem.period_m
        fine = self.levels[-1]
        self._fine = fine
        self.panels = fine.panels
        self.level = fine.panels.level
        self.n_unknowns = fine.n_unknowns
        self.capacitance_matrix_F = fine.capacitance_F
        self.potentials_V, self.sigma_C_per_m2, self._offset_V = excitation(fine)
        self.charges_C = fine.capacitance_F @ self.potentials_V + fine.applied_charges_C

    def potential_at(self, points_m: np.ndarray) -> np.ndarray:
        return potential(self._fine, self.sigma_C_per_m2, self._offset_V, _as_complex(points_m))

    def field_at(self, points_m: np.ndarray) -> np.ndarray:
        """-grad(potential) (M, 2) by central differences (step 1e-6 of the layout's extent)."""
        x = _as_complex(points_m)
        h = 1e-6 * self.problem.extent_m
        pts = np.concatenate([x + h, x - h, x + 1j * h, x - 1j * h])
        v = potential(self._fine, self.sigma_C_per_m2, self._offset_V, pts).reshape(4, -1)
        return -np.stack([(v[0] - v[1]) / (2 * h), (v[2] - v[3]) / (2 * h)], axis=1)

    def surface_samples(self, conductor: str) -> SurfaceSamples:
        """Samples of one conductor, ordered by face (+1, 0, -1) then along the curve."""
        i = self.layout.index(conductor)
        s = self._fine.samples
        sel = np.nonzero(s["owner"] == i)[0]
        sel = sel[np.lexsort((s["arc"][sel], -s["face"][sel]))]
        return SurfaceSamples(
            conductor=conductor,
            kind="profile",
            points_m=xy(s["points"][sel]),
            sigma_C_per_m2=s["sigma"][sel],
            field_V_per_m=np.abs(s["sigma"][sel]) / s["eps"][sel],
            area_m2=s["area"][sel],
            face=s["face"][sel],
            normal=xy(s["normal"][sel]),
            arc_length_m=s["arc"][sel],
        )

    # -- ground plane ------------------------------------------------------------------------
    def _plane_rule(self) -> tuple[np.ndarray, np.ndarray]:
        """Points x (M,) and weights (M,) on the plane z = 0 (one period, or the whole line)."""
        g, w = np.polynomial.legendre.leggauss(200)
        if self.period_m is not None:
            return 0.5 * self.period_m * (g + 1.0), 0.5 * self.period_m * w
        p = self.panels.points
        xc = float(p.real.mean())
        scale = max(float(np.ptp(p.real)), float(p.imag.max()), 1e-300)
        th = 0.5 * np.pi * g * (1 - 1e-9)
        return xc + scale * np.tan(th), scale * 0.5 * np.pi * w / np.cos(th) ** 2

    def _plane_unit_density(self, x: np.ndarray) -> np.ndarray:
        """Plane charge density (M, n) with conductor j at 1 V: eps E_z just above z = 0."""
        if not self.layout.ground_plane:
            raise SolverError("the layout has no ground plane")
        h = 1e-7 * self.problem.extent_m
        pts = np.concatenate([x + 1j * h, x + 2j * h])
        a = potential_matrix(
            self._fine.panels,
            self.problem.slabs,
            pts,
            period=self.period_m,
            extent_m=self.problem.extent_m,
        )
        v = a @ self._fine.sigma_unit
        v1, v2 = v[: len(x)], v[len(x) :]
        dphi = (4 * v1 - v2) / (2 * h)  # potential 0 on the plane
        eps = self.problem.slabs.eps_F_per_m[0]
        return -eps * dphi

    def plane_capacitance_derivative_F_per_m(self) -> np.ndarray:
        """dC/d(delta) (n, n) per metre of length (per cell when periodic), in F/m per m."""
        x, w = self._plane_rule()
        s = self._plane_unit_density(x)
        eps = self.problem.slabs.eps_F_per_m[0]
        return (s * w[:, None]).T @ s / eps

    def plane_sensitivity_density(self, i: int, j: int, points_m: np.ndarray) -> np.ndarray:
        x = np.asarray(points_m, dtype=float).ravel()
        s = self._plane_unit_density(x.astype(complex))
        return s[:, i] * s[:, j] / self.problem.slabs.eps_F_per_m[0]

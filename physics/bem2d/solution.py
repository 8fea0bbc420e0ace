"""Result of a 2-D solve: charges per unit length, fields, the capacitance matrix per metre.

Points are (x, z) in metres; "area" is per metre of length (m^2/m). In periodic mode every
quantity is per cell of one period. On a zero-thickness strip the unknown is the density of
both faces together; :meth:`Solution2D.surface_samples` splits it into the two faces from the
normal field just off each face (second-order one-sided differences of the potential, whose
near-singular parts are integrated exactly), rescaled so the two faces sum to the total.
"""

from __future__ import annotations

import numpy as np

from elopt.physics.bem2d.assemble import potential_matrix
from elopt.physics.bem2d.solve import LevelResult2D, Problem2D
from elopt.physics.errors import SolverError
from elopt.physics.layout import Layout
from elopt.physics.solution import ChargeSolution, PeakField, excitation_potentials

#: One-sided steps for a sheet face's normal field, in panel half-lengths.
_FACE_STEP = 1e-3


def _as_complex(points_m: np.ndarray) -> np.ndarray:
    p = np.asarray(points_m, dtype=float)
    if p.ndim != 2 or p.shape[1] != 2:
        raise SolverError(f"2-D points must have shape (M, 2) as (x, z), got {p.shape}")
    return p[:, 0] + 1j * p[:, 1]


class Solution2D(ChargeSolution):
    """See :class:`elopt.physics.solution.ChargeSolution` (point_dim 2, per unit length).

    Beyond the contract: ``period_m`` (None when open), ``levels``, ``capacitance_per_m``
    (alias of the matrix), ``convergence_rate`` and ``capacitance_matrix_extrapolated_F``
    (Richardson on the last three levels, or None).
    """

    point_dim = 2

    def __init__(
        self,
        problem: Problem2D,
        levels: tuple[LevelResult2D, ...],
        rel_error_estimate: float,
        requested_accuracy: float,
        capacitance_extrapolated_F: np.ndarray | None = None,
        convergence_rate: float | None = None,
    ) -> None:
        self.problem = problem
        self.layout: Layout = problem.layout
        self.period_m = problem.period_m
        self.levels = levels
        self.rel_error_estimate = float(rel_error_estimate)
        self.requested_accuracy = float(requested_accuracy)
        self.accuracy_met = bool(self.rel_error_estimate <= self.requested_accuracy)
        self.capacitance_matrix_extrapolated_F = capacitance_extrapolated_F
        self.convergence_rate = convergence_rate
        fine = levels[-1]
        self._fine = fine
        self.panels = fine.panels
        self.n_unknowns = fine.n_unknowns
        self.level = fine.panels.level
        self.capacitance_matrix_F = fine.capacitance_F
        self.potentials_V = excitation_potentials(
            self.layout, fine.capacitance_F, fine.applied_charges_C
        )
        self.sigma_C_per_m2 = fine.sigma_unit @ self.potentials_V
        self._offset_V = float(fine.offset_unit @ self.potentials_V)
        self.charges_C = fine.capacitance_F @ self.potentials_V

    @property
    def capacitance_per_m(self) -> np.ndarray:
        return self.capacitance_matrix_F

    def _potential(self, level: LevelResult2D, sigma: np.ndarray, offset: float, x) -> np.ndarray:
        a = potential_matrix(
            level.panels,
            self.problem.slabs,
            x,
            period=self.period_m,
            extent_m=self.problem.extent_m,
        )
        return a @ sigma - offset

    def potential_at(self, points_m: np.ndarray) -> np.ndarray:
        return self._potential(
            self._fine, self.sigma_C_per_m2, self._offset_V, _as_complex(points_m)
        )

    def field_at(self, points_m: np.ndarray) -> np.ndarray:
        """-grad(potential) (M, 2) by central differences (step 1e-6 of the layout's extent)."""
        x = _as_complex(points_m)
        h = 1e-6 * self.problem.extent_m
        pts = np.concatenate([x + h, x - h, x + 1j * h, x - 1j * h])
        v = self._potential(self._fine, self.sigma_C_per_m2, self._offset_V, pts).reshape(4, -1)
        return -np.stack([(v[0] - v[1]) / (2 * h), (v[2] - v[3]) / (2 * h)], axis=1)

    # -- surface samples --------------------------------------------------------------------
    def _samples(self, level: LevelResult2D, sigma: np.ndarray, offset: float, volts) -> dict:
        """Every node's samples; sheet nodes split into their two faces."""
        p = level.panels
        slabs = self.problem.slabs
        pts = p.points
        nrm = p.normals.ravel()
        w = p.node_weights
        owner = p.node_conductor
        sheet = np.repeat(p.sheet, p.order)
        arc = p.node_arc_length
        half = np.repeat(p.half, p.order)
        out = {k: [] for k in ("points", "sigma", "eps", "area", "face", "normal", "arc", "owner")}

        def add(sel, sig, face, normal):
            out["points"].append(pts[sel])
            out["sigma"].append(sig)
            out["eps"].append(
                slabs.eps_touching(np.stack([pts[sel].real, pts[sel].imag], 1), _xy(normal))
            )
            out["area"].append(w[sel])
            out["face"].append(np.full(sel.sum(), face, dtype=np.int8))
            out["normal"].append(normal)
            out["arc"].append(arc[sel])
            out["owner"].append(owner[sel])

        add(~sheet, sigma[~sheet], 0, nrm[~sheet])
        if sheet.any():
            x, n, hh = pts[sheet], nrm[sheet], half[sheet]
            v = volts[owner[sheet]]
            fields = []
            for sgn in (1.0, -1.0):
                d = sgn * n * _FACE_STEP * hh
                u = self._potential(level, sigma, offset, np.concatenate([x + d, x + 2 * d]))
                u1, u2 = u[: len(x)], u[len(x) :]
                # Outward normal field of this face: -dphi/dn, second order one-sided.
                fields.append(-(4 * u1 - u2 - 3 * v) / (2 * _FACE_STEP * hh))
            eps_top = slabs.eps_touching(np.stack([x.real, x.imag], 1), _xy(n))
            eps_bot = slabs.eps_touching(np.stack([x.real, x.imag], 1), _xy(-n))
            s_top, s_bot = eps_top * fields[0], eps_bot * fields[1]
            total = sigma[sheet]
            scale = np.where(np.abs(s_top + s_bot) > 0, total / (s_top + s_bot), 0.5)
            add(sheet, s_top * scale, 1, n)
            add(sheet, s_bot * scale, -1, -n)
        return {k: np.concatenate(v) for k, v in out.items()}

    def _fine_samples(self) -> dict:
        if not hasattr(self, "_fine_cache"):
            self._fine_cache = self._samples(
                self._fine, self.sigma_C_per_m2, self._offset_V, self.potentials_V
            )
        return self._fine_cache

    def surface_samples(self, conductor: str) -> dict[str, np.ndarray]:
        """Samples of one conductor, ordered by face then along the curve (see the contract)."""
        i = self.layout.index(conductor)
        s = self._fine_samples()
        sel = np.nonzero(s["owner"] == i)[0]
        order = np.lexsort((s["arc"][sel], -s["face"][sel]))
        sel = sel[order]
        return {
            "conductor": conductor,
            "kind": "profile",
            "points_m": _xy(s["points"][sel]),
            "sigma_C_per_m2": s["sigma"][sel],
            "field_V_per_m": np.abs(s["sigma"][sel]) / s["eps"][sel],
            "area_m2": s["area"][sel],
            "face": s["face"][sel],
            "normal": _xy(s["normal"][sel]),
            "arc_length_m": s["arc"][sel],
        }

    def _peaks(self, level: LevelResult2D, samples: dict) -> list[tuple[float, tuple]]:
        field = np.abs(samples["sigma"]) / samples["eps"]
        out = []
        for i in range(len(self.layout.conductors)):
            sel = np.nonzero(samples["owner"] == i)[0]
            m = sel[int(np.argmax(field[sel]))]
            z = samples["points"][m]
            out.append((float(field[m]), (float(z.real), float(z.imag))))
        return out

    def peak_fields(self) -> tuple[PeakField, ...]:
        fine = self._peaks(self._fine, self._fine_samples())
        if len(self.levels) >= 2:
            lv = self.levels[-2]
            volts = excitation_potentials(self.layout, lv.capacitance_F, lv.applied_charges_C)
            coarse = self._peaks(
                lv, self._samples(lv, lv.sigma_unit @ volts, float(lv.offset_unit @ volts), volts)
            )
        else:
            coarse = [(np.nan, None)] * len(fine)
        out = []
        for c, (f, where), (g, _) in zip(self.layout.conductors, fine, coarse, strict=True):
            shape = c.shape
            singular = (not shape.closed) or getattr(shape, "corner_radius_m", 0.0) == 0.0
            err = abs(f - g) / f if f > 0 and np.isfinite(g) else float("inf")
            out.append(PeakField(c.name, f, where, bool(singular), float(err)))
        return tuple(out)

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


def _xy(z: np.ndarray) -> np.ndarray:
    return np.stack([np.real(z), np.imag(z)], axis=1)

"""Axisymmetric boundary-element solve for the surface charge of conductors of revolution.

For every point x on conductor k the single-layer (first-kind) integral equation

    (1/eps) sum_j integral G(x, x') sigma(x') ds' = V_k + E0 z      (G: ring kernel, images)

holds, with V_k given (driven) or unknown with the total charge given (floating). One LU
factorisation of the collocation matrix gives every column of the Maxwell capacitance matrix
(conductor j at 1 V, the rest at 0) and the applied-field response; the actual excitation is
their combination. Refinement levels are solved in turn until two successive capacitance
matrices agree to the requested relative accuracy.
"""

from __future__ import annotations

import numpy as np
import scipy.linalg

from elopt.physics.bem_axi.mesh import AxiMesh, build_mesh
from elopt.physics.bem_axi.operators import collocation_matrix
from elopt.physics.bem_axi.solution import AxisymmetricSolution, LevelResult
from elopt.physics.errors import SolverError
from elopt.physics.layout import Layout

#: Default largest system size (unknowns); a dense N x N solve needs about 4 N^2 doubles.
MAX_UNKNOWNS = 12_000


def solve_level(layout: Layout, mesh: AxiMesh) -> LevelResult:
    """Factor the collocation matrix of ``mesh`` once and solve every excitation column."""
    eps = layout.eps_F_per_m
    a = collocation_matrix(mesh, layout.ground_plane)
    if not np.all(np.isfinite(a)):
        raise SolverError("collocation matrix has non-finite entries; check the geometry")
    n = len(layout.conductors)
    owner = mesh.node_conductor
    rhs = np.zeros((mesh.n_nodes, n + 1))
    rhs[np.arange(mesh.n_nodes), owner] = 1.0
    rhs[:, n] = layout.applied_field_V_per_m * mesh.points_m[:, 1]
    lu = scipy.linalg.lu_factor(a, check_finite=False)
    sol = eps * scipy.linalg.lu_solve(lu, rhs, check_finite=False)
    area = mesh.ring_area_m2
    charges = np.zeros((n, n + 1))
    np.add.at(charges, owner, sol * area[:, None])
    return LevelResult(
        mesh=mesh,
        sigma_unit=sol[:, :n],
        sigma_applied=sol[:, n],
        capacitance_F=charges[:, :n],
        applied_charges_C=charges[:, n],
    )


def relative_change(c_new: np.ndarray, c_old: np.ndarray) -> float:
    """Largest |change| of a capacitance matrix, entry (i, j) scaled by sqrt(C_ii C_jj)."""
    d = np.sqrt(np.abs(np.outer(np.diag(c_new), np.diag(c_new))))
    return float(np.max(np.abs(c_new - c_old) / d))


def default_order(rel_accuracy: float) -> int:
    """Nodes per panel for a requested accuracy: higher order pays only for tight requests."""
    if rel_accuracy >= 1e-5:
        return 4
    if rel_accuracy >= 1e-8:
        return 6
    return 8


def solve_axisymmetric(
    layout: Layout,
    *,
    rel_accuracy: float = 1e-4,
    max_level: int = 6,
    order: int | None = None,
    max_unknowns: int = MAX_UNKNOWNS,
) -> AxisymmetricSolution:
    """Solve ``layout`` (every shape a :class:`elopt.physics.geometry.Curve`) to ``rel_accuracy``.

    Levels 0, 1, ... are solved until the capacitance matrices of two successive levels agree
    to ``rel_accuracy`` (see :func:`relative_change`) or ``max_level`` / ``max_unknowns`` is
    reached; the finest level is returned with ``accuracy_met`` saying which happened.
    ``order`` (nodes per panel) defaults to :func:`default_order` of ``rel_accuracy``.
    """
    if not (0.0 < rel_accuracy < 1.0):
        raise SolverError(f"rel_accuracy must lie in (0, 1), got {rel_accuracy}")
    if max_level < 1:
        raise SolverError(
            f"max_level must be >= 1 (two levels give the error estimate), got {max_level}"
        )
    if not layout.homogeneous:
        # dielectric regions / planar layers: their own module (hook kept to these lines)
        from elopt.physics.bem_axi.dielectric_solve import solve_dielectric

        return solve_dielectric(
            layout,
            rel_accuracy=rel_accuracy,
            max_level=max_level,
            order=order,
            max_unknowns=max_unknowns,
        )
    if order is None:
        order = default_order(rel_accuracy)
    if not 2 <= order <= 16:
        raise SolverError(f"order (nodes per panel) must lie in [2, 16], got {order}")
    history: list[LevelResult] = []
    error = float("inf")
    for level in range(max_level + 1):
        mesh = build_mesh(layout, level, order)
        if mesh.n_nodes > max_unknowns:
            if len(history) < 2:
                raise SolverError(
                    f"level {level} needs {mesh.n_nodes} unknowns, more than max_unknowns = "
                    f"{max_unknowns}, before an error estimate exists; simplify the geometry"
                )
            break
        history.append(solve_level(layout, mesh))
        if len(history) >= 2:
            error = relative_change(history[-1].capacitance_F, history[-2].capacitance_F)
            if error <= rel_accuracy:
                break
    return AxisymmetricSolution(
        layout=layout,
        levels=tuple(history),
        rel_error_estimate=error,
        requested_accuracy=rel_accuracy,
    )

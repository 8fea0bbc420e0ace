"""Axisymmetric boundary-element solve for the surface charge of conductors of revolution.

For every point x on conductor k the single-layer (first-kind) integral equation

    (1/eps) sum_j integral G(x, x') sigma(x') ds' = V_k + E0 z      (G: ring kernel, images)

holds, with V_k given (driven) or unknown with the total charge given (floating). One LU
factorisation of the collocation matrix gives every column of the Maxwell capacitance matrix
(conductor j at 1 V, the rest at 0) and the applied-field response; the actual excitation is
their combination. Refinement levels are solved in turn by the shared loop of
:mod:`elopt.physics.refinement` until its error estimate meets the request.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import scipy.linalg

from elopt.physics.bem_axi.mesh import AxiMesh, MeshRule, build_mesh, default_rule
from elopt.physics.bem_axi.operators import collocation_matrix
from elopt.physics.bem_axi.solution import AxisymmetricSolution, LevelResult
from elopt.physics.errors import SolverError
from elopt.physics.layout import Layout
from elopt.physics.refinement import (
    Convergence,
    LevelPlan,
    SolveOptions,
    make_options,
    refine,
)

#: Bytes per matrix entry a dense level needs: the matrix, its LU and assembly temporaries.
DENSE_BYTES_PER_ENTRY = 32
#: Relative errors refinement does not reduce, per nodes per panel (quadrature tolerances):
#: (capacitance, peak field). Measured floors: 1.9e-10 / 4.6e-9 (4 nodes), 5e-13 / 2.8e-11
#: (6), 2.4e-13 / 1.2e-13 (8).
NOISE_FLOORS = {4: (3e-10, 1e-8), 6: (1e-12, 1e-10), 8: (1e-12, 1e-12)}


#: Mesh rule of loose requests (COARSE_REQUEST and above) at up to 4 nodes per panel of
#: dielectric solves (conductors-only solves take CONDUCTOR_COARSE_RULE): ratio-4
#: grading, three steps at level 0 and one per level, neighbours within a factor 4. Measured on
#: the guarded probes of tests/benchmarks/bench_fem_compare.py: 1.4-2.5x fewer unknowns than
#: the ratio-2 rule for the same 1e-4, the level-1 error still 4-15x below the change that
#: estimates it. Tighter requests keep the ratio-2 rule, whose level 1 meets 1e-5 on filleted
#: probes where this one needs a third level.
COARSE_RULE = MeshRule(corner_steps=3, steps_per_level=1, grade_ratio=4.0, balance_ratio=4.0)
COARSE_REQUEST = 1e-4
#: The coarse rule of conductors-only solves: ratio-8 grading, two steps at level 0 and one per
#: level, neighbours within a factor 8. Measured on the guarded probes at 1e-4: 104 + 208
#: unknowns (filleted) and 148 + 344 (sharp) against 132 + 264 and 196 + 440 with COARSE_RULE,
#: the level-1 error 0.15-0.65 times the change that estimates it; the published cases pass the
#: honesty tests with it (tests/test_error_estimate_honesty_coarse.py, *_loose.py). Dielectric
#: solves keep COARSE_RULE (not measured with this one); the families' check of the level-0
#: size (electrodes.solvers.check_coarse_mesh) takes this rule, as the solve after it does.
#: With mapped corner panels (``mapped_steps=0``: a straight side of a right-angle edge or a
#: free sheet edge is one mapped panel at every level, never graded; DEVELOPERS.md): 72 + 144
#: unknowns on the sharp probe (errors 1.7e-5 / 1.3e-6 of sqrt(C_ii C_jj) against its 1e-9
#: solve), the filleted probe unchanged (no singular corner); mapped_steps=1 (the corner panel
#: halved once at level 0) measured 100 + 200 and slower (6.2 against 5.8 ms CPU).
#: Its gap factor (a level-0 panel at most that many times its distance to another conductor
#: or an image) is the default 2: measured 3 Dec 2026 on the grid of 52 guarded probes against
#: their own 1e-8 solves (tests/benchmarks/measure_error_estimate_probes.py --gap-factor G,
#: requests 1e-3 - 1e-4), (probe, request) pairs with a true error above the estimate, the
#: largest true / estimate and the mean unknowns at 1e-4: G 2: 0 of 156, 0.94, 384; 2.25: 1,
#: 2.33, 367; 2.5: 10, 3.09, 347; 3: 13, 3.09, 340; 4: 25, 6.20, 329 (all at 0.05 - 0.1 mm
#: gaps: the coarser gap panels make the first halving's change understate the error). On the
#: bench probes at 1e-4 (tests/benchmarks/bench_fem_compare.py) 2.25 changes no mesh; 2.5 and 3
#: give 56 + 112 unknowns on the sharp probe (C_sense error 2.1e-6 against 1.8e-6) and 100 +
#: 200 on the filleted one; 4 gives 92 + 184 on the filleted one (error 2.9e-6).
CONDUCTOR_COARSE_RULE = MeshRule(
    corner_steps=2, steps_per_level=1, grade_ratio=8.0, balance_ratio=8.0, mapped_steps=0
)
#: Relative error of the collocation entries of a conductors-only solve at COARSE_REQUEST and
#: looser (1e-8 otherwise at 4 nodes): the near zone shrinks from 2.5 to 1.5 panel lengths
#: (assembly 15 % faster) and C of the guarded probes moves by 3e-8 at most, 3000 times below
#: the request. Its noise floors (capacitance, peak), measured on the published cases: C levels
#: off at 5e-8 (coaxial disks), the peak at 3.3e-7 (sphere).
COARSE_ENTRY_ERROR = 1e-6
COARSE_ENTRY_FLOORS = (1e-7, 1e-6)
#: The estimate's prior ratio and collapse ratio (refinement.Convergence) with
#: CONDUCTOR_COARSE_RULE, measured on a grid of 52 guarded probes against their own 1e-8
#: solves (tests/benchmarks/measure_error_estimate_probes.py, requests 1e-3 - 1e-4): with the
#: common prior 1/3 and no collapse ratio, 25 of 156 (probe, request) pairs had a true error
#: above the estimate: 21 two-level stops up to 1.52 times it (small fillets, whose first
#: halving barely moves the error) and 4 three-level stops up to 11.2 times it (a first
#: change 200 times the second, floored at RATIO_FLOOR). Prior 0.45 (the two-level estimate
#: 1.64 times the change) and collapse 0.03 (the smallest ratio measured on the published
#: cases, refinement.RATIO_FLOOR's note): none above it, the largest 0.94 times it, and the
#: same levels (mean 453 unknowns at 1e-4). The published cases still pass the honesty tests
#: (tests/test_error_estimate_honesty_coarse.py, *_loose.py). Re-measured with the mapped
#: corner panels (same grid, same script): none of 156 above, the largest 0.94 times the
#: estimate, mean 384 unknowns at 1e-4; the published cases' C all meet 1e-4 at two levels
#: (the disks 5.7e-8 - 3.6e-7 off, at most 0.28 times the estimate).
COARSE_PRIOR_RATIO = 0.45
COARSE_COLLAPSE_RATIO = 0.03


def mesh_rule(order: int, request: float, *, conductors_only: bool = False) -> MeshRule:
    """The mesh rule of a solve with ``order`` nodes per panel for ``request``, the tighter of
    its relative-accuracy requests; ``conductors_only``: a homogeneous layout's solve."""
    if order > 4 or request < COARSE_REQUEST:
        return default_rule(order)
    return CONDUCTOR_COARSE_RULE if conductors_only else COARSE_RULE


def solve_level(layout: Layout, mesh: AxiMesh, entry_error: float | None = None) -> LevelResult:
    """Factor the collocation matrix of ``mesh`` (off-panel entries to relative error
    ``entry_error``, default the operators' own) once and solve every excitation column."""
    eps = layout.eps_F_per_m
    a = collocation_matrix(mesh, layout.ground_plane, entry_error)
    if not np.all(np.isfinite(a)):
        raise SolverError("collocation matrix has non-finite entries; check the geometry")
    n = len(layout.conductors)
    owner = mesh.node_conductor
    rhs = np.zeros((mesh.n_nodes, n + 1))
    rhs[np.arange(mesh.n_nodes), owner] = 1.0
    rhs[:, n] = layout.applied_field_V_per_m * mesh.points_m[:, 1]
    sol = eps * solve_dense(a, rhs)
    # Charge per conductor: the one-hot owner columns of rhs sum the ring charges.
    charges = rhs[:, :n].T @ (sol * mesh.ring_area_m2[:, None])
    return LevelResult(
        layout=layout,
        mesh=mesh,
        sigma_unit=sol[:, :n],
        sigma_applied=sol[:, n],
        capacitance_F=charges[:, :n],
        applied_charges_C=charges[:, n],
    )


def solve_dense(a: np.ndarray, rhs: np.ndarray) -> np.ndarray:
    """x (N, k) with a x = rhs, by one LU of ``a`` (N, N), C-ordered, overwritten.

    LAPACK factors the transpose, which is ``a`` itself in Fortran order, and solves with it
    transposed: no reordering copy (``scipy.linalg.lu_factor`` makes one; factor and solve
    measured 0.99 -> 0.93 ms at N = 344, one BLAS thread, loaded machine).
    """
    getrf, getrs = scipy.linalg.get_lapack_funcs(("getrf", "getrs"), (a,))
    lu, piv, info = getrf(a.T, overwrite_a=True)
    if info != 0:
        raise SolverError(f"collocation matrix is singular (LAPACK getrf info {info})")
    return getrs(lu, piv, rhs, trans=1)[0]


def default_order(rel_accuracy: float) -> int:
    """Nodes per panel for a requested accuracy: higher order pays only for tight requests."""
    if rel_accuracy >= 1e-5:
        return 4
    if rel_accuracy >= 1e-8:
        return 6
    return 8


def solve_axisymmetric(
    layout: Layout, options: SolveOptions | None = None, **overrides: Any
) -> AxisymmetricSolution:
    """Solve ``layout`` (every shape a :class:`elopt.physics.geometry.Curve`).

    ``options`` (default :class:`SolveOptions`), with any of its fields given as keywords
    instead (``rel_accuracy=1e-6``), drive :func:`elopt.physics.refinement.refine`: levels
    0, 1, ... until the error estimate meets the requests. ``order`` (nodes per panel)
    defaults to :func:`default_order` of the tighter request; the mesh rule follows the order
    and that request (:func:`mesh_rule`).
    """
    opts = make_options(options, overrides)
    if not layout.homogeneous:
        # dielectric regions / planar layers: their own module (hook kept to these lines)
        from elopt.physics.bem_axi.dielectric_solve import solve_dielectric

        return solve_dielectric(layout, opts)
    order = opts.order
    tightest = min(opts.rel_accuracy, opts.peak_rel_accuracy or 1.0)
    if order is None:
        order = default_order(tightest)
    if not 2 <= order <= 16:
        raise SolverError(f"order (nodes per panel) must lie in [2, 16], got {order}")

    rule = mesh_rule(order, tightest, conductors_only=True)
    entry_error = COARSE_ENTRY_ERROR if rule == CONDUCTOR_COARSE_RULE else None

    def plan(level: int) -> LevelPlan:
        mesh = build_mesh(layout, level, order, rule)
        n = mesh.n_nodes
        return LevelPlan(
            level,
            n,
            DENSE_BYTES_PER_ENTRY * n * n,
            "dense solve",
            lambda _: solve_level(layout, mesh, entry_error),
        )

    # Orders between (or below) the measured ones take the floors of the next lower (or 4).
    floors = NOISE_FLOORS[max((p for p in NOISE_FLOORS if p <= order), default=4)]
    convergence = Convergence(capacitance_floor=floors[0], peak_floor=floors[1])
    if entry_error is not None:
        convergence = Convergence(
            capacitance_floor=COARSE_ENTRY_FLOORS[0],
            peak_floor=COARSE_ENTRY_FLOORS[1],
            prior_ratio=COARSE_PRIOR_RATIO,
            collapse_ratio=COARSE_COLLAPSE_RATIO,
        )
    return AxisymmetricSolution(
        layout, refine(plan, opts, convergence, covered=layout.estimate_indices)
    )

"""3-D boundary-element solve for the surface charge of conductors of any shape, with
bounded dielectric bodies.

Every panel carries one constant density sigma (C/m^2) radiating in the layout's medium
eps_m = eps0 eps_r through G = 1/(4 pi |x - x'|) (minus its mirror image in a grounded plane
z = 0): on a conductor the total (free + polarisation) charge, on a body's surface the
polarisation charge. The potential anywhere (inside bodies too) is

    phi(x) = (1/eps_m) sum_j integral_j G(x, x') sigma(x') dA' - E0 z.

Conductor panel, centroid x on conductor k (first kind):

    (1/eps_m) sum_j integral_j G(x, x') sigma dA' = V_k + E0 z.

Interface panel between eps_- (the body, inside) and eps_+ (outside), normal n outward. The
normal fields E^+- just off either side satisfy E^+ - E^- = sigma / eps_m (the jump of a
single layer) and (E^+ + E^-)/2 = E^PV = -(1/eps_m) K sigma + E0 n_z, K the principal-value
normal derivative of the single layer (its diagonal from Gauss's law, :mod:`.operators`). No
free charge on an insulator, eps_+ E^+ = eps_- E^-, gives the second-kind equation

    sigma - 2 lambda K sigma = -2 lambda eps_m E0 n_z,   lambda = (eps_+ - eps_-) / (eps_+ + eps_-).

Free charge on a conductor panel touching the medium eps_f (the innermost body around the
conductor, or the medium): the field inside is 0, so the field outside is sigma / eps_m and
sigma_free = eps_f E_n = (eps_f / eps_m) sigma (on a sheet in one medium, summed over both
faces); the surface field is sigma_free / eps_f. C_ij is the free charge on conductor i with
conductor j at 1 V, the rest at 0. One constant density per flat triangle, collocated at its
centroid (:mod:`.operators` has the matrix).

Columns of the Maxwell capacitance matrix come from unit potentials on each conductor in
turn; the applied field adds one more column; floating conductors are then solved on that
small matrix. Levels start, ..., are solved in turn (each halving the panel size) by the
shared loop of :mod:`elopt.physics.refinement` until its estimate meets the request.

Small levels are solved by dense LU; large ones by GMRES on the hierarchical matrices, started
from the previous level's densities and preconditioned by an incomplete LU of the near field. The
memory a level needs is estimated before anything is allocated, and refused with the
numbers when it exceeds what the machine has.

With planar layers (:mod:`.layered_green`; compressed by :mod:`.hmatrix_layered`) G is the
stack's Green's function and every panel's sigma radiates as a charge in the slab eps_slab it
lies in: a body's rows keep the form above with K the layered kernel's normal derivative
times eps_slab (bodies lie strictly inside one slab), and a conductor's free charge is
(eps_f / eps_slab) sigma.
"""

from __future__ import annotations

import ctypes
import math
import time
from typing import Any, Literal

import numpy as np
import scipy.linalg
from scipy.spatial import cKDTree

from elopt.physics.bem3d.bodies import region_surfaces
from elopt.physics.bem3d.hmatrix_layered import LayeredFastOperator, layered_fast_bytes
from elopt.physics.bem3d.layered_green import extra_dense_bytes, layered_method
from elopt.physics.bem3d.near_pairs import near_pairs
from elopt.physics.bem3d.operators import (
    PRECONDITIONER_FACTOR,
    FastOperator,
    SolveStats,
    dense_matrix,
)
from elopt.physics.bem3d.panels import PanelSet, conductor_surfaces, discretise
from elopt.physics.bem3d.solution import LevelResult3D, PanelSolution
from elopt.physics.bem3d.symmetry import (
    ROWS,
    MirrorSymmetry,
    ReducedFastOperator,
    mirror_symmetry,
    reduced_matrix,
    symmetry_refusal,
)
from elopt.physics.errors import SolverError
from elopt.physics.layout import EPS0_F_PER_M, Layout
from elopt.physics.refinement import (
    Convergence,
    LevelPlan,
    SolveOptions,
    make_options,
    refine,
)

#: Largest level solved by dense LU under method="auto".
DENSE_MAX_PANELS = 4_000
#: Most matrix entries a dense level may compute under method="auto": R rows of the N panels
#: for R orbits (a mirror-symmetric level of N panels computes R N, not R^2). Measured on the
#: guarded-pad demo: 3,224 orbits of 6,448 panels took 4.9 s dense and 1.2 s compressed.
DENSE_MAX_ENTRIES = DENSE_MAX_PANELS**2

Method = Literal["auto", "dense", "fast"]


def estimate_memory_bytes(
    panels: PanelSet, method: str, n_columns: int, n_reduced: int | None = None
) -> int:
    """Peak bytes a level will need: the dense N^2 matrix (R^2 for ``n_reduced`` = R
    unknowns left by a mirror symmetry), or the compressed one (R / N of it).

    The compressed matrix is estimated per panel as 5 kB of dense near blocks plus 0.5 kB per
    tree level of low-rank factors (measured on spheres and boxes from 5e3 to 2e5 panels), and
    the preconditioner from the near pairs of a sample (entries and their incomplete LU).
    With dielectric bodies the rows split into single-layer and normal-derivative matrices
    over the same sources, which need more: the compressed part counts 1.25 times (measured on
    a coated sphere to 1e-3: 530 MB above the interpreter's 200 MB at 40960 panels, 510 MB
    estimated without the factor; 6.5 kB stored per panel at 10240, 7.4 kB at 40960).
    """
    n = panels.n
    base = 600 * n + 16 * n * n_columns
    if method == "dense":
        r = n if n_reduced is None else n_reduced
        return base + 8 * r * r
    if panels.background is not None:
        return base + layered_fast_bytes(panels)
    _, centroids, _, diams = panels.kernel_arrays
    rng = np.random.default_rng(0)
    sample = rng.choice(n, size=min(n, 2000), replace=False)
    images = 2 if panels.ground_plane else 1
    ti, _ = near_pairs(centroids, centroids[sample], PRECONDITIONER_FACTOR * diams[sample])
    pre = images * len(ti) * n / len(sample)
    levels = max(1.0, math.log2(max(n, 64) / 32.0))
    share = 1.0 if n_reduced is None else n_reduced / n
    two_kinds = 1.25 if panels.n_conductor_panels < n else 1.0
    return int(base + share * (two_kinds * n * (5000 + 500 * levels) + pre * (56 + 12 * 6)))


def _rhs(layout: Layout, panels: PanelSet) -> np.ndarray:
    """(N, n + 1): unit potential on each conductor, then the applied field's E0 z on
    conductor panels and -2 lambda E0 n_z on interface panels (both per eps_m)."""
    n = len(layout.conductors)
    nc = panels.n_conductor_panels
    e0 = layout.applied_field_V_per_m
    rhs = np.zeros((panels.n, n + 1))
    rhs[np.arange(nc), panels.owner[:nc]] = 1.0
    rhs[:nc, n] = e0 * panels.mesh.centroids_m[:nc, 2]
    rhs[nc:, n] = -2.0 * panels.contrast[nc:] * e0 * panels.mesh.normals[nc:, 2]
    return rhs


#: glibc's mallopt parameter for the size from which allocations get their own mapping.
_M_MMAP_THRESHOLD = -3


def _map_large_arrays() -> None:
    """Have the C library (glibc) serve allocations of 1 MB and more from mappings of their
    own, given back to the OS when freed. By default it raises that threshold to the largest
    block freed so far (up to 32 MB); arrays below it then come from the heap, which keeps
    what is freed, so each level's peak stood on the previous one's scratch (measured on the
    guarded-pad demo: 338 MiB peak with the default, 327 MiB with this)."""
    try:
        ctypes.CDLL(None).mallopt(_M_MMAP_THRESHOLD, 1 << 20)
    except (OSError, AttributeError):
        pass


def _return_freed_memory() -> None:
    """Hand freed heap (a finished level's, the meshing's) back to the OS where the C library
    allows it (glibc keeps it for reuse otherwise)."""
    try:
        ctypes.CDLL(None).malloc_trim(0)
    except (OSError, AttributeError):
        pass


def _prolongation(coarse: PanelSet, fine: PanelSet) -> np.ndarray:
    """Index (N_fine,) of the coarse panel of the same surface nearest each fine centroid."""
    out = np.empty(fine.n, dtype=np.int64)
    for k in np.unique(fine.part):
        cs = np.nonzero(coarse.part == k)[0]
        fs = np.nonzero(fine.part == k)[0]
        _, near = cKDTree(coarse.mesh.centroids_m[cs]).query(fine.mesh.centroids_m[fs])
        out[fs] = cs[near]
    return out


def solve_level(
    layout: Layout,
    panels: PanelSet,
    *,
    method: str,
    gmres_rtol: float,
    aca_tol: float,
    previous: LevelResult3D | None = None,
    symmetry: MirrorSymmetry | None = None,
) -> LevelResult3D:
    """Solve every excitation column on one level (dense LU or preconditioned GMRES), on one
    panel per orbit of a ``symmetry`` when given (:mod:`.symmetry`)."""
    eps = layout.eps_F_per_m
    rhs = _rhs(layout, panels)
    stats = SolveStats(method=method, n_panels=panels.n)
    t0 = time.perf_counter()
    if method == "dense":
        a = dense_matrix(panels) if symmetry is None else reduced_matrix(panels, symmetry)
        if not np.all(np.isfinite(a)):
            raise SolverError("collocation matrix has non-finite entries; check the mesh")
        stats.setup_s = time.perf_counter() - t0
        t1 = time.perf_counter()
        lu = scipy.linalg.lu_factor(a, overwrite_a=True, check_finite=False)
        if symmetry is None:
            x = scipy.linalg.lu_solve(lu, rhs, check_finite=False)
        else:
            x = scipy.linalg.lu_solve(lu, rhs[symmetry.reps], check_finite=False)[symmetry.orbit]
        stats.solve_s = time.perf_counter() - t1
    else:
        if panels.background is not None:
            op = LayeredFastOperator(panels, tol=aca_tol)
        elif symmetry is None:
            op = FastOperator(panels, tol=aca_tol)
        else:
            op = ReducedFastOperator(panels, symmetry, tol=aca_tol)
        # The build's scratch (the compiled threads' heaps too) back to the OS before GMRES
        # (measured on the guarded-pad demo's finest level: 4 MiB).
        _return_freed_memory()
        stats.setup_s = op.setup_s
        stats.stored_bytes = op.stored_bytes
        x0 = None
        if previous is not None:
            p = _prolongation(previous.panels, panels)
            prev = (
                np.concatenate([previous.sigma_unit, previous.sigma_applied[:, None]], axis=1) / eps
            )
            x0 = prev[p]
        t1 = time.perf_counter()
        x = op.solve(rhs, gmres_rtol, stats, x0=x0)
        stats.solve_s = time.perf_counter() - t1
    sigma = eps * x
    n = len(layout.conductors)
    nc = panels.n_conductor_panels
    ratio = panels.eps_front[:nc] * panels.eps_medium / panels.eps_slab[:nc]
    free = (EPS0_F_PER_M * ratio)[:, None] * x[:nc]
    charges = np.zeros((n, n + 1))
    np.add.at(charges, panels.owner[:nc], free * panels.mesh.areas_m2[:nc, None])
    return LevelResult3D(
        layout=layout,
        panels=panels,
        sigma_unit=sigma[:, :n],
        sigma_applied=sigma[:, n],
        capacitance_F=charges[:, :n],
        applied_charges_C=charges[:, n],
        stats=stats,
    )


def richardson(caps: list[np.ndarray], smooth: bool) -> tuple[np.ndarray | None, float | None]:
    """Extrapolated capacitance matrix and the order p in h it assumed (h halves per level).

    Three levels or more: p observed from the last three (accepted in [0.5, 4.5]); two levels
    of smooth surfaces (no sharp edge or rim): p = 2, the order of flat constant panels with
    centroid collocation on smooth closed surfaces (measured by this project's sphere and
    ellipsoid tests). Otherwise (None, None).
    """
    p = None
    if len(caps) >= 3:
        d1 = np.max(np.abs(caps[-2] - caps[-3]))
        d2 = np.max(np.abs(caps[-1] - caps[-2]))
        if d2 > 0 and d1 > d2:
            p_obs = math.log2(d1 / d2)
            if 0.5 <= p_obs <= 4.5:
                p = p_obs
    elif len(caps) == 2 and smooth:
        p = 2.0
    if p is None:
        return None, None
    extrapolated = caps[-1] + (caps[-1] - caps[-2]) / (2.0**p - 1.0)
    return extrapolated, p


def solve_3d(
    layout: Layout,
    options: SolveOptions | None = None,
    *,
    start_level: int = 0,
    method: Method = "auto",
    memory_limit_bytes: int | None = None,
    aca_tol: float | None = None,
    check: bool = True,
    symmetry: bool = True,
    **overrides: Any,
) -> PanelSolution:
    """Solve a layout of 3-D surfaces (every conductor's and dielectric region's shape a
    :class:`elopt.physics.bem3d.surfaces.Surface`; regions closed, see :mod:`.bodies`).

    ``options`` (default :class:`SolveOptions`), with any of its fields given as keywords
    instead (``rel_accuracy=1e-3``, ``max_level=2``), drive
    :func:`elopt.physics.refinement.refine` over levels ``start_level``, ... (each halves the
    panel size); ``order`` is not used (one constant density per flat triangle). ``method``
    "auto" solves levels of up to :data:`DENSE_MAX_PANELS` panels densely (with a symmetry: up
    to :data:`DENSE_MAX_ENTRIES` computed entries), larger ones fast.
    ``memory_limit_bytes`` defaults to 80 % of the available memory; ``aca_tol`` (compression
    tolerance of the hierarchical matrix) to 0.3 rel_accuracy; ``check`` validates every mesh;
    ``symmetry`` lets a level whose panels are mirror symmetric in x and/or y be solved on one
    panel per orbit (conductors only, see :mod:`.symmetry`).
    Planar layers (``layout.layers``) enter through the layered Green's function of
    :mod:`.layered_green`: dense levels on one panel per orbit when symmetric (the reduced
    matrix assembled a block of rows at a time), fast levels compressed by
    :mod:`.hmatrix_layered` (with dielectric bodies such levels are solved densely;
    ``method="fast"`` is refused).
    """
    opts = make_options(options, overrides)
    _map_large_arrays()
    if method not in ("auto", "dense", "fast"):
        raise SolverError(f"method must be one of auto, dense, fast; got {method!r}")
    conductor_surfaces(layout)
    region_surfaces(layout)
    tol = min(opts.rel_accuracy, opts.peak_rel_accuracy or 1.0)
    # Measured on the unit cube: C moves by 0.03-0.06 times the compression tolerance.
    aca = min(1e-3, 0.3 * tol) if aca_tol is None else float(aca_tol)
    gmres_rtol = min(1e-4, 0.05 * tol)
    if layout.regions:
        # Started from the previous level, GMRES met 5e-5 after 6 iterations with C still
        # 1.5e-4 off on the coated sphere of 40960 panels; 5e-6 took 12 and left < 1e-5.
        gmres_rtol *= 0.1
    n_columns = len(layout.conductors) + 1

    def plan(level: int) -> LevelPlan:
        panels = discretise(layout, level, check=check)
        sym = mirror_symmetry(panels) if symmetry else None
        n_solved = panels.n if sym is None else sym.n_reduced
        chosen = method
        if method == "auto":
            dense = n_solved * panels.n <= DENSE_MAX_ENTRIES
            if panels.background is not None and sym is not None:
                # Layered entries cost far more than free-space ones and the compressed
                # layered operator drops the symmetry: measured on the board-pad demo, a
                # symmetric dense level of 11852 panels (2963 orbits) took less than half the
                # CPU time of the same level compressed.
                dense = n_solved <= DENSE_MAX_PANELS
            chosen = "dense" if dense else "fast"
        if panels.background is not None:
            chosen = layered_method(method, chosen, panels.n_conductor_panels < panels.n)
            if chosen == "fast":
                sym, n_solved = None, panels.n

        def run(previous: LevelResult3D | None) -> LevelResult3D:
            _return_freed_memory()
            result = solve_level(
                layout,
                panels,
                method=chosen,
                gmres_rtol=gmres_rtol,
                aca_tol=aca,
                previous=previous,
                symmetry=sym,
            )
            _return_freed_memory()
            return result

        need = estimate_memory_bytes(panels, chosen, n_columns, None if sym is None else n_solved)
        note = f"{chosen} solve"
        if panels.background is not None:
            if chosen == "dense":
                need += extra_dense_bytes(panels.n, None if sym is None else min(ROWS, n_solved))
            refused = symmetry_refusal(panels) if symmetry else None
            note += ", planar layers" + (f" ({refused})" if refused else "")
        return LevelPlan(level, panels.n, need, note, run)

    # Measured (tests/benchmarks/measure_error_estimate.py): successive changes of C shrink by
    # 0.15-0.25 per level; the compressed matrix moves C by up to 0.06 aca; the peak is the
    # largest panel value, its panel moves between levels, so it converges irregularly.
    convergence = Convergence(
        capacitance_floor=max(1e-12, 0.1 * aca),
        peak_floor=max(1e-12, 0.1 * aca),
        peak_regular=False,
    )
    refinement = refine(
        plan,
        opts,
        convergence,
        start_level=start_level,
        memory_limit_bytes=memory_limit_bytes,
        covered=layout.estimate_indices,
    )
    caps = [lv.capacitance_F for lv in refinement.levels]
    extrapolated, rate = richardson(caps, refinement.levels[-1].panels.all_smooth)
    return PanelSolution(
        layout=layout,
        refinement=refinement,
        capacitance_extrapolated_F=extrapolated,
        convergence_rate=rate,
    )

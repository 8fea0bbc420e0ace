"""2-D boundary-element solve per unit length (log kernel), open or periodic, on a layer stack.

For every node x on conductor c the first-kind equation

    sum over panels of  integral G(x, y) sigma(y) ds(y) = V_c  (- v_inf without a ground plane)

holds, G the layered kernel of :mod:`elopt.physics.bem2d.layered_green` (periodic along x with
period ``period_m`` if given). Without a grounded plane the charges of the cell/cross-section
sum to zero and v_inf (the potential far away, or the cell's mean level) is an unknown: in 2-D
a net charge per unit length has no finite potential. The Maxwell matrix then has rows summing
to zero. One LU factorisation gives every column (conductor c at 1 V, the rest at 0) and,
with a uniform applied field E0 along +z (no layers), one more (conductors at 0 V, phi = -E0 z
far away). Bounded dielectric regions add second-kind rows for their boundary densities
(:mod:`elopt.physics.bem2d.regions`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cached_property

import numpy as np
import scipy.linalg

from elopt.physics.bem2d.assemble import potential_matrix
from elopt.physics.bem2d.layered_green import Slabs
from elopt.physics.bem2d.mesh import Panels, build_panels
from elopt.physics.bem2d.regions import (
    Region2D,
    check_regions,
    free_factor,
    pv_from_potentials,
    pv_points,
    region_rows,
)
from elopt.physics.bem2d.shapes import Bar, Strip
from elopt.physics.errors import GeometryError, SolverError
from elopt.physics.layout import Layout
from elopt.physics.refinement import (
    Convergence,
    LevelPeak,
    LevelPlan,
    SolveOptions,
    make_options,
    peaks_per_conductor,
    refine,
)


@dataclass(frozen=True)
class Problem2D:
    """A validated 2-D layout: slabs, pieces, panel size cap, period (m or None)."""

    layout: Layout
    slabs: Slabs
    period_m: float | None
    h_max_m: float
    extent_m: float
    regions: tuple[Region2D, ...] = ()
    holder: tuple[int, ...] = ()

    @property
    def grounded(self) -> bool:
        return self.layout.ground_plane

    def pieces(self) -> list:
        """(pieces, is_sheet) of every conductor, then of every region's outline."""
        out = [(c.shape.pieces(), not c.shape.closed) for c in self.layout.conductors]
        return out + [(r.shape.pieces(), False) for r in self.regions]


def _boxes_apart(a, b, shift: float = 0.0) -> float:
    """Gap (m) between two bounding boxes (x0, x1, z0, z1), b shifted by ``shift`` in x."""
    gx = max(a[0] - (b[1] + shift), (b[0] + shift) - a[1])
    gz = max(a[2] - b[3], b[2] - a[3])
    return max(gx, gz)


def prepare(layout: Layout, period_m: float | None) -> Problem2D:
    """Check ``layout`` for the 2-D solver and derive the mesh limits."""
    if period_m is not None and not (math.isfinite(period_m) and period_m > 0):
        raise GeometryError(f"period_m must be finite and > 0, got {period_m}")
    slabs = Slabs.from_stack(layout.layer_stack)
    if layout.applied_field_V_per_m != 0.0 and (slabs.layered or slabs.n > 1):
        raise GeometryError(
            "2-D solver: an applied field with planar layers is not supported (the unperturbed "
            f"field differs per layer); got applied_field_V_per_m = "
            f"{layout.applied_field_V_per_m:g}"
        )
    boxes = []
    for c in layout.conductors:
        if not isinstance(c.shape, (Strip, Bar)):
            raise GeometryError(
                f"conductor '{c.name}': the 2-D solver takes Strip or Bar shapes, got "
                f"{type(c.shape).__name__}"
            )
        c.shape.validate(c.name)
        x0, x1, z0, z1 = c.shape.bounds
        if layout.ground_plane and z0 <= 0.0:
            raise GeometryError(
                f"conductor '{c.name}': touches or crosses the ground plane (z from {z0:g} m); "
                "every point must have z > 0"
            )
        lo = slabs.index(np.array([z0]))[0]
        top = slabs.top_m[lo]
        if z1 > top * (1 + 1e-12) + 1e-15 and not (z0 == z1):
            raise GeometryError(
                f"conductor '{c.name}': spans z = {z0:g} .. {z1:g} m across the layer interface "
                f"at z = {top:g} m; a conductor must lie within one layer (it may touch an "
                "interface with a face)"
            )
        if period_m is not None and x1 - x0 >= period_m:
            raise GeometryError(
                f"conductor '{c.name}': width {x1 - x0:g} m must be less than the period "
                f"{period_m:g} m"
            )
        boxes.append((x0, x1, z0, z1))
    size = max(max(b[1] - b[0], b[3] - b[2]) for b in boxes)
    shifts = (0.0,) if period_m is None else (-period_m, 0.0, period_m)
    gaps = []
    for i in range(len(boxes)):
        if period_m is not None:
            gaps.append(period_m - (boxes[i][1] - boxes[i][0]))
        for j in range(i + 1, len(boxes)):
            g = min(_boxes_apart(boxes[i], boxes[j], s) for s in shifts)
            if g <= 1e-9 * size:
                a, b = layout.conductors[i].name, layout.conductors[j].name
                raise GeometryError(
                    f"conductors '{a}' and '{b}' touch or overlap (gap {g:.3g} m); conductors "
                    "must be apart"
                )
            gaps.append(g)
    regions, holder, region_caps = check_regions(layout, slabs, period_m)
    caps = [0.5 * size, *region_caps]
    caps += [2.0 * g for g in gaps if g > 0]
    if period_m is not None:
        caps.append(0.25 * period_m)
    if slabs.layered:
        caps.append(2.0 * slabs.min_thickness_m)
    if layout.ground_plane:
        caps.append(2.0 * min(b[2] for b in boxes))
    xs = [v for b in boxes for v in b[:2]]
    extent = (max(xs) - min(xs)) if period_m is None else period_m
    return Problem2D(layout, slabs, period_m, min(caps), extent + size, regions, holder)


def default_order(rel_accuracy: float) -> int:
    """Gauss nodes per panel for a requested accuracy.

    The error is set by the graded strip edges, not by the order (4, 6 and 8 nodes converge
    alike); 3 nodes, for requests of 1e-4 and looser, converged as regularly (true error
    0.14-0.15 of the last change; 0.23-0.40 between mesh levels -1 and 0) with a quarter fewer
    unknowns (tests/benchmarks/measure_error_estimate_2d.py cases); 2 did not.
    """
    if rel_accuracy >= 1e-4:
        return 3
    if rel_accuracy >= 1e-5:
        return 4
    return 6 if rel_accuracy >= 1e-8 else 8


@dataclass(frozen=True, eq=False)
class LevelResult2D:
    """One level: panels, unit-potential densities (N, n) C/m^2 per V, far offsets (n,) V,
    capacitance matrix (n, n) F/m (per cell when periodic), solve matrix size."""

    problem: Problem2D
    panels: Panels
    sigma_unit: np.ndarray
    offset_unit: np.ndarray
    capacitance_F: np.ndarray
    applied_charges_C: np.ndarray
    n_unknowns: int
    sigma_applied: np.ndarray | None = None
    offset_applied: float = 0.0
    node_factor: np.ndarray | None = None
    node_eps: np.ndarray | None = None

    @cached_property
    def samples(self) -> dict:
        """Surface samples of every conductor at the layout's excitation (sheets split)."""
        from elopt.physics.bem2d.samples import level_samples

        return level_samples(self)

    @cached_property
    def peak_samples(self) -> dict:
        """Samples of the closed conductors and of the sheet nodes that may hold a peak."""
        from elopt.physics.bem2d.samples import level_samples, sheet_peak_candidates

        if not self.panels.sheet.any():
            return self.samples
        return level_samples(self, sheet_peak_candidates(self))

    def peaks(self) -> tuple[LevelPeak, ...]:
        s = self.peak_samples
        field = np.abs(s["sigma"]) / s["eps"]
        pts = np.stack([s["points"].real, s["points"].imag], axis=1)
        shapes = [c.shape for c in self.problem.layout.conductors]
        sharp = np.array(
            [(not sh.closed) or getattr(sh, "corner_radius_m", 0.0) == 0.0 for sh in shapes]
        )
        return peaks_per_conductor(
            self.problem.layout.names, s["owner"], field, pts, sharp[s["owner"]]
        )


def solve_level(
    problem: Problem2D, level: int, order: int, panels: Panels | None = None
) -> LevelResult2D:
    """Mesh at ``level`` (or take ``panels``, built for it), assemble, factor once and solve
    every unit-potential column."""
    layout = problem.layout
    if panels is None:
        panels = build_panels(problem.pieces(), problem.h_max_m, level, order)
    a = potential_matrix(
        panels, problem.slabs, panels.points, period=problem.period_m, extent_m=problem.extent_m
    )
    n = len(layout.conductors)
    owner = panels.node_conductor
    w = panels.node_weights
    nn = panels.n
    e0 = layout.applied_field_V_per_m
    rhs = np.zeros((nn, n + 1))
    cond = owner < n
    rhs[np.nonzero(cond)[0], owner[cond]] = 1.0
    rhs[cond, n] = e0 * panels.points[cond].imag  # phi_q = V + E0 z on the conductors
    if problem.regions:
        rows, coef, field_rhs = region_rows(problem.regions, owner, n, panels.normals.ravel(), e0)
        half = np.repeat(panels.half, panels.order)[rows]
        targets = pv_points(panels.points[rows], panels.normals.ravel()[rows], half)
        pv = pv_from_potentials(
            potential_matrix(
                panels,
                problem.slabs,
                targets,
                period=problem.period_m,
                extent_m=problem.extent_m,
            ),
            half,
        )
        a[rows] = -coef[:, None] * pv
        a[rows, rows] += 1.0
        rhs[rows, n] = field_rhs
    if not np.all(np.isfinite(a)):
        raise SolverError("2-D collocation matrix has non-finite entries; check the geometry")
    if not problem.grounded:
        # v_inf enters the conductors' rows only; the whole cross-section is neutral.
        bordered = np.zeros((nn + 1, nn + 1))
        bordered[:nn, :nn] = a
        bordered[:nn, nn] = -cond.astype(float)
        bordered[nn, :nn] = w
        a = bordered
        rhs = np.vstack([rhs, np.zeros((1, n + 1))])
    lu = scipy.linalg.lu_factor(a, check_finite=False)
    sol = scipy.linalg.lu_solve(lu, rhs, check_finite=False)
    sigma = sol[:nn, :n]
    offset = sol[nn, :n] if not problem.grounded else np.zeros(n)
    factor, eps = free_factor(problem.regions, problem.holder, owner)
    free = (factor * w)[:, None]
    charges = np.zeros((n, n))
    np.add.at(charges, owner[cond], (sigma * free)[cond])
    applied = np.zeros(n)
    np.add.at(applied, owner[cond], (sol[:nn, n] * free[:, 0])[cond])
    return LevelResult2D(
        problem,
        panels,
        sigma,
        offset,
        charges,
        applied,
        nn,
        sol[:nn, n],
        float(sol[nn, n]) if not problem.grounded else 0.0,
        factor,
        eps,
    )


#: How the levels converge, measured by tests/benchmarks/measure_error_estimate_2d.py on the
#: closed forms of docs/references.md items 17 and 19 and a three-layer periodic cell (4, 6 and
#: 8 nodes per panel, levels 0-4): successive changes of C shrink by 0.125-0.136 per level and
#: the true error of a level is 0.132-0.156 of its change from the level before, so two levels
#: assume a ratio of 0.2 (with SAFETY 2 the estimate is half the change: 3.2 times the largest
#: measured error). Noise floors: no floor showed down to 2e-9 (periodic tails 1e-13); the
#: capacitance floor 1e-8 covers the open-stack remainder table (2e-7 of the remainder,
#: tests/test_bem2d_kernel.py), the peak floor the sheet faces' one-sided differences (1e-5).
CONVERGENCE = Convergence(capacitance_floor=1e-8, peak_floor=1e-5, prior_ratio=0.2)


#: Requests at least this loose start one mesh level coarser (mesh level -1: panels twice as
#: long, one graded panel less). Measured (true error / change from the level before, which
#: the two-level estimate must cover at 0.5): 0.25 on the three-layer periodic strip cell,
#: 0.025 on periodic and four-finger cells of filleted bars; two levels coarser the bars were
#: not yet converging regularly (1.4), so the start goes one level down only.
LOOSE_ACCURACY = 1e-3


def solve_2d(
    layout: Layout,
    *,
    period_m: float | None = None,
    options: SolveOptions | None = None,
    **overrides,
):
    """Solve ``layout`` (Strip/Bar shapes, layers) per unit length (per cell when periodic).

    ``options`` (:class:`elopt.physics.refinement.SolveOptions`) or keyword overrides of its
    fields (``rel_accuracy=...``); the shared loop :func:`elopt.physics.refinement.refine`
    decides the levels and the error estimate. Returns a
    :class:`elopt.physics.bem2d.solution.Solution2D`.
    """
    from elopt.physics.bem2d.solution import Solution2D

    opts = make_options(options, overrides)
    order = default_order(opts.rel_accuracy) if opts.order is None else opts.order
    if not 2 <= order <= 12:
        raise SolverError(f"order (nodes per panel) must lie in [2, 12], got {order}")
    problem = prepare(layout, period_m)
    pieces = problem.pieces()
    extra = 0 if layout.ground_plane else 1

    shift = 1 if opts.rel_accuracy >= LOOSE_ACCURACY else 0

    def plan(level: int) -> LevelPlan:
        mesh_level = level - shift
        panels = build_panels(pieces, problem.h_max_m, mesh_level, order)
        n = panels.n + extra
        return LevelPlan(
            level,
            n,
            24 * n * n,
            "dense LU",
            lambda _prev: solve_level(problem, mesh_level, order, panels),
        )

    refinement = refine(plan, opts, CONVERGENCE, covered=layout.estimate_indices)
    return Solution2D(problem, refinement)

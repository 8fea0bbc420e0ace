"""Cheaper partners for the coarse axisymmetric solve's level 0, judged on the guarded probes.

The conductors-only solve at 1e-4 (bem_axi.solve.CONDUCTOR_COARSE_RULE, 4 nodes per panel)
stops after two levels; level 0 alone is already within 1.5e-5 - 2.1e-5 of the bench probes'
reference, and level 1 (every level-0 panel halved, one more grading step at singular corners)
costs about three quarters of the solve, paid for the error estimate (1.64 times the change of
C between the levels). This script replaces level 1 by a cheaper partner and judges it as
measure_error_estimate_probes.py judges the solve: on its grid of 52 guarded probes, the loop
runs at requests 1e-3, 3e-4 and 1e-4 with the coarse solve's convergence data (prior ratio
``--prior``, default bem_axi.solve.COARSE_PRIOR_RATIO; at most three levels), and each stop's
true error (entry (i, j) scaled by sqrt(C_ii C_jj), against the probe's own solve at
rel_accuracy 1e-8) is compared with its estimate.

    python3 tests/benchmarks/measure_partner_levels.py [--prior 0.45] [--repeats 15]

Partners (level-0 panels throughout; "corner step": the panel at each singular corner cut once
more at 1/8, as level 1 grades it):
  level 1     every panel halved + corner step (the solve's own level 1; level 2 its level 2)
  p5, p6      no panel halved, corner step, 5 or 6 nodes per panel (a p-partner; level 2
              every panel halved and two corner steps at the same nodes)
  jump 0.9    panels halved where level 0's density jumps between neighbours (per panel: the
              jumps at its ends times r, its length and its mean |sigma|, per excitation column;
              the largest panels up to 90 % of the sum, Doerfler marking) + corner step
  long 0.1    panels at least 0.1 times the longest halved + corner step
(jump 0.9 and long 0.1: level 2 is the solve's own level 1.)
Prints per partner: pairs above the estimate (of 156), the largest true / estimate, mean
unknowns summed over the levels at 1e-4, and the CPU ms of levels 0 and 1 (mesh, assembly,
LU) on the two probes of bench_fem_compare.py (median of ``--repeats``).

Measured 3 Dec 2026 06:27 UTC, ``--repeats 31`` (load average 2.3 on the 2 cores, other
helpers' work beside it), CPU ms of levels 0 + 1 (the whole solve: about 4.9 ms filleted,
6.4 ms sharp, bench_fem_compare.py):

    partner    above / 156  worst  mean N at 1e-4  L0+L1 cpu ms filleted  sharp
    level 1    0            0.94   453             2.50                   4.69
    p5         28           6.50   342             2.06                   3.99
    p6         3            3.23   384             2.41                   4.74
    jump 0.9   6            1.39   360             2.35                   4.28
    long 0.1   9            1.77   391             2.26                   3.84

With ``--prior 0.6`` (the two-level estimate 3 times the change): level 1 2 above (1.94), p5
10 (6.50), p6 4 (3.23), jump 0.9 3 (9.53), long 0.1 6 (3.93): more probes take a third level,
and the three-level stops of fillet 0.1 mm, gap 0.05 mm come out above, where an error of
about 5e-6 shared by the partner and the next level does not show in their change. A partner
of 3 nodes per panel on the level-0 panels, the solve's level 0 as its level 1, sends the
filleted bench probe to a third level (78 + 104 + 208 unknowns, 1.66 times above). Levels 1
and 2 at 3 nodes per panel (every panel halved + corner step; 258 unknowns instead of 344 on
the sharp probe): 26 above, up to 5.8 times. No partner is honest on the grid, and the
cheapest (p5) saves 0.4 - 0.7 ms of the solve; level 1 stays.
Coarser level-0 rules with the solve's own levels (same day, same grid, prior 0.45): panels at
most 3 times their gap (GAP_FACTOR 2) 10 above, up to 3.1 times (mean 400 unknowns at 1e-4);
4 times and one bulk panel per size 25 above, up to 6.2 times; one corner step at level 0
leaves the sharp probe 6.7e-4 - 9.7e-4 off and takes three levels.
Also measured and not taken (prototypes, same day): a one-level estimate from level 0's
residual weighted by its own density (the first-order term of the capacitance error: the
second-order term is as large, the variational value off by 2.5e-5 where level 0 is 2.1e-5
off), and solving level 1 by GMRES with level 0's LU as coarse correction and panel-block
Jacobi smoothing (11 iterations filleted, about 30 sharp to 1e-10: dearer than the 1.1 ms LU
of 344 unknowns once the iterations run in Python).
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_fem_compare import PROBES as BENCH_PROBES  # noqa: E402
from bench_fem_compare import probe_params  # noqa: E402
from measure_error_estimate_probes import REFERENCE_REQUEST, REQUESTS, probes  # noqa: E402

from elopt.physics.bem_axi import mesh as axi_mesh  # noqa: E402
from elopt.physics.bem_axi.solve import (  # noqa: E402
    COARSE_COLLAPSE_RATIO,
    COARSE_ENTRY_ERROR,
    COARSE_ENTRY_FLOORS,
    COARSE_PRIOR_RATIO,
    CONDUCTOR_COARSE_RULE,
    solve_axisymmetric,
    solve_level,
)
from elopt.physics.electrodes.guarded_disk import GuardedDisk  # noqa: E402
from elopt.physics.layout import Layout  # noqa: E402
from elopt.physics.quadrature import lagrange_matrix  # noqa: E402
from elopt.physics.refinement import (  # noqa: E402
    Convergence,
    LevelPlan,
    SolveOptions,
    refine,
    relative_change,
)
from elopt.physics.threads import limit_blas_threads  # noqa: E402

RULE = CONDUCTOR_COARSE_RULE
ORDER = 4
#: A partner: which level-0 panels to halve (given the layout, its level-0 panels and the
#: solved level 0) and the nodes per panel of level 1 and beyond.
Partner = tuple[Callable | None, int]


def partner_mesh(layout: Layout, halve: np.ndarray, steps: int, order: int):
    """Level-0 panels with those of ``halve`` (M,) halved, ``steps`` more grading cuts at every
    singular corner, ``order`` nodes per panel (the mesh says level ``steps``)."""
    base = axi_mesh._base_panels(layout, RULE)
    panels = axi_mesh._CurvePanels(base.piece, base.t0, base.t1).split(halve)
    piece, t0, t1 = axi_mesh._grade_corners(base, panels.piece, panels.t0, panels.t1, steps, RULE)
    return axi_mesh._assemble_mesh(layout, base, piece, t0, t1, steps, order)


def jump_marks(theta: float) -> Callable:
    """Doerfler marking of level 0's panels by the density jumps at their ends."""

    def marks(layout: Layout, mesh0, level0) -> np.ndarray:
        ends = lagrange_matrix(np.array([-1.0, 1.0]), ORDER)
        sig = level0.sigma_unit.reshape(mesh0.n_panels, ORDER, -1)
        start, end = (np.einsum("k,pkn->pn", w, sig) for w in ends)
        base = axi_mesh._base_panels(layout, RULE)
        same = mesh0.conductor[1:] == mesh0.conductor[:-1]
        first, last = axi_mesh._piece_ends(base.piece)
        for k, at_end in base.corner_ends:  # the density is singular there: no jump
            j = last[k] if at_end else first[k] - 1
            if 0 <= j < len(same):
                same[j] = False
        jump = np.abs(end[:-1] - start[1:]) * same[:, None]
        weight = (mesh0.center_m[:, 0] * mesh0.length_m)[:, None] * np.abs(sig).mean(axis=1)
        eta = np.zeros_like(weight)
        eta[:-1] += jump * weight[:-1]
        eta[1:] += jump * weight[1:]
        eta = (eta / eta.sum(axis=0)).max(axis=1)
        rank = np.argsort(-eta)
        n = int(np.searchsorted(np.cumsum(eta[rank]) / eta.sum(), theta)) + 1
        out = np.zeros(mesh0.n_panels, dtype=bool)
        out[rank[:n]] = True
        return out

    return marks


def long_marks(share: float) -> Callable:
    def marks(layout: Layout, mesh0, level0) -> np.ndarray:
        return mesh0.length_m >= share * mesh0.length_m.max()

    return marks


def all_marks(layout: Layout, mesh0, level0) -> np.ndarray:
    return np.ones(mesh0.n_panels, dtype=bool)


#: name -> (marks of the panels halved at level 1 (None: none), nodes per panel from level 1)
PARTNERS: dict[str, Partner] = {
    "level 1": (all_marks, ORDER),
    "p5": (None, 5),
    "p6": (None, 6),
    "jump 0.9": (jump_marks(0.9), ORDER),
    "long 0.1": (long_marks(0.1), ORDER),
}


def level_mesh(layout: Layout, partner: Partner, level0, level: int):
    """Mesh of ``level`` (1 or 2) for ``partner`` given the solved ``level0``."""
    marks, order = partner
    if marks is all_marks:
        return axi_mesh.build_mesh(layout, level, ORDER, RULE)
    mesh0 = level0.mesh
    if marks is None:  # p-partner: level 2 halves every panel at the same order
        halve = np.full(mesh0.n_panels, level == 2)
        return partner_mesh(layout, halve, level, order)
    if level == 2:
        return axi_mesh.build_mesh(layout, 1, ORDER, RULE)
    return partner_mesh(layout, marks(layout, mesh0, level0), 1, order)


def run(layout: Layout, partner: Partner, request: float, convergence: Convergence):
    """The refinement loop over level 0 and ``partner``'s levels at ``request``."""
    mesh0 = axi_mesh.build_mesh(layout, 0, ORDER, RULE)
    solved: dict[int, object] = {}

    def plan(level: int) -> LevelPlan:
        if level == 0:
            mesh = mesh0
        else:
            mesh = level_mesh(layout, partner, solved[0], level)

        def solve(_, mesh=mesh, level=level):
            solved[level] = solve_level(layout, mesh, COARSE_ENTRY_ERROR)
            return solved[level]

        return LevelPlan(level, mesh.n_nodes, 0, "", solve)

    return refine(plan, SolveOptions(rel_accuracy=request, max_level=2), convergence)


def cpu_ms(layout: Layout, partner: Partner, repeats: int) -> float:
    """Median CPU ms of levels 0 and 1 (meshes from the cached level-0 panels, assembly, LU)."""
    times = []
    for _ in range(repeats):
        start = time.process_time()
        level0 = solve_level(
            layout, axi_mesh.build_mesh(layout, 0, ORDER, RULE), COARSE_ENTRY_ERROR
        )
        solve_level(layout, level_mesh(layout, partner, level0, 1), COARSE_ENTRY_ERROR)
        times.append(time.process_time() - start)
    return 1e3 * statistics.median(times)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--prior", type=float, default=COARSE_PRIOR_RATIO)
    parser.add_argument("--repeats", type=int, default=15)
    args = parser.parse_args()
    limit_blas_threads()
    convergence = Convergence(
        capacitance_floor=COARSE_ENTRY_FLOORS[0],
        peak_floor=COARSE_ENTRY_FLOORS[1],
        prior_ratio=args.prior,
        collapse_ratio=COARSE_COLLAPSE_RATIO,
    )
    rows: dict[str, list] = {name: [] for name in PARTNERS}
    for p in probes():
        layout = GuardedDisk().build(p)
        ref = solve_axisymmetric(layout, rel_accuracy=REFERENCE_REQUEST).capacitance_matrix_F
        for name, partner in PARTNERS.items():
            for req in REQUESTS:
                out = run(layout, partner, req, convergence)
                true = relative_change(out.levels[-1].capacitance_F, ref)
                unknowns = sum(lv.n_unknowns for lv in out.levels)
                rows[name].append((req, true, out.estimate.capacitance, unknowns))
    bench = [GuardedDisk().build(probe_params(f, s)) for _, f, s in BENCH_PROBES]
    print(f"prior ratio {args.prior:g}; {len(rows['level 1'])} (probe, request) pairs")
    print("partner    above  worst  mean N at 1e-4  L0+L1 cpu ms filleted  sharp")
    for name, partner in PARTNERS.items():
        ratio = np.array([true / est for _, true, est, _ in rows[name]])
        at_tightest = [n for req, _, _, n in rows[name] if req == min(REQUESTS)]
        cpu = [cpu_ms(layout, partner, args.repeats) for layout in bench]
        print(
            f"{name:9s}  {int(np.sum(ratio > 1)):5d}  {ratio.max():5.2f}  "
            f"{np.mean(at_tightest):14.0f}  {cpu[0]:21.2f}  {cpu[1]:5.2f}"
        )


if __name__ == "__main__":
    main()

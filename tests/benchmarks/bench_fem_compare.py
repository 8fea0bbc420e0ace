"""The axisymmetric BEM against a general P2 finite-element solve of the same guarded probes.

Run: ``python tests/benchmarks/bench_fem_compare.py [--repeats 9] [--stages] [--before DIR]``
(needs the ``bench`` extra: scikit-fem and gmsh; about a minute). Prints one table, both times
and their ratio; ``--stages`` first prints the BEM solve's CPU time per stage (median of the
repeats); ``--before DIR`` first times the BEM of another copy of the package in the same run
(DIR holds ``elopt/physics``; a child process imports it through PYTHONPATH) and prints its
rows against the FEM too.

Probes (guarded_disk family): sensor radius 2 mm, gap 0.1 mm, guard to 4 mm, thickness
0.5 mm; (a) filleted 0.05 mm at 0.2 mm standoff, (b) sharp-cornered at 0.5 mm standoff. The
quantity is the sense capacitance C_sense = Q_sensor / V with the guard driven at V.
Reference: our BEM at rel_accuracy 1e-9 (its own estimate is printed).

BEM: ``solve_axisymmetric`` at rel_accuracy 1e-4, with its meshing (the per-layout mesh cache
is cleared before every run, as for a new trial), median of the repeats.

FEM: the Laplace equation in the (r, z) half-plane, weak form integral grad u . grad v r dr dz
(axisymmetric, r-weighted), isoparametric P2 triangles (gmsh, second-order nodes on the
fillets), u = 1 V on sensor and guard, 0 on the plane z = 0 and on a quarter circle of radius
R_out = 25 x the guard's outer radius (truncation); natural condition on the axis. C_sense is the
Galerkin reaction 2 pi eps sum over the sensor's degrees of freedom of (K u), as accurate as
the energy. The mesh size grows linearly with the distance from the conductors (slope 0.25)
and from the corners (slope 0.3), from sizes proportional to a scale s. The scales 16, 11.3, 8,
5.6, 4, 2.8, 2, 1.4, 1, 0.7, 0.5 are tried in turn until one has an error against the reference
of at most 1e-4; three geometric bisections between it and the coarser scale that failed then
find a coarser mesh that still meets 1e-4 where there is one, and the coarsest scale met is
timed (meshing, assembly, solve and charge; median of the repeats): this favours the FEM, which
is not charged for the search nor for an error estimate of its own. The truncation error is
stated as the change of C_sense when R_out doubles on that mesh size.

Measured 2026-12-02, ``--repeats 9 --before`` (the package before the conductors-only coarse
rule, its 1e-6 entries and the compiled near pass), one run on the 2-core machine under heavy
load (``uptime`` load average 15 at start and end; the full test suite ran beside it), so the
wall times are noise and the CPU times the figure (ms, medians):

    probe                     BEM cpu before -> after   N before -> after   FEM cpu   ratio
    filleted 0.05 mm, 0.2 mm  10.5 -> 8.1               132+264 -> 104+208  78.7      7.5x -> 9.7x
    sharp, 0.5 mm             16.9 -> 10.4              196+440 -> 148+344  66.2      3.9x -> 6.4x

C_sense errors after: 2.7e-6 and 8.5e-8 (estimates 1.3e-5 and 1.8e-5 of the matrix). The 30x
target is not met; what is left per solve (CPU ms, sharp probe, --stages, loaded): layout 0.7,
level-0 grading 0.6, meshes 0.6, far sums 2.0, near panels 3.7 (before the 1e-6 entries),
LU 2.8.

Re-run after the merges on a near-idle machine (2 Dec 2026 18:40, load 0.8), 9 repeats:
filleted BEM 6.42 ms vs FEM 79.1 ms (12.3x), sharp 9.56 ms vs 66.0 ms (6.9x); BEM errors
2.7e-6 / 8.5e-8 against estimates 1.3e-5 / 1.8e-5. The 30x target is not met.

3 Dec 2026 04:02, ``--repeats 9 --before`` (main's package at 02c8a3a against the axilevels
branch: meshes built from flat arrays, curve samples computed once, the coarse solve's prior
ratio 0.45 and collapse ratio 0.03), one run under heavy load (``uptime`` load average 7.0 at
start, 6.4 at end, the test suite running beside it), so the wall times are noise and the CPU
times the figure (ms, medians):

    probe                     BEM cpu before -> after   N (both)    FEM cpu   ratio
    filleted 0.05 mm, 0.2 mm  6.22 -> 5.42              104+208     71.3      11.5x -> 13.1x
    sharp, 0.5 mm             8.40 -> 7.90              148+344     59.8      7.1x -> 7.6x

Same levels and C (errors 2.7e-6 / 8.5e-8); the estimates are 2.2e-5 / 3.0e-5 instead of
1.3e-5 / 1.8e-5 (the two-level estimate is 1.64 times the change, measured honest on a grid
of guarded probes by measure_error_estimate_probes.py). Level 0 alone already has matrix
errors of 2.1e-5 / 1.5e-5 against the 1e-9 reference; level 1 (2.3 times the unknowns, about
three quarters of the solve) is paid for the estimate. No cheaper honest pair was found: the
sharp probe's level 0 needs both corner steps (one fewer: 6.7e-4 off); coarser gap or bulk
rules that stay as honest on the guarded-probe grid save 4 - 7 % of the unknowns here, those
saving about 20 % are not (up to 50 times under the true error there); a partner of one node
less per panel on the same panels is not honest at sheet edges (coaxial disks d/R = 0.1: the
3 -> 4 node change 7.0e-6, the error 1.6e-5; a disk is 5.3e-6 off at 4 nodes, 5.4e-6 at 5).
The 30x target is not met.

Measured 3 Dec 2026 after the batched kernel values (the collocation matrix's potential values
listed by compiled passes, K through numpy's vectorised logarithm, near and self rules summed
into Lagrange rows from moments; LU of the transpose without a reordering copy), ``--repeats 9
--stages --before`` (main's package at 02c8a3a), three runs on the 2-core machine shared with
other work (``uptime`` load average 6.3 -> 8.0, 8.5 -> 9.5 and 6.6 -> 7.3 from start to end;
runs 1 and 2 before the last small commits, run 3 the final code), CPU ms, medians:

    probe                     run   BEM cpu before -> after   FEM cpu   FEM/BEM cpu
    filleted 0.05 mm, 0.2 mm  1     6.17 -> 5.56              70.7      11.5x -> 12.7x
                              2     6.23 -> 5.84              73.3      11.8x -> 12.6x
                              3     6.18 -> 5.74              71.4      11.5x -> 12.4x
    sharp, 0.5 mm             1     8.16 -> 6.42              58.5       7.2x ->  9.1x
                              2     8.43 -> 6.95              61.0       7.2x ->  8.8x
                              3     8.32 -> 6.69              58.6       7.0x ->  8.8x

Unknowns, errors and estimates unchanged (the entries equal main's to 3e-15). The 30x target
is not met. Per solve after (CPU ms, --stages, run 3; the stage table now times the solve's
own 1e-6 entries), sharp probe: layout 0.65, level-0 grading 0.53, meshes 0.59, far sums 0.76
(1.86 on an idle machine before), self panels 0.35, near panels 1.57, LU and solve 1.40; the
filleted probe spends 3.0 of its 5.7 ms in layout, grading and meshes.

Lead's re-run on the merged main (both branches above and the covered-entries change),
near-idle machine (3 Dec 2026 05:17, load 1.1-1.3), ``--repeats 9 --before`` (main at
02c8a3a), ms, medians:

    probe                     BEM cpu before -> after   FEM cpu   FEM/BEM cpu
    filleted 0.05 mm, 0.2 mm  5.94 -> 5.08              70.0      11.8x -> 13.8x
    sharp, 0.5 mm             8.07 -> 6.48              58.8       7.3x ->  9.1x

The 30x target is not met.

3 Dec 2026 06:40, ``--repeats 9 --stages --before`` (main's package at d11f2b6 against the
axifast branch: the per-level cost only; meshes, densities and C bit for bit main's on the
16 layouts compared (guarded probes at 1e-3 - 1e-6, a sphere over the plane, a spheroid with
a floating disk in an applied field, coaxial disks); near and self rules' sub-rule
points computed where used, straight panels' length element once per panel; curve hashes,
samples, arc ends and end tangents computed once; the gap test's midpoints and the meshes'
panel centres without a general geometry pass; the self-intersection check's candidate pairs
by r-overlap first), one run, ``uptime`` load average 1.5 at start and 1.6 at end (other
helpers' runs beside it), CPU ms, medians:

    probe                     BEM cpu before -> after   FEM cpu   FEM/BEM cpu
    filleted 0.05 mm, 0.2 mm  4.89 -> 3.88              70.4      14.4x -> 18.1x
    sharp, 0.5 mm             6.34 -> 5.58              58.6       9.2x -> 10.5x

Unknowns (104 + 208, 148 + 344), errors and estimates unchanged. Per solve after (--stages,
CPU ms), sharp probe: layout 0.49, level-0 grading 0.34, meshes 0.12 + 0.22, far sums
0.13 + 0.63, self panels 0.10 + 0.19, near panels 0.44 + 0.78, LU and solve 0.21 + 1.16
(getrf and getrs of N = 344 alone: 0.88; a float32 LU with float64 refinement was slower and
stalls at 1.5e-12 of the solution, the matrix's condition number being 1.1e5); filleted:
layout 0.70, grading 0.47, meshes 0.14 + 0.16. The compiled passes are near their cost per
kernel value (far sum 5 ns per pair; the near rules' points and scales 5 ns per evaluation,
18 ns with the logarithm, K, the Lagrange rows and the pair search); what remains is the
level pair's size and the Python of layout and meshes (stages of this first run). Re-runs:
06:48 (the gap test's contiguous columns added; load 2.6 at start and end): filleted 4.86 ->
3.82 ms (14.5x -> 18.4x), sharp 6.27 -> 5.53 ms (9.2x -> 10.4x); 06:50 on the final code
(the Lagrange moments at four nodes in registers added; load 1.5 -> 1.8): filleted 4.88 ->
3.84 ms (14.3x -> 18.2x), sharp 6.32 -> 5.43 ms (9.3x -> 10.8x; near panels 0.40 + 0.73).
The 30x target is not met.

3 Dec 2026 09:02, ``--repeats 9 --stages --before`` (main at ccfbebf against the axicost
branch: the layout check's chord pairs by a sweep along r and its containment test skipped
by a box around the curve, rounded_polyline on plain floats, the chord parameters of
Curve.sample once per count; curves, samples, meshes and C bit for bit main's on 15 layouts),
``uptime`` load average 1.6 at start, 1.7 at end (other helpers' runs beside it), CPU ms:

    probe                     BEM cpu before -> after   FEM cpu   FEM/BEM cpu
    filleted 0.05 mm, 0.2 mm  3.99 -> 3.73              74.6      18.7x -> 20.0x
    sharp, 0.5 mm             5.38 -> 5.34              62.1      11.6x -> 11.6x

A second sitting at 09:16 on the final branch (load 2.7): filleted 3.77 -> 3.55 ms (19.0x ->
20.1x), sharp 5.36 -> 5.29 ms (11.1x -> 11.3x); GuardedDisk.build alone, 3000 times in
alternating processes: 663 / 646 -> 356 / 358 us (filleted), 467 / 478 -> 273 / 272 us (sharp).
Nine repeats leave about 0.2 ms of noise; the same trial (``bem_run``) timed 300 times in
each of three alternating before/after process pairs (same load): filleted 3.79 / 3.85 /
3.91 -> 3.50 / 3.59 / 3.72 ms, sharp 5.44 / 5.43 / 5.72 -> 5.22 / 5.19 / 5.35 ms; the layout
alone 0.87 -> 0.55 ms (filleted) and 0.67 -> 0.44 ms (sharp). A study trial also pays the
families' level-0 size check, which meshed with another rule than the solve's and so graded
level 0 twice; with the solve's rule (build, check and solve, 300 times): filleted 4.76 ->
3.92 ms, sharp 6.17 -> 5.61 ms. The LU is what it was: a float32 LU refined with float64
residuals (LAPACK's dsgesv scheme, stopping at the backward-error test) took 1.17 ms against
1.05 at N = 344 (sgetrf 0.74 ms with its cast, dgetrf 1.04; two refinement steps), 0.38
against 0.29 at N = 208, and first paid at N = 732 (6.9 against 7.6 ms); its solutions
differ from the float64 LU's by 1.5e-12 (relative, N = 344, condition number 1.1e5). Two
BLAS threads cost as much CPU as one at N = 344 and twice as much at 600. The 30x target is
not met; what is left per solve is the discretisation (grading, meshes, entries: 2.0 of the
filleted probe's 3.7 ms) and the LUs (1.4 ms of the sharp probe's 5.3).

3 Dec 2026, ``--repeats 9 --before`` (main's package at 71162d8 against the cornermap
branch: mapped corner panels, DEVELOPERS.md "Mapped corner panels"), CPU ms, medians (the
filleted probe has no singular corner: the same mesh and C, its changes are noise):

    run (load at start -> end)   probe      BEM cpu before -> after   N before -> after
    09:19 (1.03 -> 1.03)         filleted   4.49 -> 4.55              104+208 (both)
    --stages                     sharp      6.36 -> 5.52              148+344 -> 72+144
    09:20 (0.94 -> 0.95)         filleted   4.25 -> 4.30
                                 sharp      6.05 -> 5.65
    09:20 (0.95 -> 0.96)         filleted   4.03 -> 4.49
                                 sharp      6.05 -> 5.67

Sharp probe after: error 1.8e-6 (before 8.5e-8), estimate 3.0e-5 (both); FEM 64.2 - 65.3 ms,
so 11.4x - 11.8x against 10.3x - 10.7x before. The unknowns halve, but the near pairs of the
twelve long mapped panels cost most of what the smaller matrices save (stages of the 09:19
run after: near panels 1.21 + 1.67 ms, against 0.44 + 0.78 at 148 + 344 before; far sums
0.05 + 0.14, self 0.14 + 0.18, LU and solve 0.05 + 0.27): a mapped panel's 4-node rule sees
the map's distortion, so targets whose kernel singularity in the panel parameter lies inside
the near ellipse reach several panel lengths (level 1: 1392 real and 821 image pairs, 36,000
kernel values, against 598 + 0 pairs of the straight panels). Tried and not kept: the mapped
panel halved once at level 0 (100 + 200 unknowns, 6.2 ms); 4-point near sub-rules at the
1e-6 entries (errors of the potential of a unit density up to 4.5e-6 on the sharp probe).
The 30x target is not met.

3 Dec 2026 09:38 - 09:40, main's package at 477c9d7 against the gapgrade branch (level-0
balance and gap splits of segment/arc curves in compiled passes, ``grading_kernels.py``; the
same panels, meshes and C bit for bit), ``uptime`` load 0.8 - 1.1 (other work beside it).
Level-0 grading alone (``mesh._base_panels`` with its caches cleared, CPU us, median of 2000,
three alternating before/after process pairs; "new layout": a freshly built layout each
time, so the curves' samples and corners are computed in it, as in a study trial):

    probe      new layout before -> after   same layout before -> after
    filleted   650 - 666 -> 298 - 300       497 - 511 -> 155 - 156
    sharp      403 - 410 -> 225 - 236       317 - 324 -> 142 - 145

Inside it (same layout, wall us, nested): _refine_gaps 320 - 330 -> 43 - 44 (filleted),
193 - 201 -> 36 (sharp); _balance 119 - 123 -> 28, 63 - 65 -> 22. A trial (``bem_run``) timed
300 times per process, three alternating pairs: filleted 5.06 / 5.14 / 5.23 -> 4.58 / 4.71 /
4.61 ms, sharp 5.71 / 5.79 / 5.71 -> 5.56 / 5.60 / 5.38 ms. ``--repeats 9 --stages --before``
at 09:40 (load 0.9 -> 1.1; the machine slower than at 09:19, the same package took 5.3
instead of 4.0 - 4.5 ms): filleted 5.28 -> 4.73 ms (FEM 88.0 ms: 16.7x -> 18.6x), sharp 5.62
-> 5.69 ms (72.9 ms: 13.0x -> 12.8x, noise), level-0 grading stage after 0.21 / 0.18 ms. The
kernels load from numba's cache once per process (about 8 - 11 ms CPU after the runtime's own
start). The 30x target is not met.

3 Dec 2026 10:14, the merged main at 18595d7 (mapped corner panels, the layout and grading
cuts, ``subrule_point`` inlined again into the near pass, the glue branch's memory reading,
compiled self-intersection check, mapped near test and batch edges) against main's package at
71162d8 (last stop's), ``--repeats 9 --before``, three runs, ``uptime`` load 0.7 -> 0.8, CPU ms:

    probe       BEM cpu before -> after                  FEM cpu             FEM/BEM (median run)
    filleted    4.25 / 4.40 / 4.37 -> 3.33 / 3.51 / 3.49   78.9 / 79.8 / 78.1  18.1x -> 22.7x
    sharp       5.97 / 6.38 / 6.06 -> 4.22 / 4.43 / 4.51   65.0 / 67.1 / 65.6  10.8x -> 15.2x

Unknowns 104+208 (filleted, both) and 148+344 -> 72+144 (sharp); C_sense errors 2.7e-6 (both)
and 8.5e-8 -> 1.8e-6, estimates 2.2e-5 / 3.0e-5. The 30x target is not met.

3 Dec 2026 12:00, the upmap branch (mapped corner panels' upsampled far rule in the
collocation matrix, merged with main at 5aa7c1b) against main's package at 5aa7c1b,
``--repeats 9 --before``, five runs, ``uptime`` load 1.0 - 2.1, CPU ms:

    probe       BEM cpu before -> after                                   FEM cpu
    filleted    2.48 / 2.55 / 2.35 / 2.46 / 2.45 -> 2.47 / 2.46 / 2.49 / 2.55 / 2.53   76 - 80
    sharp       3.33 / 3.44 / 3.40 / 3.41 / 3.38 -> 2.46 / 2.23 / 3.57 / 2.38 / 2.34   64 - 66

(the sharp 3.57 run is load: its stages are those of the others). C_sense errors 2.7e-6 and
1.8e-6 -> 1.9e-6, estimates 2.2e-5 / 3.0e-5 as before; sharp FEM/BEM 19.1x -> 27.0x (median
run). The 30x target is not met for the sharp probe.

3 Dec 2026 12:35, the merged main at 9cde1ec (the upmap branch above; the compiled mesh
assembly and level split; the cheaper layout build; self rows added in place, compiled
batching and K's fused Horner steps; the near pass's pair search, plan and mapped columns
compiled tighter) against last stop's package at 7dc196c, ``--repeats 9 --before``, three runs
on a near-idle machine (``uptime`` load 0.7 -> 0.8), CPU ms:

    probe       BEM cpu before -> after                    FEM cpu             FEM/BEM (median run)
    filleted    3.62 / 3.42 / 3.68 -> 2.44 / 2.38 / 2.41   79.0 / 76.9 / 78.7  21.8x -> 32.3x
    sharp       4.53 / 4.63 / 4.45 -> 2.14 / 1.95 / 1.96   65.0 / 65.4 / 65.2  14.3x -> 33.2x

Both at or above 30x in every run (lowest: sharp 30.4x in the first). Unknowns 104+208 and
72+144 (both), C_sense errors 2.7e-6 and 1.8e-6 -> 1.9e-6, estimates 2.2e-5 / 3.0e-5. Stages
after (``--stages``, CPU ms, filleted / sharp): layout 0.22 / 0.15, level-0 grading 0.14 /
0.13, meshes 0.02 + 0.02 (both), far sums 0.06 + 0.21 / 0.04 + 0.10, self panels 0.04 + 0.06
(both), near panels (the sharp probe's with its mapped columns) 0.20 + 0.27 / 0.26 + 0.43,
LU and solve 0.13 + 0.53 / 0.08 + 0.23.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import statistics
import subprocess
import sys
import time

import numpy as np

from elopt.physics.bem_axi import mesh as axi_mesh
from elopt.physics.bem_axi.solve import solve_axisymmetric
from elopt.physics.electrodes.guarded_disk import GuardedDisk, GuardedDiskParams
from elopt.physics.layout import EPS0_F_PER_M
from elopt.physics.threads import limit_blas_threads

REQUEST = 1e-4
SCALES = (16.0, 11.3, 8.0, 5.6, 4.0, 2.8, 2.0, 1.4, 1.0, 0.7, 0.5)
#: Geometric bisections of the scale between the first that meets the request and the one before.
BISECTIONS = 3
TARGET_RATIO = 30.0
MM = 1e-3


def probe_params(fillet_mm: float, standoff_mm: float) -> GuardedDiskParams:
    return GuardedDiskParams(
        sensor_radius_mm=2.0,
        guard_gap_mm=0.1,
        guard_width_mm=1.9,
        thickness_mm=0.5,
        fillet_mm=fillet_mm,
        standoff_mm=standoff_mm,
        drive_V=1.0,
    )


def sense_F(c: np.ndarray) -> float:
    return float(c[0, 0] + c[0, 1])


def bem_run(params: GuardedDiskParams, rel_accuracy: float):
    """One solve as a study trial runs it: a new layout, meshed from scratch."""
    axi_mesh.clear_mesh_cache()
    return solve_axisymmetric(GuardedDisk().build(params), rel_accuracy=rel_accuracy)


def fem_sense_F(p: GuardedDiskParams, scale: float, r_out_m: float) -> tuple[float, int]:
    """C_sense (F) and the number of P2 degrees of freedom of one FEM solve (module docs)."""
    import gmsh
    from skfem import Basis, BilinearForm, ElementTriP2, MeshTri2, asm, condense, solve
    from skfem.helpers import dot, grad

    a, g, w = p.sensor_radius_mm * MM, p.guard_gap_mm * MM, p.guard_width_mm * MM
    t, rho, d = p.thickness_mm * MM, p.fillet_mm * MM, p.standoff_mm * MM
    gmsh.initialize(readConfigFiles=False)
    try:
        gmsh.option.setNumber("General.Terminal", 0)
        occ = gmsh.model.occ
        quarter, _ = occ.intersect(
            [(2, occ.addDisk(0, 0, 0, r_out_m, r_out_m))],
            [(2, occ.addRectangle(0, 0, 0, r_out_m, r_out_m))],
        )
        # The sensor drawn mirrored about the axis: only its off-axis corners get rounded.
        sensor = occ.addRectangle(-a, d, 0, 2 * a, t, roundedRadius=rho)
        guard = occ.addRectangle(a + g, d, 0, w, t, roundedRadius=rho)
        domain, _ = occ.cut(quarter, [(2, sensor), (2, guard)])
        occ.synchronize()
        reach = 2.0 * (a + g + w + t)
        conductor_curves, corner_points = [], set()
        for _, c in gmsh.model.getBoundary(domain, oriented=False):
            _, z0, _, r1, z1, _ = gmsh.model.getBoundingBox(1, c)
            if z0 > 0.5 * d and max(r1, z1) < reach:
                conductor_curves.append(c)
                for _, pt in gmsh.model.getBoundary([(1, c)], oriented=False):
                    if gmsh.model.getValue(0, pt, [])[0] > 1e-12:
                        corner_points.add(pt)
        h_face = 0.15 * scale * min(d, t)
        h_corner = 0.4 * scale * rho if rho > 0 else 0.02 * scale * h_face
        f = gmsh.model.mesh.field
        dist = f.add("Distance")
        f.setNumbers(dist, "CurvesList", conductor_curves)
        f.setNumber(dist, "Sampling", 200)
        by_surface = f.add("MathEval")
        f.setString(by_surface, "F", f"{h_face} + 0.25 * F{dist}")
        dist_c = f.add("Distance")
        f.setNumbers(dist_c, "PointsList", sorted(corner_points))
        by_corner = f.add("MathEval")
        f.setString(by_corner, "F", f"{h_corner} + 0.3 * F{dist_c}")
        size = f.add("Min")
        f.setNumbers(size, "FieldsList", [by_surface, by_corner])
        f.setAsBackgroundMesh(size)
        for name, value in (
            ("Mesh.MeshSizeExtendFromBoundary", 0),
            ("Mesh.MeshSizeFromPoints", 0),
            ("Mesh.MeshSizeFromCurvature", 0),
            ("Mesh.Algorithm", 6),
        ):
            gmsh.option.setNumber(name, value)
        gmsh.model.mesh.generate(2)
        gmsh.model.mesh.setOrder(2)
        tags, coords, _ = gmsh.model.mesh.getNodes()
        _, nodes = gmsh.model.mesh.getElementsByType(9)  # 6-node triangles
    finally:
        gmsh.finalize()
    index = np.empty(int(tags.max()) + 1, np.int64)
    index[tags.astype(np.int64)] = np.arange(len(tags))
    mesh = MeshTri2(coords.reshape(-1, 3)[:, :2].T, index[nodes.astype(np.int64)].reshape(-1, 6).T)
    basis = Basis(mesh, ElementTriP2())

    @BilinearForm
    def laplace_r(u, v, wp):
        return dot(grad(u), grad(v)) * wp.x[0]

    k = asm(laplace_r, basis)
    facets = mesh.boundary_facets()
    mid = mesh.p[:, mesh.facets[:, facets]].mean(axis=1)
    tol = 1e-9
    in_slab = (mid[1] > d - tol) & (mid[1] < d + t + tol)
    on_sensor = facets[in_slab & (mid[0] < a + tol)]
    on_guard = facets[in_slab & (mid[0] > a + g - tol) & (mid[0] < a + g + w + tol)]
    grounded = facets[(mid[1] < tol) | (np.hypot(mid[0], mid[1]) > 0.9 * r_out_m)]
    dof_s = basis.get_dofs(on_sensor).flatten()
    dof_g = basis.get_dofs(on_guard).flatten()
    fixed = np.unique(np.concatenate([dof_s, dof_g, basis.get_dofs(grounded).flatten()]))
    u = np.zeros(basis.N)
    u[dof_s] = 1.0
    u[dof_g] = 1.0
    u = solve(*condense(k, np.zeros(basis.N), x=u, D=fixed))
    return 2.0 * math.pi * EPS0_F_PER_M * float((k @ u)[dof_s].sum()), basis.N


def coarsest_scale(params: GuardedDiskParams, ref_F: float, r_out_m: float) -> float | None:
    """The coarsest FEM mesh scale found whose C_sense is within REQUEST of ``ref_F``."""

    def meets(scale: float) -> bool:
        return abs(fem_sense_F(params, scale, r_out_m)[0] / ref_F - 1.0) <= REQUEST

    fine = next((k for k, s in enumerate(SCALES) if meets(s)), None)
    if fine is None:
        return None
    if fine == 0:
        return SCALES[0]
    lo, hi = SCALES[fine], SCALES[fine - 1]  # lo meets the request, hi does not
    for _ in range(BISECTIONS):
        mid = math.sqrt(lo * hi)
        if meets(mid):
            lo = mid
        else:
            hi = mid
    return lo


def median_time(fn, repeats: int) -> tuple[float, float, object]:
    """Median wall and CPU seconds of ``repeats`` calls after one warm-up, and the last result.

    CPU time (this process) is the steadier figure on a machine shared with other work."""
    out = fn()
    walls, cpus = [], []
    for _ in range(repeats):
        t0, c0 = time.perf_counter(), time.process_time()
        out = fn()
        walls.append(time.perf_counter() - t0)
        cpus.append(time.process_time() - c0)
    return statistics.median(walls), statistics.median(cpus), out


def stage_times_ms(params: GuardedDiskParams, repeats: int) -> dict[str, float]:
    """Median CPU ms per stage of the BEM solve at REQUEST (levels as the solve takes them)."""
    from elopt.physics.bem_axi import operators
    from elopt.physics.bem_axi.ring_sums import collocation_sum
    from elopt.physics.bem_axi.solve import (
        COARSE_ENTRY_ERROR,
        CONDUCTOR_COARSE_RULE,
        default_order,
        mesh_rule,
        solve_level,
    )
    from elopt.physics.refinement import estimate_error

    def cpu_ms(fn) -> float:
        return 1e3 * median_time(fn, repeats)[1]

    layout = GuardedDisk().build(params)
    sol = bem_run(params, REQUEST)
    order = default_order(REQUEST)
    rule = mesh_rule(order, REQUEST, conductors_only=True)
    entry_error = COARSE_ENTRY_ERROR if rule == CONDUCTOR_COARSE_RULE else None
    out = {"layout": cpu_ms(lambda: GuardedDisk().build(params))}
    out["level-0 grading"] = cpu_ms(
        lambda: (axi_mesh.clear_mesh_cache(), axi_mesh.build_mesh(layout, 0, order, rule))
    ) - cpu_ms(lambda: axi_mesh.build_mesh(layout, 0, order, rule))
    for lv in sol.levels:
        m = lv.mesh
        tag = f"L{m.level} (N {m.n_nodes})"
        out[f"{tag} mesh"] = cpu_ms(lambda m=m: axi_mesh.build_mesh(layout, m.level, order, rule))
        r, z = m.points_m[:, 0].copy(), m.points_m[:, 1].copy()
        far = cpu_ms(lambda r=r, z=z, w=m.weights_m: collocation_sum(r, z, w, layout.ground_plane))
        scratch = np.zeros((m.n_nodes, m.n_nodes))
        own = cpu_ms(lambda m=m, a=scratch: operators._self_blocks(m, a))
        whole = cpu_ms(
            lambda m=m: operators.collocation_matrix(m, layout.ground_plane, entry_error)
        )
        out[f"{tag} far sum"] = far
        out[f"{tag} self panels"] = own
        out[f"{tag} near panels"] = whole - far - own
        out[f"{tag} LU and solve"] = cpu_ms(lambda m=m: solve_level(layout, m, entry_error)) - whole
    out["estimate (C)"] = cpu_ms(lambda: estimate_error(sol.levels, sol.convergence).capacitance)
    out["peak search (only when asked)"] = cpu_ms(
        lambda: [solve_level(layout, lv.mesh, entry_error).peaks() for lv in sol.levels]
    ) - cpu_ms(lambda: [solve_level(layout, lv.mesh, entry_error) for lv in sol.levels])
    return out


PROBES = (("filleted 0.05 mm, d 0.2 mm", 0.05, 0.2), ("sharp, d 0.5 mm", 0.0, 0.5))


def bem_rows(repeats: int) -> list[dict]:
    """Per probe: the BEM's median wall and CPU seconds at REQUEST, its C_sense error against
    the 1e-9 reference, its estimate and its unknowns per level."""
    out = []
    for _, fillet_mm, standoff_mm in PROBES:
        params = probe_params(fillet_mm, standoff_mm)
        ref_sol = solve_axisymmetric(GuardedDisk().build(params), rel_accuracy=1e-9)
        ref = sense_F(ref_sol.capacitance_matrix_F)
        wall, cpu, sol = median_time(lambda p=params: bem_run(p, REQUEST), repeats)
        out.append(
            {
                "wall": wall,
                "cpu": cpu,
                "err": abs(sense_F(sol.capacitance_matrix_F) / ref - 1.0),
                "est": sol.rel_error_estimate,
                "levels": [lv.n_unknowns for lv in sol.levels],
                "ref": ref,
                "ref_est": ref_sol.rel_error_estimate,
            }
        )
    return out


def rows_of_other_copy(package_dir: str, repeats: int) -> list[dict]:
    """:func:`bem_rows` of the package under ``package_dir``, in a child process."""
    env = dict(os.environ, PYTHONPATH=package_dir)
    cmd = [sys.executable, __file__, "--bem-rows-only", "--repeats", str(repeats)]
    done = subprocess.run(cmd, env=env, capture_output=True, text=True, check=True)
    return json.loads(done.stdout.splitlines()[-1])


def main() -> None:
    limit_blas_threads()  # one BLAS thread per process, as the elopt command runs
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=9)
    parser.add_argument("--stages", action="store_true", help="print the BEM's stage times")
    parser.add_argument("--before", metavar="DIR", help="also time the BEM of this copy")
    parser.add_argument("--bem-rows-only", action="store_true", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.bem_rows_only:
        print(json.dumps(bem_rows(args.repeats)))
        return
    before = rows_of_other_copy(args.before, args.repeats) if args.before else None
    if args.stages:
        for label, fillet_mm, standoff_mm in (("filleted", 0.05, 0.2), ("sharp", 0.0, 0.5)):
            stages = stage_times_ms(probe_params(fillet_mm, standoff_mm), args.repeats)
            print(f"BEM stages, {label} probe, CPU ms (median of {args.repeats}):")
            for name, ms in stages.items():
                print(f"  {name:32s} {ms:7.2f}")
    rows = []
    for (label, fillet_mm, standoff_mm), bem in zip(PROBES, bem_rows(args.repeats), strict=True):
        params = probe_params(fillet_mm, standoff_mm)
        ref = bem["ref"]
        r_out = 25.0 * (2.0 + 0.1 + 1.9) * MM
        chosen = coarsest_scale(params, ref, r_out)
        if chosen is None:
            raise SystemExit(
                f"{label}: the FEM did not reach {REQUEST:g} down to scale {SCALES[-1]}"
            )
        t_fem, cpu_fem, (c_fem, n_dofs) = median_time(
            lambda p=params, s=chosen, r=r_out: fem_sense_F(p, s, r), max(3, args.repeats // 3)
        )
        c_wide, _ = fem_sense_F(params, chosen, 2.0 * r_out)
        rows.append(
            (label, bem, t_fem, cpu_fem, abs(c_fem / ref - 1.0), abs(c_wide / c_fem - 1.0))
            + (chosen, n_dofs)
        )
    print(
        f"request {REQUEST:g} on C_sense; BEM median of {args.repeats}, FEM median of "
        f"{max(3, args.repeats // 3)} (meshing included in both); N: unknowns per level"
    )
    print(
        f"{'probe':34s} {'BEM ms':>7s} {'cpu ms':>7s} {'BEM err':>8s} {'estim.':>8s} "
        f"{'N':>9s} {'FEM ms':>7s} {'cpu ms':>7s} {'FEM err':>8s} {'trunc.':>8s} {'scale':>5s} "
        f"{'DOFs':>6s} {'FEM/BEM wall':>12s} {'cpu':>6s}"
    )
    versions = [("", [r[1] for r in rows])]
    if before is not None:
        versions.insert(0, (" (before)", before))
    for tag, bems in versions:
        for (label, _, tf, cf, ef, trunc, scale, dofs), b in zip(rows, bems, strict=True):
            n = "+".join(str(k) for k in b["levels"])
            print(
                f"{label + tag:34s} {b['wall'] * 1e3:7.2f} {b['cpu'] * 1e3:7.2f} {b['err']:8.1e} "
                f"{b['est']:8.1e} {n:>9s} {tf * 1e3:7.1f} {cf * 1e3:7.1f} {ef:8.1e} "
                f"{trunc:8.1e} {scale:5.2f} {dofs:6d} {tf / b['wall']:11.1f}x "
                f"{cf / b['cpu']:5.1f}x"
            )
    print(
        "references: BEM at 1e-9 (estimates "
        + ", ".join(f"{r[1]['ref_est']:.0e}" for r in rows)
        + f"); target FEM/BEM >= {TARGET_RATIO:g}x (long-term 100x); trunc. = change of "
        "the FEM's C_sense when R_out doubles"
    )


if __name__ == "__main__":
    main()

"""Benchmark of planar layer stacks in the 3-D panel solver: time per level, the parts of the
layered collocation matrix, the remainder tables, and the error against a reference.

    python tests/benchmarks/bench_layers_3d.py            # levels 0..2
    python tests/benchmarks/bench_layers_3d.py --quick    # levels 0..1

Cases: a sphere centred on the interface of two half-spaces (docs/references.md item 12,
exact images only) and a round pad on a board over a ground plane under an air gap and a
cover (general stack: images plus tabulated remainders), the latter against the axisymmetric
layered solver at 1e-6. Dense solves only (the fast path does not take layers).
"""

from __future__ import annotations

import argparse
import math
import time

import numpy as np

from elopt.physics import geometry as geo
from elopt.physics.bem3d import revolved_layout, solve_3d
from elopt.physics.bem3d.panels import discretise
from elopt.physics.bem_axi.solve import solve_axisymmetric
from elopt.physics.geometry import Arc, Curve
from elopt.physics.layout import EPS0_F_PER_M, Layout, driven
from elopt.physics.media import PlanarLayer

BOARD, AIR, COVER, PAD_R = 2.0**-9, 2.0**-11, 2.0**-9, 2.0**-7


def _cases():
    sphere = Curve(
        (Arc((0.0, 0.0), 1.0, -math.pi / 2, 0.0), Arc((0.0, 0.0), 1.0, 0.0, math.pi / 2))
    )
    half = (PlanarLayer("lower", 4.0, -math.inf, 0.0),)
    ball = Layout((driven("ball", sphere, 1.0),), layers=half)
    yield "sphere on interface", revolved_layout(ball, h_m=0.3), 2 * math.pi * 5.0 * EPS0_F_PER_M
    stack = (
        PlanarLayer("board", 4.4, 0.0, BOARD),
        PlanarLayer("cover", 3.0, BOARD + AIR, BOARD + AIR + COVER),
    )
    pad = Layout((driven("pad", geo.disk(PAD_R, BOARD), 1.0),), ground_plane=True, layers=stack)
    ref = solve_axisymmetric(pad, rel_accuracy=1e-6).capacitance_matrix_F[0, 0]
    yield "pad, board + cover", revolved_layout(pad, h_m=PAD_R / 4), ref


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--quick", action="store_true")
    args = parser.parse_args()
    max_level = 1 if args.quick else 2
    print(f"{'case':20s} {'level':>5s} {'panels':>7s} {'matrix s':>9s} {'LU s':>7s} {'C err':>9s}")
    for name, layout, ref in _cases():
        t0 = time.perf_counter()
        sol = solve_3d(layout, rel_accuracy=1e-4, max_level=max_level, strict=False)
        wall = time.perf_counter() - t0
        for lv in sol.levels:
            err = lv.capacitance_F[0, 0] / ref - 1
            st = lv.stats
            print(
                f"{name:20s} {lv.panels.level:5d} {lv.panels.n:7d} {st.setup_s:9.2f} "
                f"{st.solve_s:7.2f} {err:9.2e}"
            )
        ext = sol.capacitance_matrix_extrapolated_F
        ext_err = (ext[0, 0] / ref - 1) if ext is not None else float("nan")
        print(
            f"{name:20s} total {wall:.1f} s, estimate {sol.rel_error_estimate:.2e}, "
            f"extrapolated error {ext_err:.2e}"
        )
        bg = discretise(layout, 0).background
        if bg is not None and bg.kind == "stack":
            panels = discretise(layout, 0)
            t1 = time.perf_counter()
            panels.background.dense_matrix(panels)
            print(f"{name:20s} tables (level 0 build {time.perf_counter() - t1:.2f} s):")
            for tb in panels.background.tables:
                print(
                    f"    grid {tb.values.shape[0]}x{tb.values.shape[1]}, {tb.n_k} k-nodes, "
                    f"interpolation error {tb.error:.1e} of max"
                )
    print(f"numpy {np.__version__}; machine shared, timings indicative only")


if __name__ == "__main__":
    main()

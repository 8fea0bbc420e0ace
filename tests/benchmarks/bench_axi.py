"""Benchmark of the axisymmetric solver: median time per solve and achieved accuracy.

Run: ``python tests/benchmarks/bench_axi.py`` (prints one table; about a minute).

Cases: a sphere above a grounded plane (reference: the image series, Smythe ch. 5) and a
guarded disk probe over a plane (reference: the solver itself at rel_accuracy 1e-11 with
8-node panels, whose own estimate is printed), each at requested accuracies 1e-3, 1e-4, 1e-5.
Also: the compiled ring sum against the vectorised scipy form it replaced.
"""

from __future__ import annotations

import math
import statistics
import sys
import time
from pathlib import Path

import numpy as np
from scipy.special import ellipkm1

from elopt.physics import geometry as geo
from elopt.physics.bem_axi.ring_sums import potential_sum
from elopt.physics.bem_axi.solve import solve_axisymmetric
from elopt.physics.layout import EPS0_F_PER_M as EPS0
from elopt.physics.layout import Layout, driven
from elopt.physics.threads import limit_blas_threads

sys.path.insert(0, str(Path(__file__).parent))


def sphere_layout() -> tuple[Layout, float]:
    radius, height = 1e-3, 1.5e-3
    alpha = math.acosh(height / radius)
    ref = (
        4
        * math.pi
        * EPS0
        * radius
        * math.sinh(alpha)
        * math.fsum(1 / math.sinh(n * alpha) for n in range(1, 5000) if n * alpha < 700)
    )
    return Layout((driven("ball", geo.sphere(radius, height), 1.0),), ground_plane=True), ref


def probe_layout() -> Layout:
    """Sensor r 2 mm, gap 0.2 mm, guard 1 mm wide, 1 mm thick, fillets 0.1 mm, standoff 0.5 mm."""
    a, g, w, t, rho, d = 2e-3, 0.2e-3, 1e-3, 1e-3, 0.1e-3, 0.5e-3
    sensor = geo.rounded_polyline([(0, d), (a, d), (a, d + t), (0, d + t)], rho)
    r0, r1 = a + g, a + g + w
    guard = geo.rounded_polyline(
        [(0.5 * (r0 + r1), d), (r1, d), (r1, d + t), (r0, d + t), (r0, d), (0.5 * (r0 + r1), d)],
        rho,
    )
    return Layout((driven("sensor", sensor, 1.0), driven("guard", guard, 1.0)), ground_plane=True)


def sense(sol) -> float:
    c = sol.capacitance_matrix_F
    return c[0, 0] + c[0, 1] if c.shape[0] > 1 else c[0, 0]


def time_solves(layout: Layout, tol: float, repeats: int) -> tuple[float, object]:
    sol = solve_axisymmetric(layout, rel_accuracy=tol)
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        sol = solve_axisymmetric(layout, rel_accuracy=tol)
        times.append(time.perf_counter() - t0)
    return statistics.median(times), sol


def kernel_speed() -> tuple[float, float]:
    rng = np.random.default_rng(7)
    n = 400
    tr, tz, sr, sz = rng.random((4, n))
    w = np.ones(n)
    potential_sum(tr, tz, sr, sz, w, True)

    def scipy_form():
        out = 0.0
        for zs in (sz, -sz):
            rp2 = (tr[:, None] + sr) ** 2 + (tz[:, None] - zs) ** 2
            rm2 = (tr[:, None] - sr) ** 2 + (tz[:, None] - zs) ** 2
            out = sr * ellipkm1(rm2 / rp2) / (math.pi * np.sqrt(rp2)) - out
        return out

    def best(f):
        ts = []
        for _ in range(9):
            t0 = time.perf_counter()
            f()
            ts.append(time.perf_counter() - t0)
        return statistics.median(ts)

    return best(lambda: potential_sum(tr, tz, sr, sz, w, True)), best(scipy_form)


def main() -> None:
    import argparse

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=21)
    args = ap.parse_args()
    limit_blas_threads()  # one BLAS thread per process, as the elopt command runs
    sphere, sphere_ref = sphere_layout()
    probe = probe_layout()
    probe_ref_sol = solve_axisymmetric(probe, rel_accuracy=1e-11, order=8)
    probe_ref = sense(probe_ref_sol)
    rows = []
    for name, layout, ref in (
        ("sphere over plane h/R=1.5", sphere, sphere_ref),
        ("guarded disk probe", probe, probe_ref),
    ):
        for tol in (1e-3, 1e-4, 1e-5):
            median, sol = time_solves(layout, tol, repeats=args.repeats)
            err = abs(sense(sol) / ref - 1)
            rows.append(
                (
                    name,
                    tol,
                    median * 1e3,
                    err,
                    sol.rel_error_estimate,
                    sol.n_unknowns,
                    sol.accuracy_met,
                )
            )
    print(
        f"{'case':28s} {'requested':>9s} {'median ms':>9s} {'achieved err':>12s} {'estimate':>9s} {'unknowns':>8s} met"
    )
    for name, tol, ms, err, est, n, met in rows:
        print(
            f"{name:28s} {tol:9.0e} {ms:9.2f} {err:12.2e} {est:9.2e} {n:8d} {'yes' if met else 'no'}"
        )
    print(
        f"(probe reference: own solve at 1e-11, estimate {probe_ref_sol.rel_error_estimate:.1e}, "
        f"{probe_ref_sol.n_unknowns} unknowns; sense capacitance {probe_ref * 1e15:.6f} fF)"
    )
    compiled, vectorised = kernel_speed()
    print(
        f"ring sum 400x400 with images: compiled {compiled * 1e3:.2f} ms, scipy {vectorised * 1e3:.2f} ms, "
        f"ratio {vectorised / compiled:.1f}x"
    )


if __name__ == "__main__":
    main()

"""Measure the 2-D solver's convergence: noise floors and the two-level ratio of its estimate.

Solves 2-D cases with closed-form answers (docs/references.md items 17 and 19) and one
layered periodic cell against its own fine solve, level by level (solve_level, nodes per panel
as the solver picks them for 1e-4 / 1e-5 / 1e-6 / 1e-9 requests: 3, 4, 6, 8), prints per level the
unknowns, the true error of the capacitance matrix (entries scaled by sqrt(C_ii C_jj)), the
change from the level before, their ratio (true / change: the two-level estimate must cover
it) and the ratio of successive changes. The noise floor is where the true error stops falling
while the changes go on shrinking.

    python3 tests/benchmarks/measure_error_estimate_2d.py [--max-level 5]
"""

from __future__ import annotations

import argparse
import math
import sys
from pathlib import Path

import numpy as np
from scipy.special import ellipk

sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_bem2d import cell  # noqa: E402

from elopt.physics.bem2d import Strip  # noqa: E402
from elopt.physics.bem2d.solve import prepare, solve_level  # noqa: E402
from elopt.physics.layout import EPS0_F_PER_M, Layout, driven  # noqa: E402
from elopt.physics.media import PlanarLayer  # noqa: E402
from elopt.physics.refinement import relative_change  # noqa: E402
from elopt.physics.threads import limit_blas_threads  # noqa: E402


def k_ratio(k: float) -> float:
    return ellipk(k * k) / ellipk(1.0 - k * k)


def pair_matrix(c: float) -> np.ndarray:
    """Capacitance matrix of a neutral pair (or a two-finger cell) with mutual c."""
    return c * np.array([[1.0, -1.0], [-1.0, 1.0]])


def cases():
    """(name, layout, period or None, exact C matrix or None for an own fine reference)."""
    out = []
    for s in (0.2, 1.0):
        # docs/references.md item 17: C' = eps K(k')/K(k), k = s/(s + 2w), w = 1.
        lay = Layout(
            (
                driven("a", Strip(-s / 2 - 1, -s / 2, 0.0), 1.0),
                driven("b", Strip(s / 2, s / 2 + 1, 0.0), 0.0),
            )
        )
        out.append((f"strips s={s}", lay, None, pair_matrix(EPS0_F_PER_M / k_ratio(s / (s + 2)))))
    s = 0.3
    lay = Layout(
        (
            driven("a", Strip(-s / 2 - 1, -s / 2, 0.0), 1.0),
            driven("b", Strip(s / 2, s / 2 + 1, 0.0), 0.0),
        ),
        layers=(PlanarLayer("below", 4.0, -math.inf, 0.0),),
    )
    exact = 0.5 * 5.0 * EPS0_F_PER_M / k_ratio(s / (s + 2))
    out.append(("strips on eps 4", lay, None, pair_matrix(exact)))
    for eta in (0.2, 0.5, 0.8):
        # docs/references.md item 19: (eps1 + eps2) K(k)/K(k'), k = sin(pi eta / 2).
        lam = 40e-6
        w = eta * lam / 2
        lay = Layout(
            (
                driven("a", Strip(-w / 2, w / 2, 0.0), 1.0),
                driven("b", Strip(lam / 2 - w / 2, lam / 2 + w / 2, 0.0), 0.0),
            ),
            layers=(PlanarLayer("glass", 4.6, -math.inf, 0.0),),
        )
        c = 5.6 * EPS0_F_PER_M * k_ratio(math.sin(math.pi * eta / 2))
        out.append((f"IDC cell eta={eta}", lay, lam, pair_matrix(c)))
    lay, lam = cell()
    out.append(("3-layer cell (own ref)", lay, lam, None))
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--max-level", type=int, default=5)
    args = ap.parse_args()
    limit_blas_threads()
    worst: dict[int, float] = {}
    ratios: dict[int, list[float]] = {}
    for name, lay, period, exact in cases():
        problem = prepare(lay, period)
        for order in (3, 4, 6, 8):
            caps, sizes = [], []
            for level in range(args.max_level + 1):
                r = solve_level(problem, level, order)
                caps.append(r.capacitance_F)
                sizes.append(r.n_unknowns)
            ref = exact
            if ref is None:
                ref = solve_level(problem, args.max_level + 1, 8).capacitance_F
            err = [relative_change(c, ref) for c in caps]
            print(f"{name}, {order} nodes per panel")
            print(
                f"  {'level':>5} {'N':>6} {'true':>9} {'change':>9} {'true/chg':>9} {'chg ratio':>9}"
            )
            prev = None
            for k, (n, e) in enumerate(zip(sizes, err, strict=True)):
                d = relative_change(caps[k], caps[k - 1]) if k else math.nan
                q = e / d if k else math.nan
                rr = d / prev if k >= 2 and prev else math.nan
                print(f"  {k:5d} {n:6d} {e:9.2e} {d:9.2e} {q:9.3f} {rr:9.3f}")
                if k and e > 3e-9:
                    ratios.setdefault(order, []).append(q)
                prev = d
            worst[order] = max(worst.get(order, 0.0), min(err))
    for order, q in sorted(ratios.items()):
        print(
            f"order {order}: true/change above 3e-9: max {max(q):.3f}, median "
            f"{float(np.median(q)):.3f}; smallest error reached (worst case) {worst[order]:.1e}"
        )


if __name__ == "__main__":
    main()

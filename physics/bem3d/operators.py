"""The collocation operator of the single-layer equation, dense or compressed.

Entry (i, j) is (1/4 pi) integral over panel j of 1/|c_i - x'| dA' (c_i the centroid of
panel i), minus the same for the mirror image of panel j in z = 0 when a grounded plane is
present; with density sigma in C/m^2 the potential at c_i is (A sigma)_i / eps.

- :func:`dense_matrix`: every entry, closed form near, Gauss rules far (see
  :mod:`.panel_integrals`); O(N^2) memory, solved by LU.
- :class:`FastOperator`: the hierarchical matrix of :mod:`.hmatrix` (O(N log N) memory and
  product), solved by GMRES preconditioned with an incomplete LU of the near-field matrix
  (pairs closer than ``PRECONDITIONER_FACTOR`` source-panel sizes).
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from elopt.physics.bem3d import panel_integrals as pint
from elopt.physics.bem3d.hmatrix import HMatrix
from elopt.physics.bem3d.near_pairs import near_pairs
from elopt.physics.bem3d.panels import PanelSet
from elopt.physics.errors import SolverError

FOUR_PI = 4.0 * math.pi
#: Pairs closer than this many diameters enter the preconditioner's near-field matrix.
PRECONDITIONER_FACTOR = 1.2


def dense_matrix(panels: PanelSet) -> np.ndarray:
    """The full (N, N) collocation matrix (see the module docstring)."""
    corners, centroids, areas, diams = panels.kernel_arrays
    a = pint.dense_potential_matrix(
        centroids, corners, centroids, areas, diams, panels.ground_plane, *pint.rules()
    )
    a /= FOUR_PI
    return a


def accurate_pairs(
    panels: PanelSet, targets: np.ndarray, ti: np.ndarray, tj: np.ndarray, image: bool
) -> np.ndarray:
    """(P, 4) accurate (I, grad I) / 4 pi for targets[ti] and panels tj (or their images)."""
    corners, centroids, areas, diams = panels.kernel_arrays
    out = pint.pair_integrals(
        np.ascontiguousarray(targets),
        corners,
        centroids,
        areas,
        diams,
        ti,
        tj,
        image,
        *pint.rules(),
    )
    return out / FOUR_PI


def near_matrix(panels: PanelSet, near_factor: float) -> sp.csr_matrix:
    """Sparse (N, N) of the accurate entries for pairs within ``near_factor`` diameters."""
    _, centroids, _, diams = panels.kernel_arrays
    rows, cols, vals = [], [], []
    for image in (False, True) if panels.ground_plane else (False,):
        src = centroids.copy()
        if image:
            src[:, 2] = -src[:, 2]
        ti, tj = near_pairs(centroids, src, near_factor * diams)
        v = accurate_pairs(panels, centroids, ti, tj, image)[:, 0]
        rows.append(ti)
        cols.append(tj)
        vals.append(-v if image else v)
    return sp.csr_matrix(
        (np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))),
        shape=(panels.n, panels.n),
    )


def incomplete_lu(near: sp.csc_matrix) -> spla.SuperLU:
    """The GMRES preconditioner: an incomplete LU of the near-field matrix."""
    try:
        return spla.spilu(near, drop_tol=1e-3, fill_factor=2.0)
    except RuntimeError as exc:
        raise SolverError(f"the near-field preconditioner failed ({exc}); check the mesh") from None


@dataclass
class SolveStats:
    """How one level was solved: method, sizes, iterations per excitation, seconds spent."""

    method: str
    n_panels: int
    stored_bytes: int = 0
    iterations: list[int] = field(default_factory=list)
    setup_s: float = 0.0
    solve_s: float = 0.0


class FastOperator:
    """A x by the hierarchical matrix, with a preconditioned GMRES solve."""

    def __init__(self, panels: PanelSet, *, tol: float) -> None:
        t0 = time.perf_counter()
        self.panels = panels
        self.n = panels.n
        self.hmatrix = HMatrix(panels, tol=tol)
        near = near_matrix(panels, PRECONDITIONER_FACTOR).tocsc()
        self.ilu = incomplete_lu(near)
        self.setup_s = time.perf_counter() - t0
        self.stored_bytes = self.hmatrix.nbytes + int(near.nnz * 12)

    def matvec(self, x: np.ndarray) -> np.ndarray:
        return self.hmatrix.matvec(x)

    def solve(
        self, rhs: np.ndarray, rtol: float, stats: SolveStats, x0: np.ndarray | None = None
    ) -> np.ndarray:
        """Solve A x = rhs for every column of rhs (N, K) by preconditioned GMRES, starting
        from the columns of ``x0`` (N, K) when given."""
        n = self.n
        op = spla.LinearOperator((n, n), matvec=self.matvec, dtype=float)
        pre = spla.LinearOperator((n, n), matvec=self.ilu.solve, dtype=float)
        out = np.zeros_like(rhs)
        for k in range(rhs.shape[1]):
            b = rhs[:, k]
            if not np.any(b):
                continue
            count = [0]

            def tick(_r, c=count):
                c[0] += 1

            x, info = spla.gmres(
                op,
                b,
                x0=None if x0 is None else x0[:, k],
                rtol=rtol,
                atol=0.0,
                restart=150,
                maxiter=10,
                M=pre,
                callback=tick,
                callback_type="pr_norm",
            )
            if info != 0:
                res = np.linalg.norm(op @ x - b) / np.linalg.norm(b)
                raise SolverError(
                    f"GMRES did not converge for excitation {k} after {count[0]} iterations "
                    f"(relative residual {res:.2g}, asked {rtol:.2g}); the mesh may be too "
                    "irregular (very thin or badly graded triangles)"
                )
            stats.iterations.append(count[0])
            out[:, k] = x
        return out

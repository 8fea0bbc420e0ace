"""The collocation operator of the 3-D system, dense or compressed.

Row i belongs to panel i (collocation at its centroid c_i); column j to the density of panel
j. On a conductor panel (first kind) the entry is the single layer

    S_ij = (1/4 pi) integral_j dA' / |c_i - x'|

minus the same for the mirror image of panel j in z = 0 when a grounded plane is present;
with density sigma in C/m^2 the potential at c_i is (S sigma)_i / eps_medium. On a
dielectric interface panel (second kind) the row is

    delta_ij - 2 lambda_i K_ij,   K_ij = n_i . grad_c (1/4 pi) integral_j dA' / |c - x'|,

K the principal-value normal derivative of the same single layer and lambda_i =
(eps_front - eps_back) / (eps_front + eps_back) of panel i (see :mod:`.solve` for the
equations). A flat panel's own principal value is 0, but the curved surface it stands for
has one of order h times its curvature, and the flat neighbours miss as much again: the
diagonal K_jj is therefore set by Gauss's law, the flux of a point charge on a closed
surface through that surface being half its charge, sum_i A_i K_ij = -A_j / 2 over the
panels i of the body of j (A the areas). This makes the polarisation charge of a body
around no conductor sum to zero exactly and the error O(h^2) instead of O(h) (measured on
docs/references.md item 11: 4.0 %, 5.0 %, 3.3 % without, -7.2 %, -1.9 %, -0.48 % with, at
160 / 640 / 2560 panels). Which rows a panel gets is :attr:`PanelSet.interface`;
:func:`potential_rows` and :func:`normal_derivative_rows` are the two kernels.

- :func:`dense_matrix`: every entry, closed form near, Gauss rules far (see
  :mod:`.panel_integrals`); O(N^2) memory, solved by LU.
- :class:`FastOperator`: hierarchical matrices of :mod:`.hmatrix` for the two kinds of rows
  (O(N log N) memory and product), solved by GMRES preconditioned with an incomplete LU of
  the near-field matrix (pairs closer than ``PRECONDITIONER_FACTOR`` source-panel sizes).
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from elopt.physics.bem3d import panel_integrals as pint
from elopt.physics.bem3d.hmatrix import HMatrix, dense_rows
from elopt.physics.bem3d.near_pairs import near_pairs
from elopt.physics.bem3d.panels import PanelSet
from elopt.physics.errors import SolverError

FOUR_PI = 4.0 * math.pi
#: Pairs closer than this many diameters enter the preconditioner's near-field matrix.
#: Measured on the guarded-pad demo's finest level (12,896 orbits, no starting guess): 1.2
#: with fill factor 2 took 25 / 24 GMRES iterations with 650k near entries and 1.24M in the
#: incomplete LU, 1.0 with fill factor 1 took 26 / 24 with 418k and 409k (the demo's peak
#: fell from 317 to 306 MB).
PRECONDITIONER_FACTOR = 1.0
#: Krylov vectors kept before GMRES restarts (its basis is allocated in full up front; the
#: levels measured so far converge in under 40 iterations).
GMRES_RESTART = 60
#: Source panels whose near pairs are integrated per call while the preconditioner is
#: assembled (bounds the scratch: about 50 pairs per panel, 32 bytes per pair and value).
_SOURCE_CHUNK = 4096


def potential_rows(panels: PanelSet, rows: np.ndarray) -> np.ndarray:
    """(R, N) single-layer entries S for the collocation points of panels ``rows``."""
    corners, centroids, areas, diams = panels.kernel_arrays
    a = pint.dense_potential_matrix(
        np.ascontiguousarray(centroids[rows]),
        corners,
        centroids,
        areas,
        diams,
        panels.ground_plane,
        *pint.rules(),
    )
    a /= FOUR_PI
    return a


def normal_derivative_rows(panels: PanelSet, rows: np.ndarray) -> np.ndarray:
    """(R, N) principal-value normal derivatives K at the centroids of panels ``rows``."""
    _, centroids, _, _ = panels.kernel_arrays
    return dense_rows(panels, centroids[rows], panels.mesh.normals[rows])


def gauss_diagonal(panels: PanelSet, weighted_columns) -> np.ndarray:
    """(N_i,) what Gauss's law adds to K_jj on each interface panel j (module docstring).

    ``weighted_columns(w)`` returns w^T K (N,) for weights w (N_i,) on the interface rows.
    """
    nc = panels.n_conductor_panels
    area = panels.mesh.areas_m2[nc:]
    body = panels.region[nc:]
    out = np.empty(len(area))
    for k in np.unique(body):
        on = body == k
        flux = weighted_columns(np.where(on, area, 0.0))[nc:][on]
        out[on] = (-0.5 * area[on] - flux) / area[on]
    return out


def dense_matrix(panels: PanelSet) -> np.ndarray:
    """The full (N, N) system matrix (see the module docstring)."""
    nc = panels.n_conductor_panels
    rows = np.arange(nc, panels.n)
    if panels.background is not None:  # planar layers: the layered Green's function
        a = panels.background.dense_matrix(panels)
        if nc == panels.n:
            return a
        k = a[nc:]
    else:
        if nc == panels.n:
            return potential_rows(panels, np.arange(nc))
        a = np.empty((panels.n, panels.n))
        a[:nc] = potential_rows(panels, np.arange(nc))
        k = normal_derivative_rows(panels, rows)
    k[rows - nc, rows] += gauss_diagonal(panels, lambda w: w @ k)
    a[nc:] = (-2.0 * panels.contrast[rows])[:, None] * k
    a[rows, rows] += 1.0
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


def near_matrix(
    panels: PanelSet,
    near_factor: float,
    diagonal: np.ndarray | None = None,
    *,
    rows: np.ndarray | None = None,
    column_of: np.ndarray | None = None,
) -> sp.csc_matrix:
    """Sparse matrix (CSC, as the incomplete LU takes it) of the accurate system entries for
    pairs within ``near_factor`` diameters (both kinds of rows; on second-kind rows the
    identity and ``diagonal`` (N_i,), Gauss's share of K_jj, included).

    Rows: the panels ``rows`` (R,) (default all, N); columns: panel j adds to column
    ``column_of[j]`` (N,) (default j; a symmetry's orbit index sums each orbit's columns).
    """
    _, centroids, _, diams = panels.kernel_arrays
    normals = panels.mesh.normals
    iface = panels.interface
    scale = -2.0 * panels.contrast
    nc = panels.n_conductor_panels
    rows = np.arange(panels.n) if rows is None else np.asarray(rows, dtype=np.int64)
    column_of = np.arange(panels.n) if column_of is None else np.asarray(column_of)
    targets = np.ascontiguousarray(centroids[rows])
    rr, cc, vals = [], [], []
    radii = near_factor * diams
    for image in (False, True) if panels.ground_plane else (False,):
        src = centroids.copy()
        if image:
            src[:, 2] = -src[:, 2]
        # Sources a chunk at a time: the pairs' scratch stays a chunk's, the kept arrays
        # compact (int32 indices, one value per pair).
        for s in range(0, panels.n, _SOURCE_CHUNK):
            ti, tj = near_pairs(targets, src[s : s + _SOURCE_CHUNK], radii[s : s + _SOURCE_CHUNK])
            tj += s
            pair = accurate_pairs(panels, targets, ti, tj, image)
            row = rows[ti]
            v = np.where(
                iface[row],
                scale[row] * np.einsum("pc,pc->p", pair[:, 1:], normals[row]),
                pair[:, 0],
            )
            rr.append(ti.astype(np.int32))
            cc.append(column_of[tj].astype(np.int32))
            vals.append(-v if image else v)
    ii = np.nonzero(iface[rows])[0]
    if len(ii):
        rr.append(ii.astype(np.int32))
        cc.append(column_of[rows[ii]].astype(np.int32))
        extra = np.zeros(len(ii)) if diagonal is None else diagonal[rows[ii] - nc]
        vals.append(1.0 + scale[rows[ii]] * extra)
    return sp.csc_matrix(
        (_joined(vals), (_joined(rr), _joined(cc))), shape=(len(rows), int(column_of.max()) + 1)
    )


def _joined(parts: list[np.ndarray]) -> np.ndarray:
    """The parts end to end, each freed once copied."""
    out = np.empty(sum(len(p) for p in parts), parts[0].dtype)
    at = 0
    while parts:
        p = parts.pop(0)
        out[at : at + len(p)] = p
        at += len(p)
    return out


def incomplete_lu(near: sp.csc_matrix) -> spla.SuperLU:
    """The GMRES preconditioner: an incomplete LU of the near-field matrix."""
    try:
        return spla.spilu(near, drop_tol=1e-3, fill_factor=1.0)
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
        nc = panels.n_conductor_panels
        self.n_potential_rows = nc
        if nc == panels.n:
            self.hmatrix = HMatrix(panels, tol=tol)
            self.derivative_hmatrix = None
        else:
            _, centroids, _, _ = panels.kernel_arrays
            self.hmatrix = HMatrix(panels, tol=tol, targets=centroids[:nc])
            self.derivative_hmatrix = HMatrix(
                panels, tol=tol, targets=centroids[nc:], directions=panels.mesh.normals[nc:]
            )
            self._scale = -2.0 * panels.contrast[nc:]
            self._gauss = gauss_diagonal(panels, self.derivative_hmatrix.rmatvec)
        gauss = None if self.derivative_hmatrix is None else self._gauss
        near = near_matrix(panels, PRECONDITIONER_FACTOR, gauss)
        self.ilu = incomplete_lu(near)
        self.setup_s = time.perf_counter() - t0
        stored = self.hmatrix.nbytes
        if self.derivative_hmatrix is not None:
            stored += self.derivative_hmatrix.nbytes
        self.stored_bytes = stored + int(near.nnz * 12)

    def matvec(self, x: np.ndarray) -> np.ndarray:
        if self.derivative_hmatrix is None:
            return self.hmatrix.matvec(x)
        nc = self.n_potential_rows
        y = np.empty(self.panels.n)
        y[:nc] = self.hmatrix.matvec(x)
        kx = self.derivative_hmatrix.matvec(x) + self._gauss * x[nc:]
        y[nc:] = x[nc:] + self._scale * kx
        return y

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
                restart=GMRES_RESTART,
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

"""Mirror symmetry of a panel set: a solve on one panel per orbit.

When the panels of conductors in a homogeneous medium or in horizontal planar layers (and
which conductor owns each) are unchanged by the reflection x -> -x, or y -> -y, or both, and
every excitation is too (unit potentials per conductor: yes, when each conductor is its own
mirror image; the applied field along z: always; the ground plane z = 0: always), the
solution is symmetric: sigma is equal on the panels of one orbit. The collocation
equations at one panel per orbit, with the columns of each orbit summed, then give the same
densities as the full system (dense: :func:`reduced_matrix`; compressed:
:class:`ReducedFastOperator`), with |G| times fewer unknowns for a group G of 2 or 4
reflections: |G|^2 less memory and |G|^3 less work for LU (the method of images applied to the
symmetry planes; e.g. Bossavit, "Boundary value problems with symmetry and their approximation
by finite elements", SIAM J. Appl. Math. 53, 1352 (1993), for the general theory).
"""

from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy.spatial import cKDTree

from elopt.physics.bem3d import panel_integrals as pint
from elopt.physics.bem3d.hmatrix import HMatrix, MirrorFold
from elopt.physics.bem3d.operators import (
    FOUR_PI,
    PRECONDITIONER_FACTOR,
    FastOperator,
    SolveStats,
    incomplete_lu,
    near_matrix,
)
from elopt.physics.bem3d.panels import PanelSet

#: Two panels are each other's mirror image when their sorted corners agree to this fraction
#: of the layout's size.
MATCH_TOL = 1e-9
#: Target rows assembled per kernel call (bounds the temporary block to ROWS x reduced size).
ROWS = 512


@dataclass(frozen=True, eq=False)
class MirrorSymmetry:
    """Orbits of the panels under a group of reflections.

    ``images`` (G, N): panel index of the image of each panel under each group element (row 0
    the identity); ``reps`` (R,): one panel per orbit (the lowest index); ``orbit`` (N,): the
    position in ``reps`` of each panel's orbit; ``planes``: the reflected axes ("x", "y").
    """

    images: np.ndarray
    reps: np.ndarray
    orbit: np.ndarray
    planes: tuple[str, ...]

    @property
    def n_reduced(self) -> int:
        return int(self.reps.size)

    def column_weights(self, members: np.ndarray | None = None) -> np.ndarray:
        """(G, R): 1 where group element g gives a panel of the orbit not given by an earlier
        element (an orbit of a panel on a symmetry plane has fewer than G members), else 0;
        the images taken of ``members`` (R,), one panel per orbit (default ``reps``)."""
        img = self.images[:, self.reps if members is None else members]
        w = np.ones(img.shape)
        for g in range(1, len(img)):
            w[g] = np.all(img[:g] != img[g], axis=0)
        return w

    def reflection_signs(self) -> np.ndarray:
        """(G, 3): the coordinate signs of each group element, in the order of ``images``."""
        signs = [np.ones(3)]
        for name in self.planes:
            signs.append(np.where(np.arange(3) == "xy".index(name), -1.0, 1.0))
        if len(self.planes) == 2:
            signs.append(signs[1] * signs[2])
        return np.stack(signs)

    def quadrant_members(self, centroids: np.ndarray) -> np.ndarray:
        """(R,): the panel of each orbit whose centroid (N, 3) lies in the closed quadrant of
        non-negative reflected coordinates (largest sum of them)."""
        img = self.images[:, self.reps]
        axes = ["xy".index(name) for name in self.planes]
        score = centroids[img][:, :, axes].sum(axis=2)
        return img[np.argmax(score, axis=0), np.arange(img.shape[1])]


def _point_map(points: np.ndarray, axis: int, tol: float) -> np.ndarray | None:
    """Index (M,) of the mirror image (x_axis -> -x_axis) of every point (M, d) within ``tol``
    among the points, or None when one has none."""
    flip = np.ones(points.shape[1])
    flip[axis] = -1.0
    dist, idx = cKDTree(points).query(points * flip)
    return None if np.any(dist > tol) else idx


def _mirror_map(panels: PanelSet, axis: int) -> np.ndarray | None:
    """Index (N,) of the mirror image of every panel in the plane x_axis = 0, or None."""
    corners = panels.mesh.corners_m
    flip = np.ones(3)
    flip[axis] = -1.0
    tol = MATCH_TOL * panels.mesh.size_m
    idx = _point_map(panels.mesh.centroids_m, axis, tol)
    if idx is None or np.any(panels.owner[idx] != panels.owner):
        return None
    if np.any(np.abs(_sorted_corners(corners * flip) - _sorted_corners(corners[idx])) > tol):
        return None
    return idx


def _sorted_corners(c: np.ndarray) -> np.ndarray:
    """Corners (T, 3, 3) with each triangle's three points in lexicographic order."""
    order = np.lexsort((c[:, :, 2], c[:, :, 1], c[:, :, 0]), axis=1)
    return np.take_along_axis(c, order[:, :, None], axis=1)


def _orbits(maps: dict[str, np.ndarray], n: int) -> MirrorSymmetry:
    ident = np.arange(n)
    images = [ident, *maps.values()]
    if len(maps) == 2:
        images.append(maps["x"][maps["y"]])
    img = np.stack(images)
    rep_of = img.min(axis=0)
    reps, orbit = np.unique(rep_of, return_inverse=True)
    return MirrorSymmetry(img, reps, orbit.reshape(-1), tuple(maps))


def symmetry_refusal(panels: PanelSet) -> str | None:
    """Why a level is solved without its mirror symmetry whatever its shape (None: it may be
    reduced). Dielectric bodies: their second-kind rows (and Gauss's diagonal) are not
    reduced here."""
    if panels.n_conductor_panels < panels.n:
        return "no mirror symmetry with dielectric bodies"
    return None


def mirror_symmetry(panels: PanelSet) -> MirrorSymmetry | None:
    """The reflections x -> -x and y -> -y that map the panel set onto itself, as orbits (None
    when neither does, and when :func:`symmetry_refusal` gives a reason).

    Planar layers (horizontal, so their Green's function depends on the horizontal distance
    and the two heights only) keep every mirror in a vertical plane through the origin."""
    if symmetry_refusal(panels) is not None:
        return None
    found = {name: _mirror_map(panels, axis) for name, axis in (("x", 0), ("y", 1))}
    maps = {k: v for k, v in found.items() if v is not None}
    return _orbits(maps, panels.n) if maps else None


def point_orbits(
    points_m: np.ndarray, planes: tuple[str, ...], size_m: float
) -> MirrorSymmetry | None:
    """Orbits of points (M, 2 or 3) under the reflections in ``planes`` ("x", "y"), matched to
    ``MATCH_TOL`` of ``size_m``; None unless every point's images are points of the set.

    A quantity that the symmetry leaves unchanged needs computing at ``reps`` only.
    """
    maps = {}
    for name in planes:
        idx = _point_map(np.asarray(points_m, dtype=float), "xy".index(name), MATCH_TOL * size_m)
        if idx is None:
            return None
        maps[name] = idx
    return _orbits(maps, len(points_m)) if maps else None


def orbit_fold(symmetry: MirrorSymmetry) -> sp.csr_matrix:
    """(N, R) sparse: 1 where panel i lies in orbit r (sums a row's columns per orbit)."""
    n = symmetry.orbit.size
    return sp.csr_matrix(
        (np.ones(n), (np.arange(n), symmetry.orbit)), shape=(n, symmetry.n_reduced)
    )


def layered_reduced_matrix(panels: PanelSet, symmetry: MirrorSymmetry) -> np.ndarray:
    """(R, R) as :func:`reduced_matrix` for a level in planar layers: the representatives'
    rows of the layered matrix, ``ROWS`` at a time (ROWS x N held, not N x N), each folded
    per orbit. The rows are those of the full matrix bit for bit (the remainder tables
    cover the whole level)."""
    reps = symmetry.reps
    fold_t = orbit_fold(symmetry).T.tocsr()
    out = np.empty((len(reps), len(reps)))
    for s in range(0, len(reps), ROWS):
        block = panels.background.dense_matrix(panels, reps[s : s + ROWS])
        out[s : s + ROWS] = (fold_t @ block.T).T
    return out


def reduced_matrix(panels: PanelSet, symmetry: MirrorSymmetry) -> np.ndarray:
    """(R, R) collocation matrix on the orbits: rows at the representatives' centroids,
    columns the summed entries of each orbit's panels (1/4 pi included, as dense_matrix)."""
    if panels.background is not None:
        return layered_reduced_matrix(panels, symmetry)
    corners, centroids, areas, diams = panels.kernel_arrays
    reps = symmetry.reps
    weights = symmetry.column_weights()
    targets = np.ascontiguousarray(centroids[reps])
    out = np.zeros((len(reps), len(reps)))
    sources = [
        tuple(np.ascontiguousarray(a[img[reps]]) for a in (corners, centroids, areas, diams))
        for img in symmetry.images
    ]
    for s in range(0, len(reps), ROWS):
        rows = slice(s, s + ROWS)
        for g, src in enumerate(sources):
            block = pint.dense_potential_matrix(
                targets[rows], *src, panels.ground_plane, *pint.rules()
            )
            out[rows] += block * weights[g]
    out /= FOUR_PI
    return out


class ReducedFastOperator(FastOperator):
    """:class:`FastOperator` on the orbits: the hierarchical matrix of the representatives'
    rows (R, N) applied to densities spread over each orbit, preconditioned by the incomplete
    LU of the near-field matrix with its columns summed per orbit. ``solve`` takes and returns
    full (N, K) arrays."""

    def __init__(self, panels: PanelSet, symmetry: MirrorSymmetry, *, tol: float) -> None:
        t0 = time.perf_counter()
        self.panels = panels
        self.symmetry = symmetry
        self.n = symmetry.n_reduced
        _, centroids, _, _ = panels.kernel_arrays
        # Rows and columns on the orbits' members in one quadrant (what MirrorFold needs):
        # (R, R) stored instead of the representatives' (R, N) rows.
        self.rows = symmetry.quadrant_members(centroids)
        fold = MirrorFold(
            self.rows, symmetry.reflection_signs(), symmetry.column_weights(self.rows)
        )
        # The preconditioner first: its assembly's scratch then does not stand on the
        # compressed matrix (measured on the guarded-pad demo: peak 274 MiB after, 269 before).
        near = near_matrix(panels, PRECONDITIONER_FACTOR, rows=self.rows, column_of=symmetry.orbit)
        self.ilu = incomplete_lu(near)
        near_bytes = int(near.nnz * 12)
        del near
        self.hmatrix = HMatrix(panels, tol=tol, targets=centroids[self.rows], fold=fold)
        self.setup_s = time.perf_counter() - t0
        self.stored_bytes = self.hmatrix.nbytes + near_bytes

    def matvec(self, x: np.ndarray) -> np.ndarray:
        return self.hmatrix.matvec(x)

    def solve(
        self, rhs: np.ndarray, rtol: float, stats: SolveStats, x0: np.ndarray | None = None
    ) -> np.ndarray:
        x = super().solve(rhs[self.rows], rtol, stats, None if x0 is None else x0[self.rows])
        return x[self.symmetry.orbit]

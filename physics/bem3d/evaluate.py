"""Potential integrals and their gradients of panel densities at arbitrary points.

sum_j density_j * (1/4 pi) integral_j dA'/|x - x'| (minus the image panels' share when a
ground plane is present) and its gradient, for K densities at once. Small problems are summed
directly, every pair with the distance-chosen rule of :mod:`.panel_integrals`; large ones
through hierarchical matrices of the same entries (:func:`.hmatrix.apply_once`: made and
applied block by block, never stored, compressed to ``tol`` relative per block; with planar
layers :mod:`.hmatrix_layered`). Points closer to a panel than a few panel sizes always get
the closed form, so points just off a surface (one-sided limits) are exact for the discrete
density.
"""

from __future__ import annotations

import numpy as np

from elopt.physics.bem3d import panel_integrals as pint
from elopt.physics.bem3d.hmatrix import apply_once
from elopt.physics.bem3d.hmatrix_layered import compressed_integrals
from elopt.physics.bem3d.layered_green import mirror_signs, symmetric_points
from elopt.physics.bem3d.operators import FOUR_PI
from elopt.physics.bem3d.panels import PanelSet

#: Above this many target-panel pairs the hierarchical matrices are used.
DIRECT_PAIRS = 30_000_000
#: Targets per block of the direct path (bounds the memory of one call).
_BLOCK = 4096
#: Default relative tolerance of the compressed blocks used for evaluation.
EVAL_TOL = 1e-6


def potential_and_gradient(
    panels: PanelSet, density: np.ndarray, points_m: np.ndarray, tol: float = EVAL_TOL
) -> tuple[np.ndarray, np.ndarray]:
    """Potential integrals (M, K) and gradients (M, 3, K) of ``density`` (N, K) at points."""
    pts = np.ascontiguousarray(np.atleast_2d(np.asarray(points_m, dtype=float)))
    dens = _columns(density)
    m, k = len(pts), dens.shape[1]
    if m == 0:
        return np.zeros((0, k)), np.zeros((0, 3, k))
    if panels.background is not None:  # planar layers: the layered Green's function
        if m * panels.n > DIRECT_PAIRS:
            return compressed_integrals(panels, dens, pts, EVAL_TOL)
        return panels.background.potential_and_gradient(panels, dens, pts)
    if m * panels.n <= DIRECT_PAIRS:
        return _direct(panels, dens, pts)
    grad = np.stack(
        [directional_derivative(panels, dens, pts, np.tile(e, (m, 1)), tol) for e in np.eye(3)],
        axis=1,
    )
    return apply_once(panels, dens, tol=tol, targets=pts), grad


def directional_derivative(
    panels: PanelSet,
    density: np.ndarray,
    points_m: np.ndarray,
    directions: np.ndarray,
    tol: float = EVAL_TOL,
) -> np.ndarray:
    """d . grad of the potential integrals (M, K) at points (M, 3) along directions (M, 3)."""
    pts = np.ascontiguousarray(np.atleast_2d(np.asarray(points_m, dtype=float)))
    dirs = np.ascontiguousarray(directions, dtype=float)
    dens = _columns(density)
    if panels.background is not None and len(pts) * panels.n > DIRECT_PAIRS:
        orbits = mirrored_directions(panels, dens, pts, dirs)
        if orbits is not None:
            reps = orbits.reps
            return compressed_integrals(panels, dens, pts[reps], EVAL_TOL, dirs[reps])[orbits.orbit]
        return compressed_integrals(panels, dens, pts, EVAL_TOL, dirs)
    if panels.background is not None or len(pts) * panels.n <= DIRECT_PAIRS:
        _, grad = _direct(panels, dens, pts)
        return np.einsum("mck,mc->mk", grad, dirs)
    return apply_once(panels, dens, tol=tol, targets=pts, directions=dirs)


def mirrored_directions(panels: PanelSet, dens: np.ndarray, pts: np.ndarray, dirs: np.ndarray):
    """Orbits of the points (M, 3) when the panels, the densities (N, K), the points and the
    directions (M, 3) are mirror symmetric (the image of a point's direction is its image's
    direction, as the normals of a face's samples), else None: a derivative along the
    direction is then the same at every point of an orbit."""
    orbits = symmetric_points(panels, dens, pts)
    if orbits is None:
        return None
    tol = 1e-12 * float(np.max(np.abs(dirs)))
    for img, flip in zip(orbits.images[1:], mirror_signs(orbits.planes)[1:], strict=True):
        if np.max(np.abs(dirs[img] - dirs * flip)) > tol:
            return None
    return orbits


def _columns(density: np.ndarray) -> np.ndarray:
    dens = np.ascontiguousarray(np.asarray(density, dtype=float))
    return dens[:, None] if dens.ndim == 1 else dens


def _direct(panels: PanelSet, dens: np.ndarray, pts: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    if panels.background is not None:
        return panels.background.potential_and_gradient(panels, dens, pts)
    corners, centroids, areas, diams = panels.kernel_arrays
    out = np.empty((len(pts), 4, dens.shape[1]))
    for s in range(0, len(pts), _BLOCK):
        out[s : s + _BLOCK] = pint.direct_sums(
            pts[s : s + _BLOCK],
            corners,
            centroids,
            areas,
            diams,
            dens,
            panels.ground_plane,
            *pint.rules(),
        )
    out /= FOUR_PI
    return out[:, 0, :], out[:, 1:, :]

"""Panels on the 2-D conductor cross-sections: Gauss-Legendre nodes, graded toward edges.

Every piece of a shape (line or arc, :mod:`elopt.physics.bem2d.shapes`) is cut into panels;
near a singular end (sharp corner, free sheet edge) the panels shrink geometrically by halves
(by ``GRADING``, one more panel per refinement level); elsewhere they are at most
``h_max``; level L splits every level-0 panel into 2^L. Each panel carries ``order``
Gauss-Legendre nodes; the charge density is collocated at the nodes and interpolated between.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from elopt.physics.bem2d.shapes import Piece
from elopt.physics.quadrature import gauss_legendre

#: Panels toward a singular end at level 0 (each GRADING times the next), and toward a
#: fillet's end; the ratio balances the edge panel's error against the panel count.
SINGULAR_DEPTH = 3
MILD_DEPTH = 2
GRADING = 0.25


@dataclass(frozen=True, eq=False)
class Panels:
    """P panels of ``order`` nodes each; complex positions x + i z (m).

    ``center`` (P,): midpoint (line) or circle centre (arc); ``half`` (P,): half the length;
    ``direction`` (P,): unit tangent of a line; ``radius``, ``theta_mid``, ``half_angle`` (P,):
    an arc's data (signed half sweep); ``nodes``, ``normals``, ``weights`` (P, order): node
    positions, unit normals (outward; +z on sheets) and arc-length weights; ``conductor``
    (P,) owner index; ``sheet`` (P,) True on open strips; ``arc_start`` (P,) arc length of
    the panel's start along its conductor's curve.
    """

    order: int
    level: int
    center: np.ndarray
    half: np.ndarray
    direction: np.ndarray
    is_arc: np.ndarray
    radius: np.ndarray
    theta_mid: np.ndarray
    half_angle: np.ndarray
    nodes: np.ndarray
    normals: np.ndarray
    weights: np.ndarray
    conductor: np.ndarray
    sheet: np.ndarray
    arc_start: np.ndarray

    @property
    def n_panels(self) -> int:
        return len(self.half)

    @property
    def n(self) -> int:
        return self.nodes.size

    @property
    def points(self) -> np.ndarray:
        """(N,) complex node positions, panel by panel."""
        return self.nodes.ravel()

    @property
    def node_conductor(self) -> np.ndarray:
        return np.repeat(self.conductor, self.order)

    @property
    def node_weights(self) -> np.ndarray:
        return self.weights.ravel()

    @property
    def node_arc_length(self) -> np.ndarray:
        x, _ = gauss_legendre(self.order)
        return (self.arc_start[:, None] + self.half[:, None] * (x[None, :] + 1.0)).ravel()


def _graded(zone: float, depth: int) -> list[float]:
    """Break points (distances from a singular end) 0 < zone g^depth < ... < zone."""
    return [zone * GRADING**m for m in range(depth, -1, -1)]


def breakpoints(piece: Piece, h_max: float, level: int) -> np.ndarray:
    """Fractions (K+1,) in [0, 1] cutting ``piece`` into its level-``level`` panels.

    Negative levels coarsen level 0 the same way: panels up to h_max 2^-level, one graded
    panel less per level (at least one toward a singular end).
    """
    length = piece.length_m
    if level < 0:
        h_max = h_max * 2.0 ** (-level)
    depth = {2: max(SINGULAR_DEPTH + level, 1), 1: max(MILD_DEPTH + level, 0), 0: 0}
    graded = [g for g in (piece.grade_start, piece.grade_end) if g]
    zone = min(h_max, length / max(len(graded), 1))
    cuts = [0.0]
    if piece.grade_start:
        cuts += _graded(zone, depth[piece.grade_start])
    lo = cuts[-1]
    hi = length - zone if piece.grade_end else length
    if hi > lo * (1 + 1e-12):
        k = max(1, math.ceil((hi - lo) / h_max - 1e-9))
        cuts += list(np.linspace(lo, hi, k + 1)[1:])
    if piece.grade_end:
        cuts += [length - d for d in _graded(zone, depth[piece.grade_end])[::-1][1:]] + [length]
    c = np.unique(np.asarray(cuts) / length)
    split = 2 ** max(level, 0)
    fine = (c[:-1, None] + (c[1:] - c[:-1])[:, None] * (np.arange(split) / split)[None, :]).ravel()
    return np.append(fine, 1.0)


def build_panels(
    pieces_per_conductor: list[tuple[list[Piece], bool]], h_max: float, level: int, order: int
) -> Panels:
    """Panels of every conductor (list of (pieces, is_sheet) in layout order)."""
    x, w = gauss_legendre(order)
    rows: dict[str, list] = {
        k: [] for k in Panels.__dataclass_fields__ if k not in ("order", "level")
    }
    for ci, (pieces, sheet) in enumerate(pieces_per_conductor):
        arc0 = 0.0
        for piece in pieces:
            fr = breakpoints(piece, h_max, level)
            length = piece.length_m
            u0, u1 = fr[:-1], fr[1:]
            half = 0.5 * (u1 - u0) * length
            k = len(half)
            if piece.center is None:
                p0 = piece.start + (piece.end - piece.start) * u0
                p1 = piece.start + (piece.end - piece.start) * u1
                mid, d = 0.5 * (p0 + p1), (p1 - p0) / np.abs(p1 - p0)
                nodes = mid[:, None] + half[:, None] * x[None, :] * d[:, None]
                tangent = np.broadcast_to(d[:, None], nodes.shape)
                rows["center"].append(mid)
                rows["direction"].append(d)
                rows["is_arc"].append(np.zeros(k, dtype=bool))
                rows["radius"].append(np.zeros(k))
                rows["theta_mid"].append(np.zeros(k))
                rows["half_angle"].append(np.zeros(k))
            else:
                c = piece.center
                r = abs(piece.start - c)
                a0 = math.atan2((piece.start - c).imag, (piece.start - c).real)
                sw = piece.sweep
                th0, th1 = a0 + sw * u0, a0 + sw * u1
                tm, dl = 0.5 * (th0 + th1), 0.5 * (th1 - th0)
                turn = np.exp(1j * (tm[:, None] + dl[:, None] * x[None, :]))
                nodes = c + r * turn
                tangent = 1j * turn * np.sign(dl)[:, None]
                rows["center"].append(np.full(k, c, dtype=complex))
                rows["direction"].append(np.zeros(k, dtype=complex))
                rows["is_arc"].append(np.ones(k, dtype=bool))
                rows["radius"].append(np.full(k, r))
                rows["theta_mid"].append(tm)
                rows["half_angle"].append(dl)
            rows["half"].append(half)
            rows["nodes"].append(nodes)
            # Closed shapes run counter-clockwise: outward is the tangent turned clockwise.
            rows["normals"].append(1j * tangent if sheet else -1j * tangent)
            rows["weights"].append(w[None, :] * half[:, None])
            rows["conductor"].append(np.full(k, ci))
            rows["sheet"].append(np.full(k, sheet))
            rows["arc_start"].append(arc0 + u0 * length)
            arc0 += length
    arr = {k: np.concatenate(v) for k, v in rows.items()}
    return Panels(order=order, level=level, **arr)


def subset(panels: Panels, keep: np.ndarray) -> Panels:
    """The panels where ``keep`` (P,) is True, in order."""
    arr = {
        k: getattr(panels, k)[keep]
        for k in Panels.__dataclass_fields__
        if k not in ("order", "level")
    }
    return Panels(order=panels.order, level=panels.level, **arr)

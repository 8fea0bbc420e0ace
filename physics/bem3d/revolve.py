"""Bodies of revolution as triangle surfaces: a generating curve (r, z) turned about z.

Nodes along each piece of the curve are graded toward the curve's singular corners
(:meth:`elopt.physics.geometry.Curve.corners`); each node becomes a ring of vertices whose count
follows its radius (one vertex on the axis), and neighbouring rings are zipped into
triangles. This lets an axisymmetric layout be solved by the 3-D solver (as a cross-check,
or with a non-axisymmetric target such as a tilted plane).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from elopt.physics.bem3d.grading import polynomial_grading
from elopt.physics.bem3d.mesh import TriangleMesh
from elopt.physics.bem3d.surfaces import Surface
from elopt.physics.geometry import JOIN_TOLERANCE, Curve
from elopt.physics.layout import Conductor, Layout


def _one_sided(s: np.ndarray, q: float, at_start: bool) -> np.ndarray:
    return s**q if at_start else 1.0 - (1.0 - s) ** q


def curve_nodes(curve: Curve, h_m: float, level: int, grade: float) -> np.ndarray:
    """(r, z) nodes (K, 2) along the curve, graded toward singular corners, nested in level."""
    singular = {(c.piece_index, c.at_end) for c in curve.corners() if c.singular}
    # A corner at the end of piece i is also at the start of piece i + 1.
    n_pieces = len(curve.pieces)
    ring = curve.kind == "ring"
    for i, at_end in list(singular):
        if at_end and (i + 1 < n_pieces or ring):
            singular.add(((i + 1) % n_pieces, False))
    steps = 2**level
    out = []
    for i, piece in enumerate(curve.pieces):
        g0, g1 = (i, False) in singular, (i, True) in singular
        if g0 and g1:
            slope = 2.0 * grade
        elif g0 or g1:
            slope = grade
        else:
            slope = 1.0
        n = max(2, math.ceil(piece.length * slope / h_m))
        s = np.linspace(0.0, 1.0, n * steps + 1)
        if g0 and g1:
            u = polynomial_grading(s, grade)
        elif g0 or g1:
            u = _one_sided(s, grade, g0)
        else:
            u = s
        pts = piece.points(2.0 * u - 1.0)
        out.append(pts if i == 0 else pts[1:])
    nodes = np.concatenate(out)
    if ring:
        nodes = nodes[:-1]
    return nodes


def _ring_counts(nodes: np.ndarray, h_m: float, on_axis: np.ndarray) -> np.ndarray:
    ds = np.linalg.norm(np.diff(nodes, axis=0), axis=1)
    local = np.minimum(np.concatenate([ds, ds[-1:]]), np.concatenate([ds[:1], ds]))
    # Tangential step between h/6 and h, and no more than 4 times the step along the curve.
    step = np.clip(4.0 * local, h_m / 6.0, h_m)
    m = np.maximum(6, np.ceil(2.0 * np.pi * nodes[:, 0] / step)).astype(np.int64)
    m[on_axis] = 1
    return m


def _zip(a0: int, ma: int, b0: int, mb: int, out: list) -> None:
    """Triangles between ring a (ma vertices from index a0) and ring b."""
    if ma == 1 and mb == 1:
        return
    if ma == 1:
        for j in range(mb):
            out.append((a0, b0 + j, b0 + (j + 1) % mb))
        return
    if mb == 1:
        for i in range(ma):
            out.append((a0 + i, b0, a0 + (i + 1) % ma))
        return
    i = j = 0
    while i < ma or j < mb:
        ang_a = (i + 1) / ma
        ang_b = (j + 1) / mb
        if j >= mb or (i < ma and ang_a <= ang_b):
            out.append((a0 + i % ma, b0 + j % mb, a0 + (i + 1) % ma))
            i += 1
        else:
            out.append((a0 + i % ma, b0 + j % mb, b0 + (j + 1) % mb))
            j += 1


def revolved_mesh(curve: Curve, h_m: float, level: int = 0, grade: float = 2.0) -> TriangleMesh:
    """Triangle surface of ``curve`` revolved about the z axis (closed unless a sheet)."""
    nodes = curve_nodes(curve, h_m, level, grade)
    h = h_m / 2**level
    tol = JOIN_TOLERANCE * curve.size
    on_axis = nodes[:, 0] <= tol
    counts = _ring_counts(nodes, h, on_axis)
    starts = np.concatenate([[0], np.cumsum(counts)])
    verts = []
    for k, (r, z) in enumerate(nodes):
        m = counts[k]
        if m == 1:
            verts.append(np.array([[0.0, 0.0, z]]))
            continue
        # Stagger every other ring by half a step: better triangles between equal rings.
        phi = 2.0 * np.pi * (np.arange(m) + 0.5 * (k % 2)) / m
        verts.append(np.stack([r * np.cos(phi), r * np.sin(phi), np.full(m, z)], axis=1))
    tris: list[tuple[int, int, int]] = []
    kind = curve.kind
    n = len(nodes)
    pairs = [(k, k + 1) for k in range(n - 1)]
    if kind == "ring":
        pairs.append((n - 1, 0))
    for a, b in pairs:
        _zip(int(starts[a]), int(counts[a]), int(starts[b]), int(counts[b]), tris)
    mesh = TriangleMesh(
        np.concatenate(verts), np.asarray(tris, dtype=np.int64), closed=kind != "sheet"
    )
    if kind != "sheet" and mesh.volume_m3 < 0:
        mesh = mesh.flipped()
    return mesh


@dataclass(frozen=True)
class RevolvedSurface(Surface):
    """``curve`` revolved about z, steps about ``h_m`` at level 0 (graded toward corners)."""

    curve: Curve
    h_m: float
    grade: float = 2.0

    @property
    def closed(self) -> bool:  # type: ignore[override]
        return self.curve.kind != "sheet"

    @property
    def smooth(self) -> bool:  # type: ignore[override]
        return self.closed and not any(c.singular for c in self.curve.corners())

    def build(self, level: int) -> TriangleMesh:
        return revolved_mesh(self.curve, self.h_m, level, self.grade)


def revolved_layout(layout: Layout, h_m: float | None = None, grade: float = 2.0) -> Layout:
    """The same layout with every generating curve replaced by its revolved surface.

    ``h_m`` defaults to a twelfth of the smallest conductor's size.
    """
    if h_m is None:
        h_m = min(c.shape.size for c in layout.conductors) / 12.0
    conductors = tuple(
        Conductor(c.name, RevolvedSurface(c.shape, h_m, grade), c.potential_V, c.charge_C)
        for c in layout.conductors
    )
    return replace(layout, conductors=conductors)

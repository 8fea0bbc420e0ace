"""Copper and target shapes of a board-level touch pad, as 3-D surfaces (lengths in metres).

- round pad and round solid pour: a disk and an annulus at height z
  (:class:`FlatRingSurface`): rings graded toward every rim, each ring cut into steps of
  about the panel size (the charge is singular across a rim, smooth along it, so the rims
  get narrow panels rather than small ones); the pair is a body of revolution, so the
  axisymmetric solver can check it;
- rectangular pad and solid pour: the rectangle and frame sheets of :mod:`elopt.physics.bem3d`;
- hatched pour (:class:`HatchedFrameSheetSurface`): a square outline with a rectangular
  clearance hole, a border track of the line width along both edges, and lines along x and y
  at a fixed pitch (lines centred on x = k p and y = k p) between them;
- finger: a grounded capsule (a cylinder with hemispherical ends) standing on the z axis
  (:class:`RingBodySurface`: rings about a panel size apart along its generating curve);
- plate: a thin square sheet parallel to the board.

Round shapes are rings of vertices zipped into triangles; each ring's radius is scaled so
that its polygon has the circle's area (:func:`area_factor`). Every ring has a multiple of 4
vertices and one quarter is zipped and mirrored, so a centred key is meshed mirror-symmetric
in x = 0 and y = 0 (the 3-D solver then works on a quarter of the panels). Measured: an isolated disk's
capacitance error and a capsule's level-to-level change are a third of what the inscribed
polygons give at the same panel count.

Every hatch edge is a break of the rectilinear grid, so each cell is wholly copper or wholly
open and the grid is graded toward every copper edge (nested under refinement).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from elopt.physics.bem3d import generators as gen
from elopt.physics.bem3d.grading import axis_nodes
from elopt.physics.bem3d.mesh import TriangleMesh
from elopt.physics.bem3d.surfaces import Surface
from elopt.physics.geometry import Curve, Segment, rounded_polyline

#: Grading exponent toward every copper edge and rim: on an isolated disk (C = 8 eps0 R) the
#: error per panel is about half that of exponent 2 (measured: 8.6e-4 with 540 panels against
#: 1.4e-3 with 614); on a square plate the level-to-level change with 1,152 panels was a
#: quarter of exponent 2's with 2,048.
EDGE_GRADE = 3.0
#: Above this many rings a round shape is not counted (its panels are reported infinite): a
#: size check refuses it before anything large is allocated.
MAX_RINGS = 1e6
#: Hatch edges closer than this share of the line width to another edge are merged into it,
#: so that no grid cell is a sliver.
MERGE_FRACTION = 0.02


def radial_nodes(
    r_inner_m: float, r_outer_m: float, h_m: float, level: int, grade: float
) -> np.ndarray:
    """Ring radii from ``r_inner_m`` to ``r_outer_m`` graded toward each rim (a disk,
    ``r_inner_m`` = 0, only toward its outer rim); nested under refinement."""
    if r_inner_m > 0:
        return axis_nodes([r_inner_m, r_outer_m], h_m, level, fillet=0.0, grade=grade)
    # One-sided grading: the steps shrink like (1 - s)**(grade - 1) toward the rim only.
    n = max(2, math.ceil(r_outer_m * grade / h_m)) * 2**level
    s = np.linspace(0.0, 1.0, n + 1)
    return r_outer_m * (1.0 - (1.0 - s) ** grade)


def quarter_counts(length_m: np.ndarray, h_m: float) -> np.ndarray:
    """Vertices on rings of circumference ``length_m``: steps of at most ``h_m``, a multiple
    of 4 (at least 8), so that every ring has vertices on both mirror planes x = 0, y = 0."""
    return (4 * np.maximum(2, np.ceil(length_m / (4.0 * h_m)))).astype(np.int64)


def ring_counts(radii_m: np.ndarray, h_m: float, annulus: bool) -> np.ndarray:
    """Vertices on each ring: steps of about ``h_m`` along the ring (:func:`quarter_counts`);
    one vertex at the centre of a disk; every ring of an annulus as many as its outer rim
    (quads)."""
    counts = quarter_counts(2.0 * np.pi * radii_m, h_m)
    if annulus:
        counts[:] = counts[-1]
    else:
        counts[0] = 1
    return counts


def _zip_quarter(qa: int, qb: int) -> list[tuple[int, int, int]]:
    """Triangles between the first quarters of two rings (vertex positions 0..qa and 0..qb,
    ring a first: 0, ring b: 1), advancing on whichever ring's next vertex comes first in
    angle: (ring, position) per corner, flattened as 2 * position + ring."""
    tris: list[tuple[int, int, int]] = []
    i = j = 0
    while i < qa or j < qb:
        if j >= qb or (i < qa and (i + 1) / qa <= (j + 1) / qb):
            tris.append((2 * i, 2 * j + 1, 2 * (i + 1)))
            i += 1
        else:
            tris.append((2 * i, 2 * j + 1, 2 * (j + 1) + 1))
            j += 1
    return tris


def zip_rings(starts: np.ndarray, counts: np.ndarray) -> np.ndarray:
    """Triangles (T, 3) between consecutive rings (vertex ``starts`` and ``counts``, each a
    multiple of 4 or 1 for a centre); faces point to +z when angles grow counter-clockwise.

    The first quarter (angles 0 to pi/2) is zipped by :func:`_zip_quarter` and mirrored in
    x = 0 and y = 0 onto the other three, so the mesh of rings centred on the z axis is
    mirror-symmetric in both planes (the solver then works on one panel per orbit).
    """
    tris: list[np.ndarray] = []
    for k in range(len(counts) - 1):
        a0, ma, b0, mb = int(starts[k]), int(counts[k]), int(starts[k + 1]), int(counts[k + 1])
        if ma == 1:
            j = np.arange(mb)
            tris.append(np.stack([np.full(mb, a0), b0 + j, b0 + (j + 1) % mb], axis=1))
            continue
        if mb == 1:
            i = np.arange(ma)
            tris.append(np.stack([a0 + i, np.full(ma, b0), a0 + (i + 1) % ma], axis=1))
            continue
        flat = np.asarray(_zip_quarter(ma // 4, mb // 4), dtype=np.int64)
        ring, pos = flat % 2, flat // 2
        size = np.where(ring == 0, ma, mb)
        base = np.where(ring == 0, a0, b0)
        # position p at angle 2 pi p / m: y -> -y maps p to -p, x -> -x to m/2 - p, both to
        # p + m/2; a single mirror reverses the corners' order, so two are swapped back.
        for sign, shift, swap in ((1, 0, False), (-1, 0, True), (-1, 2, True), (1, 2, False)):
            p = (sign * pos + shift * size // 4) % size
            t = base + p
            tris.append(t[:, [0, 2, 1]] if swap else t)
    return np.concatenate(tris)


def area_factor(m: int) -> float:
    """Radius factor that gives a regular m-gon the area of its circle (1 for a centre):
    the polygonal rims then bound the area of the round copper to O(h^4), not O(h^2)."""
    if m < 3:
        return 1.0
    t = 2.0 * math.pi / m
    return math.sqrt(t / math.sin(t))


def ring_cos_sin(m: int) -> tuple[np.ndarray, np.ndarray]:
    """cos and sin (m,) of the angles 2 pi p / m; for m a multiple of 4 the first quarter's
    values mirrored with exact signs, so that mirror-image vertices agree to the last bit."""
    if m % 4:
        phi = 2.0 * np.pi * np.arange(m) / m
        return np.cos(phi), np.sin(phi)
    q = m // 4
    phi = 2.0 * np.pi * np.arange(q + 1) / m
    c, s = np.cos(phi), np.sin(phi)
    c[q], s[q] = 0.0, 1.0
    r = np.arange(q)
    cos = np.concatenate([c[r], -c[q - r], -c[r], c[q - r]])
    sin = np.concatenate([s[r], s[q - r], -s[r], -s[q - r]])
    return cos, sin


def ring_mesh(nodes_rz: np.ndarray, counts: np.ndarray, closed: bool) -> TriangleMesh:
    """Rings of ``counts`` vertices through the (r, z) ``nodes_rz`` (K, 2), zipped in order;
    each ring's radius scaled by :func:`area_factor`. A sheet faces +z at its first panel,
    a closed body outward."""
    verts = []
    for (r0, z), m in zip(nodes_rz, counts, strict=True):
        c, s = ring_cos_sin(int(m))
        r = r0 * area_factor(int(m))
        verts.append(np.stack([r * c, r * s, np.full(m, z)], axis=1))
    starts = np.concatenate([[0], np.cumsum(counts)[:-1]])
    mesh = TriangleMesh(np.concatenate(verts), zip_rings(starts, counts), closed=closed)
    if closed:
        return mesh if mesh.volume_m3 > 0 else mesh.flipped()
    return mesh if mesh.normals[0, 2] > 0 else mesh.flipped()


def flat_ring_mesh(
    r_inner_m: float, r_outer_m: float, z_m: float, h_m: float, level: int, grade: float
) -> TriangleMesh:
    """Open sheet: a disk (``r_inner_m`` = 0) or annulus at ``z_m`` centred on the z axis."""
    radii = radial_nodes(r_inner_m, r_outer_m, h_m, level, grade)
    counts = ring_counts(radii, h_m / 2**level, annulus=r_inner_m > 0)
    nodes = np.stack([radii, np.full(len(radii), z_m)], axis=1)
    return ring_mesh(nodes, counts, closed=False)


def body_nodes(curve: Curve, h_m: float, level: int) -> np.ndarray:
    """(r, z) nodes (K, 2) along a smooth body curve (both ends on the axis), steps of about
    ``h_m`` / 2**level along every piece."""
    parts = []
    for k, piece in enumerate(curve.pieces):
        n = max(2, math.ceil(piece.length / h_m)) * 2**level
        pts = piece.points(np.linspace(-1.0, 1.0, n + 1))
        parts.append(pts if k == 0 else pts[1:])
    nodes = np.concatenate(parts)
    nodes[[0, -1], 0] = 0.0
    return nodes


def body_counts(nodes_rz: np.ndarray, h_m: float) -> np.ndarray:
    """Vertices on each ring of a body: steps of about ``h_m`` (:func:`quarter_counts`), 1 on
    the axis."""
    counts = quarter_counts(2.0 * np.pi * nodes_rz[:, 0], h_m)
    counts[[0, -1]] = 1
    return counts


@dataclass(frozen=True)
class RingBodySurface(Surface):
    """A smooth closed body of revolution about the z axis from its generating ``curve``
    (both ends on the axis, no corner), rings about ``h_m`` apart at level 0 and steps of
    about ``h_m`` along each ring."""

    curve: Curve
    h_m: float
    smooth = True

    def estimated_panels(self, level: int) -> float:
        if not self.curve.length * 2**level / self.h_m <= MAX_RINGS:
            return math.inf
        counts = body_counts(body_nodes(self.curve, self.h_m, level), self.h_m / 2**level)
        return float(np.sum(counts[1:] + counts[:-1]) - 2)

    def build(self, level: int) -> TriangleMesh:
        nodes = body_nodes(self.curve, self.h_m, level)
        return ring_mesh(nodes, body_counts(nodes, self.h_m / 2**level), closed=True)


@dataclass(frozen=True)
class FlatRingSurface(Surface):
    """Disk (``r_inner_m`` = 0) or annulus (open sheet) at ``z_m`` on the z axis, panels
    about ``h_m`` along the rings at level 0, rings graded toward the rims."""

    r_inner_m: float
    r_outer_m: float
    z_m: float
    h_m: float
    grade: float = EDGE_GRADE
    closed: bool = False
    smooth = False

    def estimated_panels(self, level: int) -> float:
        if not self.r_outer_m * 2**level / self.h_m <= MAX_RINGS:
            return math.inf
        radii = radial_nodes(self.r_inner_m, self.r_outer_m, self.h_m, level, self.grade)
        counts = ring_counts(radii, self.h_m / 2**level, annulus=self.r_inner_m > 0)
        return float(np.sum(counts[1:] + counts[:-1])) - (counts[0] == 1)

    def build(self, level: int) -> TriangleMesh:
        return flat_ring_mesh(self.r_inner_m, self.r_outer_m, self.z_m, self.h_m, level, self.grade)

    def generating_curve(self) -> Curve:
        """The sheet's generating segment in (r, z), for the axisymmetric solver."""
        return Curve((Segment((self.r_inner_m, self.z_m), (self.r_outer_m, self.z_m)),))


def flat_ring(r_inner_m: float, r_outer_m: float, z_m: float, h_m: float) -> FlatRingSurface:
    """Disk (``r_inner_m`` = 0) or annulus at height ``z_m``, panel size about ``h_m``."""
    return FlatRingSurface(r_inner_m, r_outer_m, z_m, h_m)


def capsule_curve(radius_m: float, length_m: float, z_bottom_m: float) -> Curve:
    """Generating curve of a capsule on the z axis: lowest point at ``z_bottom_m``, total
    length ``length_m`` >= 2 ``radius_m``, hemispherical ends."""
    r, z0 = radius_m, z_bottom_m
    return rounded_polyline([(0.0, z0), (r, z0), (r, z0 + length_m), (0.0, z0 + length_m)], r)


def finger(
    diameter_m: float, length_m: float, z_bottom_m: float, x_offset_m: float, h_m: float
) -> Surface:
    """Grounded finger model: a capsule of ``diameter_m`` whose tip is at ``z_bottom_m``,
    its axis at x = ``x_offset_m``, y = 0."""
    body = RingBodySurface(capsule_curve(0.5 * diameter_m, length_m, z_bottom_m), h_m)
    if x_offset_m == 0.0:
        return body
    return body.transformed(translation_m=np.array([x_offset_m, 0.0, 0.0]))


def hatch_breaks(
    outer_half_m: float, hole_half_m: float, pitch_m: float, line_m: float
) -> list[float]:
    """Every copper edge along one axis of a hatched frame, sorted, near-duplicates merged.

    Edges: the outline, the border tracks (``line_m`` wide inside the outline and around the
    hole), the hole, and both edges of every line x = k ``pitch_m`` that reaches the copper
    between the border tracks.
    """
    o, i, w = outer_half_m, hole_half_m, line_m
    edges = [-o, -o + w, -i - w, -i, i, i + w, o - w, o]
    k_max = math.floor(o / pitch_m) + 1
    for k in range(-k_max, k_max + 1):
        for e in (k * pitch_m - 0.5 * w, k * pitch_m + 0.5 * w):
            if -o + w < e < o - w:
                edges.append(e)
    edges.sort()
    tol = MERGE_FRACTION * w
    out = [edges[0]]
    for e in edges[1:]:
        if e - out[-1] > tol:
            out.append(e)
    return out


def hatched_occupied(
    p: np.ndarray,
    outer_half_m: tuple[float, float],
    hole_half_m: tuple[float, float],
    pitch_m: float,
    line_m: float,
) -> np.ndarray:
    """(...) bool: the points p (..., 2) lie on the copper of the hatched frame."""
    x, y = p[..., 0], p[..., 1]
    (ox, oy), (ix, iy), w = outer_half_m, hole_half_m, line_m
    ax, ay = np.abs(x), np.abs(y)
    in_hole = (ax < ix) & (ay < iy)
    rim = (ax > ox - w) | (ay > oy - w) | ((ax < ix + w) & (ay < iy + w))
    on_x_line = np.abs(x - pitch_m * np.round(x / pitch_m)) < 0.5 * w
    on_y_line = np.abs(y - pitch_m * np.round(y / pitch_m)) < 0.5 * w
    return ~in_hole & (rim | on_x_line | on_y_line)


def centre_node(nodes: np.ndarray) -> np.ndarray:
    """Sorted grid nodes (K,) with a node added at 0 when a cell straddles it: a quad split
    into two triangles across the mirror plane would break the mesh's mirror symmetry (the
    hatch line on the axis spans one cell at the coarsest level)."""
    k = int(np.searchsorted(nodes, 0.0))
    near = np.min(np.abs(nodes)) <= 1e-9 * (nodes[-1] - nodes[0])
    if 0 < k < len(nodes) and not near:
        return np.insert(nodes, k, 0.0)
    return nodes


@dataclass(frozen=True)
class HatchedFrameSheetSurface(Surface):
    """Hatched rectangular frame (open sheet) centred on the z axis at ``z_m``: outline
    ``outer_m``, clearance hole ``hole_m`` (x, y sizes), lines ``line_m`` wide every
    ``pitch_m`` along x and y, border tracks ``line_m`` wide along outline and hole."""

    outer_m: tuple[float, float]
    hole_m: tuple[float, float]
    z_m: float
    h_m: float
    pitch_m: float
    line_m: float
    grade: float = EDGE_GRADE
    closed: bool = False
    smooth = False

    def _nodes(self, level: int) -> tuple[np.ndarray, np.ndarray]:
        return tuple(  # type: ignore[return-value]
            centre_node(
                axis_nodes(
                    hatch_breaks(0.5 * o, 0.5 * i, self.pitch_m, self.line_m),
                    self.h_m,
                    level,
                    fillet=0.0,
                    grade=self.grade,
                )
            )
            for o, i in zip(self.outer_m, self.hole_m, strict=True)
        )

    def _occupied(self, p: np.ndarray) -> np.ndarray:
        half = (0.5 * self.outer_m[0], 0.5 * self.outer_m[1])
        hole = (0.5 * self.hole_m[0], 0.5 * self.hole_m[1])
        return hatched_occupied(p, half, hole, self.pitch_m, self.line_m)

    def estimated_panels(self, level: int) -> float:
        # Cells are counted on the 1-D node lists: far below the cost of the mesh itself.
        if not max(self.outer_m) * 2**level / self.h_m <= MAX_RINGS:
            return math.inf
        xs, ys = self._nodes(level)
        if len(xs) * len(ys) > 4e7:
            return math.inf
        cx, cy = 0.5 * (xs[1:] + xs[:-1]), 0.5 * (ys[1:] + ys[:-1])
        centres = np.stack(np.meshgrid(cx, cy, indexing="ij"), axis=-1)
        return 2.0 * float(np.count_nonzero(self._occupied(centres)))

    def build(self, level: int) -> TriangleMesh:
        xs, ys = self._nodes(level)
        return gen.flat_sheet(xs, ys, self.z_m, self._occupied)

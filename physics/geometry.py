"""Generating curves of bodies of revolution in the (r, z) half-plane.

A curve is a chain of straight segments and circular arcs, all lengths in metres. Its kind
follows from where it ends:

- ``"body"``: both ends on the axis r = 0 — the closed surface of a solid of revolution;
- ``"ring"``: the ends meet off the axis — the closed surface of a torus-like solid;
- ``"sheet"``: anything else — an open thin sheet (a disk, an annulus, a bowl, a tube).

Curves are immutable values; every piece has a constant-speed parametrisation
``t in [-1, 1] -> (r, z)`` so that a mesh built from the same curve is bit-identical.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Sequence
from dataclasses import dataclass
from functools import cached_property
from itertools import chain
from typing import Literal

import numpy as np

from elopt.physics.errors import GeometryError

#: Relative tolerance (of the curve's size) for "these two points are the same point".
JOIN_TOLERANCE = 1e-9


def format_point(p: Sequence[float]) -> str:
    """An (r, z) point in metres as plain text: ``(0.0027, 0.000625) m``."""
    return "(" + ", ".join(f"{float(x):.6g}" for x in p) + ") m"


def _check_finite(name: str, values: Sequence[float]) -> None:
    if not all(map(math.isfinite, values)):
        raise GeometryError(
            f"{name}: every coordinate must be finite, got ({', '.join(map(str, values))})"
        )


@dataclass(frozen=True)
class Segment:
    """Straight piece from ``start`` to ``end``, each an (r, z) point in metres."""

    start: tuple[float, float]
    end: tuple[float, float]

    def __post_init__(self) -> None:
        _check_finite("segment", (*self.start, *self.end))

    @property
    def length(self) -> float:
        return math.hypot(self.end[0] - self.start[0], self.end[1] - self.start[1])

    def points(self, t: np.ndarray) -> np.ndarray:
        """Points at parameters ``t`` in [-1, 1]; shape (len(t), 2), metres."""
        t = np.asarray(t, dtype=float)
        a = np.asarray(self.start)
        b = np.asarray(self.end)
        return 0.5 * (1 - t)[:, None] * a + 0.5 * (1 + t)[:, None] * b

    def tangents(self, t: np.ndarray) -> np.ndarray:
        """Unit tangents at ``t`` (direction of travel); shape (len(t), 2)."""
        d = (np.asarray(self.end) - np.asarray(self.start)) / self.length
        return np.broadcast_to(d, (len(np.asarray(t)), 2)).copy()

    def derivative(self, t: np.ndarray) -> np.ndarray:
        """d(r, z)/dt, metres per unit parameter; shape (len(t), 2)."""
        return self.tangents(t) * (0.5 * self.length)

    def split(self, t: float) -> tuple[Segment, Segment]:
        p = tuple(self.points(np.array([t]))[0])
        return Segment(self.start, p), Segment(p, self.end)


@dataclass(frozen=True)
class Arc:
    """Circular arc about ``center`` (r, z) of ``radius`` metres.

    It runs from ``start_angle`` to ``end_angle`` (radians, measured from the +r direction
    towards +z); ``end_angle < start_angle`` runs clockwise.
    """

    center: tuple[float, float]
    radius: float
    start_angle: float
    end_angle: float

    def __post_init__(self) -> None:
        _check_finite("arc", (*self.center, self.radius, self.start_angle, self.end_angle))
        if self.radius <= 0:
            raise GeometryError(f"arc: radius must be > 0, got {self.radius}")

    @property
    def sweep(self) -> float:
        return self.end_angle - self.start_angle

    @property
    def length(self) -> float:
        return abs(self.sweep) * self.radius

    @cached_property
    def start(self) -> tuple[float, float]:
        return self._point_at(self.start_angle)

    @cached_property
    def end(self) -> tuple[float, float]:
        return self._point_at(self.start_angle + self.sweep)

    def _point_at(self, angle: float) -> tuple[float, float]:
        """The point at ``angle``: :meth:`points`' formulas (numpy's cos and sin), bit for bit."""
        return (
            self.center[0] + self.radius * float(np.cos(angle)),
            self.center[1] + self.radius * float(np.sin(angle)),
        )

    def _angles(self, t: np.ndarray) -> np.ndarray:
        return self.start_angle + 0.5 * (np.asarray(t, dtype=float) + 1) * self.sweep

    def points(self, t: np.ndarray) -> np.ndarray:
        a = self._angles(t)
        c = np.asarray(self.center)
        return c + self.radius * np.stack([np.cos(a), np.sin(a)], axis=-1)

    def tangents(self, t: np.ndarray) -> np.ndarray:
        a = self._angles(t)
        s = math.copysign(1.0, self.sweep)
        return s * np.stack([-np.sin(a), np.cos(a)], axis=-1)

    def derivative(self, t: np.ndarray) -> np.ndarray:
        """d(r, z)/dt, metres per unit parameter; shape (len(t), 2)."""
        return self.tangents(t) * (0.5 * self.length)

    def split(self, t: float) -> tuple[Arc, Arc]:
        mid = float(self._angles(np.array([t]))[0])
        return (
            Arc(self.center, self.radius, self.start_angle, mid),
            Arc(self.center, self.radius, mid, self.end_angle),
        )


CurveKind = Literal["body", "ring", "sheet"]


Piece = "Segment | Arc | EllipseArc"


@dataclass(frozen=True)
class Corner:
    """A point of a curve where the charge density may be singular.

    ``angle`` is the opening angle of the conductor there in radians: pi for a smooth point,
    pi/2 for a right-angle edge, 0 for the free edge of a thin sheet. The density behaves like
    distance**(pi/(2 pi - angle) - 1): singular for ``angle < pi``.
    """

    point: tuple[float, float]
    piece_index: int
    at_end: bool
    angle: float

    @property
    def singular(self) -> bool:
        return self.angle < math.pi - 1e-6


@dataclass(frozen=True)
class Curve:
    """A chain of pieces; consecutive pieces share end points (checked)."""

    pieces: tuple[Piece, ...]

    def __post_init__(self) -> None:
        if not self.pieces:
            raise GeometryError("curve: needs at least one piece")
        size = self.size
        tol = JOIN_TOLERANCE * max(size, 1e-300)
        for p in self.pieces:
            if p.length <= tol:
                raise GeometryError(
                    f"curve: a {type(p).__name__.lower()} near {format_point(p.start)} is "
                    f"{p.length:.3g} m long; every piece must be longer than {tol:.3g} m"
                )
        for i in range(len(self.pieces) - 1):
            a, b = self.pieces[i].end, self.pieces[i + 1].start
            gap = math.hypot(a[0] - b[0], a[1] - b[1])
            if gap > tol:
                raise GeometryError(
                    f"curve: a piece ends at {format_point(a)} but the next starts at "
                    f"{format_point(b)} (gap {gap:.3g} m); consecutive pieces must join"
                )

    def __hash__(self) -> int:
        return self._hash

    @cached_property
    def _hash(self) -> int:
        # Hashed once: the meshes' caches are keyed by layouts, which hash their curves.
        return hash(self.pieces)

    @property
    def start(self) -> tuple[float, float]:
        return self.pieces[0].start

    @property
    def end(self) -> tuple[float, float]:
        return self.pieces[-1].end

    @property
    def length(self) -> float:
        return float(sum(p.length for p in self.pieces))

    @cached_property
    def size(self) -> float:
        """Largest extent of the curve in metres (for tolerances)."""
        from elopt.physics.geometry_kernels import bounding_box

        # the points of sample(4), bit for bit: every fourth of sample(16)
        r_lo, z_lo, r_hi, z_hi = bounding_box(self._points(16), 4)
        return float(max(r_hi - r_lo, z_hi - z_lo)) or self.pieces[0].length

    @cached_property
    def kind(self) -> CurveKind:
        tol = JOIN_TOLERANCE * self.size
        on_axis = abs(self.start[0]) <= tol and abs(self.end[0]) <= tol
        closed = math.hypot(self.start[0] - self.end[0], self.start[1] - self.end[1]) <= tol
        if on_axis and not closed:
            return "body"
        if closed:
            return "ring"
        return "sheet"

    def sample(self, per_piece: int = 32) -> np.ndarray:
        """Polyline through the curve, ``per_piece`` chords per piece; shape (M, 2) (a new
        array each call; the points are computed once per curve and count, or taken from a
        count that is a multiple of it: the same parameters give the same points)."""
        return self._points(per_piece).copy()

    def _points(self, per_piece: int) -> np.ndarray:
        """:meth:`sample`'s points: the cached array itself, for reading only; (M, 2), metres."""
        pts = self._samples.get(per_piece)
        if pts is None:
            finer = [k for k in self._samples if k % per_piece == 0]
            if finer:
                pts = self._samples[finer[0]][:: finer[0] // per_piece]
            else:
                pts = self._sample(per_piece)
            self._samples[per_piece] = pts
        return pts

    @cached_property
    def sample_box(self) -> tuple[float, float, float, float]:
        """(r_lo, z_lo, r_hi, z_hi) in metres of the points of ``sample(16)`` (a zero's sign
        may differ from numpy's min and max)."""
        from elopt.physics.geometry_kernels import bounding_box

        return bounding_box(self._points(16), 1)

    @cached_property
    def _samples(self) -> dict[int, np.ndarray]:
        return {}

    @cached_property
    def _piece_table(self) -> tuple:
        """Indices and point formulas' data of the segments (ends (n, 2, 2): start, end) and
        of the arcs (centre, radius, start angle, sweep (n, 5)), for :meth:`_sample`."""
        seg, arc, other, ends, spec = [], [], [], [], []
        for k, p in enumerate(self.pieces):
            if isinstance(p, Segment):
                seg.append(k)
                ends += (*p.start, *p.end)
            elif isinstance(p, Arc):
                arc.append(k)
                spec += (*p.center, p.radius, p.start_angle, p.sweep)
            else:
                other.append(k)
        return (
            np.array(seg, np.intp),
            np.array(ends, dtype=float).reshape(-1, 2, 2),
            np.array(arc, np.intp),
            np.array(spec, dtype=float).reshape(-1, 5),
            other,
            self.end,
        )

    def _sample(self, per_piece: int) -> np.ndarray:
        # Segments and arcs of every piece at once, by the formulas of their points().
        from elopt.physics.geometry_kernels import chain_points

        t, before, after = _chord_parameters(per_piece)
        seg, ends, arc, spec, other, end = self._piece_table
        flat = np.empty((len(self.pieces) * per_piece + 1, 2))
        out = flat[:-1].reshape(len(self.pieces), per_piece, 2)
        ang = spec[:, 3:4] + after * spec[:, 4:5]
        chain_points(out, seg, ends, arc, spec, before, after, np.cos(ang), np.sin(ang))
        for k in other:
            out[k] = self.pieces[k].points(t)
        flat[-1] = end
        return flat

    def corners(self) -> tuple[Corner, ...]:
        """Joints with a tangent break and free sheet ends (never points on the axis)."""
        return self._corners

    @cached_property
    def _corners(self) -> tuple[Corner, ...]:
        out: list[Corner] = []
        kind = self.kind
        size = self.size
        n = len(self.pieces)
        joints = list(range(n - 1)) + ([n - 1] if kind == "ring" else [])
        ends = [(self.pieces[i], True) for i in joints]
        starts = [(self.pieces[(i + 1) % n], False) for i in joints]
        tangents = _end_tangents(ends + starts)
        ta, tb = tangents[: len(joints)], tangents[len(joints) :]
        for i, (a0, a1), (b0, b1), dot in zip(joints, ta, tb, _dots(ta, tb), strict=True):
            turn = math.atan2(a0 * b1 - a1 * b0, dot)
            if abs(turn) < 1e-6:
                continue
            out.append(Corner(self.pieces[i].end, i, True, math.pi - abs(turn)))
        if kind == "sheet":
            tol = JOIN_TOLERANCE * size
            if self.start[0] > tol:
                out.append(Corner(self.start, 0, False, 0.0))
            if self.end[0] > tol:
                out.append(Corner(self.end, n - 1, True, 0.0))
        return tuple(out)

    @cached_property
    def _outline_box(self) -> tuple[float, float, float, float] | None:
        """(r_lo, z_lo, r_hi, z_hi) around the curve, widened (see outside_outline_box)."""
        r, z = [], []
        for p in self.pieces:
            if isinstance(p, Segment):
                r += (p.start[0], p.end[0])
                z += (p.start[1], p.end[1])
            elif isinstance(p, Arc):
                r += (p.center[0] - p.radius, p.center[0] + p.radius)
                z += (p.center[1] - p.radius, p.center[1] + p.radius)
            else:
                return None
        margin = 1e-6 * self.size
        return min(r) - margin, min(z) - margin, max(r) + margin, max(z) + margin

    def validate(self, name: str) -> None:
        """Raise GeometryError naming ``name`` if the curve crosses the axis or itself."""
        pts = self._points(16)
        tol = JOIN_TOLERANCE * self.size
        r_lo, z_lo, r_hi, z_hi = self.sample_box
        if r_lo < -tol:
            i = int(pts[:, 0].argmin())
            raise GeometryError(
                f"conductor '{name}': the generating curve crosses the axis (reaches r = "
                f"{float(pts[:, 0].min()):.6g} m at z = {pts[i, 1]:.6g} m); every point must "
                "have r >= 0"
            )
        interior_axis = pts[1:-1, 0] <= tol if r_lo <= tol else None
        if interior_axis is not None and interior_axis.any():
            i = int(np.argmax(interior_axis)) + 1
            raise GeometryError(
                f"conductor '{name}': the generating curve touches the axis at z = {pts[i, 1]:.6g} m "
                "away from its ends; a curve may meet the axis only at its first and last point"
            )
        extent = max(r_hi - r_lo, z_hi - z_lo)
        hit = _first_self_intersection(pts, closed=self.kind == "ring", extent=extent)
        if hit is not None:
            raise GeometryError(
                f"conductor '{name}': the generating curve intersects itself near "
                f"(r, z) = ({hit[0]:.6g}, {hit[1]:.6g}) m"
            )


@functools.cache
def _chord_parameters(per_piece: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Parameters t (per_piece,) of :meth:`Curve.sample`'s points on a piece (its end left
    to the next piece), and the point formulas' weights 0.5 (1 - t) and 0.5 (1 + t); read-only,
    computed once per count."""
    t = np.linspace(-1.0, 1.0, per_piece + 1)[:-1]
    out = (t, 0.5 * (1 - t), 0.5 * (1 + t))
    for x in out:
        x.flags.writeable = False
    return out


def _end_tangents(ends: list[tuple[Piece, bool]]) -> list[tuple[float, float]]:
    """Unit tangents (r, z) of pieces at their ends (``True``) or starts: their ``tangents``
    at t = +-1 by the same formulas, bit for bit, with one numpy sin and cos call for all the
    arcs instead of (1, 2) arrays per piece."""
    out: list[tuple[float, float]] = [(0.0, 0.0)] * len(ends)
    arcs, angles = [], []
    for k, (piece, at_end) in enumerate(ends):
        if isinstance(piece, Segment):
            (r0, z0), (r1, z1), length = piece.start, piece.end, piece.length
            out[k] = ((r1 - r0) / length, (z1 - z0) / length)
        elif isinstance(piece, Arc):
            arcs.append(k)
            angles.append(piece.start_angle + piece.sweep if at_end else piece.start_angle)
        else:
            out[k] = tuple(piece.tangents(np.array([1.0 if at_end else -1.0]))[0].tolist())
    if arcs:
        sin, cos = np.sin(angles).tolist(), np.cos(angles).tolist()
        for k, s, c in zip(arcs, sin, cos, strict=True):
            turn = math.copysign(1.0, ends[k][0].sweep)
            out[k] = (turn * -s, turn * c)
    return out


def _first_self_intersection(
    pts: np.ndarray, closed: bool, extent: float | None = None
) -> tuple[float, float] | None:
    """A point where two non-adjacent chords of the polyline cross or touch (the middle of the
    first such chord, row-major over the pairs), else None; ``closed``: the first and the last
    chord are neighbours; ``extent``: the larger side (m) of the points' bounding box, when
    known. Compiled (:mod:`elopt.physics.geometry_kernels`: 40-50 us of numpy per
    guarded-probe curve, which a study trial pays twice)."""
    from elopt.physics.geometry_kernels import first_touching_chords

    if extent is None:
        extent = float(np.max(pts.max(axis=0) - pts.min(axis=0)))
    tol = 1e-9 * extent
    i, j = first_touching_chords(np.ascontiguousarray(pts, dtype=float), tol, closed)
    if i < 0:
        return None
    return tuple(np.stack([pts[i], pts[i + 1]]).mean(axis=0))


def polyline_distance(a: np.ndarray, b: np.ndarray) -> tuple[float, np.ndarray]:
    """Smallest distance between two polylines (M,2) and (K,2), and the point of ``a`` there."""
    pa = a[:, None, :]
    seg0, seg1 = b[:-1], b[1:]
    d = seg1 - seg0
    t = np.clip(
        np.einsum("mkc,kc->mk", pa - seg0[None], d)
        / np.maximum(np.einsum("kc,kc->k", d, d), 1e-300),
        0,
        1,
    )
    closest = seg0[None] + t[..., None] * d[None]
    dist = np.linalg.norm(pa - closest, axis=-1)
    k = np.unravel_index(int(dist.argmin()), dist.shape)
    return float(dist[k]), a[k[0]]


def point_in_region(points: np.ndarray, outline: np.ndarray) -> np.ndarray:
    """Even-odd test of points (M,2) against a closed polygon outline (K,2) -> (M,) bool.

    The outline is closed exactly (last vertex = first) so that the half-open crossing rule
    counts a ray through a vertex once or not at all, never by rounding.
    """
    if not np.array_equal(outline[0], outline[-1]):
        outline = np.concatenate([outline, outline[:1]])
    x, y = points[:, 0:1], points[:, 1:2]
    x0, y0 = outline[None, :-1, 0], outline[None, :-1, 1]
    x1, y1 = outline[None, 1:, 0], outline[None, 1:, 1]
    straddle = (y0 > y) != (y1 > y)
    with np.errstate(divide="ignore", invalid="ignore"):
        xc = x0 + (y - y0) * (x1 - x0) / (y1 - y0)
    return np.sum(straddle & (x < xc), axis=1) % 2 == 1


def outside_outline_box(curve: Curve, point: Sequence[float]) -> bool:
    """True when ``point`` (r, z) lies outside a box around every point of ``curve`` (its
    segments' ends, its arcs' centres +- radius), widened by 1e-6 of the curve's size; False
    when it may lie inside or the curve has other pieces. Outside, :func:`point_in_region`
    against :func:`closed_outline` is False too: the box holds the outline's vertices, and a
    ray from beyond them crosses the closed outline an even number of times (or none), which
    the widening keeps true under rounding."""
    box = curve._outline_box
    if box is None:
        return False
    r, z = float(point[0]), float(point[1])
    return r < box[0] or z < box[1] or r > box[2] or z > box[3]


def closed_outline(curve: Curve) -> np.ndarray | None:
    """Polygon of the region a body or ring encloses in the half-plane; None for a sheet."""
    pts = curve.sample(48)
    if curve.kind == "body":
        return np.concatenate([pts, pts[:1]])
    if curve.kind == "ring":
        # The ends agree only to rounding; an outline that does not close exactly can be
        # crossed an odd number of times by a ray through its seam (a false "inside").
        pts[-1] = pts[0]
        return pts
    return None


#: A straight left between fillets shorter than this share of the polyline's extent is closed
#: by lengthening the neighbouring fillets' tangents (their radii change by as little): far
#: below any physical size, while so short a piece would be finer than the curve's tolerances.
NEAR_ZERO_STRAIGHT = 1e-7


def rounded_polyline(
    vertices: Sequence[tuple[float, float]], fillet_radius: float, name: str = "curve"
) -> Curve:
    """Chain of segments through ``vertices`` with every interior corner rounded.

    Each interior corner gets a tangent arc of ``fillet_radius`` metres (0 keeps it sharp).
    Raises GeometryError when two fillets on one edge would overlap. Near the overlap limit
    the straight left between two fillets (or between a fillet and an end) is closed when it
    is shorter than :data:`NEAR_ZERO_STRAIGHT` of the extent: the fillets' tangent lengths
    grow by the least that closes every such straight (radii change by that much at most),
    so that every fillet up to the limit builds. A fillet arc shorter than the curves' join
    tolerance is left a sharp corner.
    """
    # Plain floats for the elementwise arithmetic (the same IEEE operations as numpy's on the
    # 2-vectors); dot products stay BLAS's (whose dot rounds differently from the written-out
    # sum: :func:`_dots`) and tangents numpy's, so that the pieces are the same to the bit.
    v = [(float(p[0]), float(p[1])) for p in vertices]
    if len(v) < 2:
        raise GeometryError(f"{name}: needs at least two vertices")
    if fillet_radius < 0 or not math.isfinite(fillet_radius):
        raise GeometryError(
            f"{name}: fillet radius must be finite and >= 0, got {float(fillet_radius):.6g} m"
        )
    radius = float(fillet_radius)
    rs, zs = zip(*v, strict=True)
    extent = max(max(rs) - min(rs), max(zs) - min(zs))
    n = len(v)
    edges = [(v[k + 1][0] - v[k][0], v[k + 1][1] - v[k][1]) for k in range(n - 1)]
    lengths = [math.sqrt(d) for d in _dots(edges, edges)]
    for k in range(n - 1):
        if lengths[k] == 0:
            raise GeometryError(
                f"{name}: two consecutive corners repeat the point {format_point(v[k])}"
            )
    units = [(e[0] / s, e[1] / s) for e, s in zip(edges, lengths, strict=True)]
    turn = [0.0] * n
    for k, c in enumerate(_dots(units[:-1], units[1:]), start=1):
        (a0, a1), (b0, b1) = units[k - 1], units[k]
        turn[k] = math.atan2(a0 * b1 - a1 * b0, c)
    is_rounded = [abs(x) >= 1e-12 and radius * abs(x) > 16 * JOIN_TOLERANCE * extent for x in turn]
    tangent = _half_turn_tangents(turn, is_rounded)
    back = _close_near_zero_straights([radius * x for x in tangent], is_rounded, lengths, extent)
    slack = JOIN_TOLERANCE * extent
    for k in range(n - 1):
        if back[k] + back[k + 1] > lengths[k] * (1 + 1e-12) + slack:
            raise GeometryError(
                f"{name}: fillets of radius {fillet_radius:.6g} m overlap on the edge from "
                f"{format_point(v[k])} to {format_point(v[k + 1])} (length {lengths[k]:.6g} m)"
            )
    return Curve(_fillet_pieces(v, units, turn, is_rounded, tangent, back, extent))


def _fillet_pieces(
    v: list[tuple[float, float]],
    units: list[tuple[float, float]],
    turn: list[float],
    is_rounded: list[bool],
    tangent: list[float],
    back: list[float],
    extent: float,
) -> tuple[Piece, ...]:
    """The segments and fillet arcs of :func:`rounded_polyline` (vertices ``v`` (n,), unit
    edge directions (n - 1,), turn angles, rounded flags, tan(|turn| / 2) and tangent
    lengths (n,) per vertex, metres and radians); a segment shorter than the join tolerance
    is left out."""
    n = len(v)
    starts, stops, arcs = [], [], []
    prev = v[0]
    for k in range(1, n):
        p_in = v[k]
        if k < n - 1:
            u = units[k - 1]
            p_in = (p_in[0] - back[k] * u[0], p_in[1] - back[k] * u[1])
        starts.append(prev)
        stops.append(p_in)
        if k == n - 1 or not is_rounded[k]:
            arcs.append(None)
            prev = p_in
            continue
        radius = back[k] / tangent[k]
        u1 = units[k - 1]
        side = math.copysign(1.0, turn[k])
        center = (p_in[0] + radius * (-u1[1] * side), p_in[1] + radius * (u1[0] * side))
        a0 = math.atan2(p_in[1] - center[1], p_in[0] - center[0])
        arcs.append((center, radius, a0, a0 + turn[k]))
        u2 = units[k]
        prev = (v[k][0] + back[k] * u2[0], v[k][1] + back[k] * u2[1])
    pieces: list[Piece] = []
    made: list[Arc] = []
    for a, b, arc in zip(starts, stops, arcs, strict=True):
        if _longer_than(b[0] - a[0], b[1] - a[1], JOIN_TOLERANCE * extent):
            pieces.append(Segment(a, b))
        if arc is not None:
            made.append(Arc(*arc))
            pieces.append(made[-1])
    _seed_arc_ends(made)
    return tuple(pieces)


def _dots(a: Sequence[tuple[float, float]], b: Sequence[tuple[float, float]]) -> list[float]:
    """Dot products of the 2-vectors ``a[k] . b[k]`` (K,), each the value of ``np.dot`` of the
    pair (BLAS's, which may fuse a product into the sum): by one stacked matmul, which takes
    BLAS's dot per pair; or on plain floats when in every pair one of the two products is
    zero (an axis-parallel vector), where any rounding order, fused or not, gives the other
    product (a zero's sign aside)."""
    products = [(x0 * y0, x1 * y1) for (x0, x1), (y0, y1) in zip(a, b, strict=True)]
    if all(p == 0.0 or q == 0.0 for p, q in products):
        return [p + q for p, q in products]
    n = len(a)
    ab = np.fromiter(chain.from_iterable(chain(a, b)), float, 4 * n).reshape(2, n, 2)
    return np.matmul(ab[0][:, None, :], ab[1][:, :, None]).ravel().tolist()


def _longer_than(dr: float, dz: float, length: float) -> bool:
    """``math.sqrt(np.dot(step, step)) > length`` for the step (dr, dz) in metres, with the
    dot rounded by BLAS: decided on plain floats when their root is further than 1e-9 of
    ``length`` from it (both roots agree to a few units in the last place, so they fall on
    the same side there), by BLAS's dot otherwise."""
    root = math.sqrt(dr * dr + dz * dz)
    if 1e-150 < length < 1e150 and abs(root - length) > 1e-9 * length:
        return root > length
    step = np.array((dr, dz))
    return math.sqrt(step.dot(step)) > length


def _half_turn_tangents(turn: list[float], is_rounded: list[bool]) -> list[float]:
    """tan(|turn| / 2) (numpy's tan, one call) at the rounded vertices, 0 elsewhere; (n,)."""
    idx = [k for k, r in enumerate(is_rounded) if r]
    out = [0.0] * len(turn)
    if idx:
        for k, x in zip(idx, np.tan([abs(turn[k]) / 2 for k in idx]).tolist(), strict=True):
            out[k] = x
    return out


def _seed_arc_ends(arcs: list[Arc]) -> None:
    """Store the end points of ``arcs`` (their cached ``start`` and ``end``), computed by
    :meth:`Arc._point_at`'s formulas with one numpy cos and one sin call for all of them."""
    if not arcs:
        return
    angles = [x for a in arcs for x in (a.start_angle, a.start_angle + a.sweep)]
    cos, sin = np.cos(angles).tolist(), np.sin(angles).tolist()
    for i, a in enumerate(arcs):
        for j, key in ((2 * i, "start"), (2 * i + 1, "end")):
            a.__dict__[key] = (a.center[0] + a.radius * cos[j], a.center[1] + a.radius * sin[j])


def _close_near_zero_straights(
    backs: list[float], rounded: list[bool], lengths: list[float], extent: float
) -> list[float]:
    """Tangent lengths (n,) per vertex after closing straights (edge k from vertex k to k + 1)
    left shorter than NEAR_ZERO_STRAIGHT x ``extent``: the least-norm change of the rounded
    corners' tangent lengths that makes each such edge's two tangents fill it exactly. When
    the closures contradict each other (no change keeps every edge free of overlap), the
    nominal tangents are kept."""
    if not _has_near_zero_straight(backs, rounded, lengths, extent):
        return backs
    n = len(backs)
    out = np.array(backs)
    lengths = np.array(lengths)
    for _ in range(3):
        left = lengths - out[:-1] - out[1:]
        near = np.nonzero((left > 0) & (left <= NEAR_ZERO_STRAIGHT * extent))[0]
        rows = [k for k in near if rounded[k] or rounded[k + 1]]
        if not rows:
            return out.tolist()
        a = np.zeros((len(rows), n))
        for i, k in enumerate(rows):
            a[i, k] = float(rounded[k])
            a[i, k + 1] = float(rounded[k + 1])
        delta = np.linalg.lstsq(a, left[rows], rcond=None)[0]
        trial = out + delta
        if np.any(lengths - trial[:-1] - trial[1:] < -JOIN_TOLERANCE * extent):
            return out.tolist()
        out = trial
    return out.tolist()


def _has_near_zero_straight(
    backs: list[float], rounded: list[bool], lengths: list[float], extent: float
) -> bool:
    """Whether an edge next to a rounded vertex leaves a straight in (0, NEAR_ZERO_STRAIGHT x
    ``extent``] between its tangents (:func:`_close_near_zero_straights`' first test, on
    plain floats)."""
    limit = NEAR_ZERO_STRAIGHT * extent
    for k in range(len(lengths)):
        left = lengths[k] - backs[k] - backs[k + 1]
        if 0 < left <= limit and (rounded[k] or rounded[k + 1]):
            return True
    return False


def sphere(radius: float, center_z: float = 0.0) -> Curve:
    """Generating curve of a sphere: a half circle from the south to the north pole."""
    return Curve((Arc((0.0, center_z), radius, -math.pi / 2, math.pi / 2),))


def disk(radius: float, z: float = 0.0) -> Curve:
    """Thin flat disk (open sheet) from the axis to ``radius`` at height ``z``."""
    return Curve((Segment((0.0, z), (radius, z)),))


def spheroid(semi_axis_r: float, semi_axis_z: float, center_z: float = 0.0) -> Curve:
    """Generating curve of a spheroid: one exact half-ellipse from pole to pole (metres)."""
    return Curve((EllipseArc(center_z, semi_axis_r, semi_axis_z, -math.pi / 2, math.pi / 2),))


@dataclass(frozen=True)
class EllipseArc:
    """Arc of the ellipse r = a cos(u), z = c0 + b sin(u) for u from ``start_u`` to ``end_u``.

    Not constant-speed, so its Jacobian varies along the piece; used for spheroid checks.
    """

    center_z: float
    semi_axis_r: float
    semi_axis_z: float
    start_u: float
    end_u: float

    def _u(self, t: np.ndarray) -> np.ndarray:
        return self.start_u + 0.5 * (np.asarray(t, dtype=float) + 1) * (self.end_u - self.start_u)

    def points(self, t: np.ndarray) -> np.ndarray:
        u = self._u(t)
        return np.stack(
            [self.semi_axis_r * np.cos(u), self.center_z + self.semi_axis_z * np.sin(u)], axis=-1
        )

    def derivative(self, t: np.ndarray) -> np.ndarray:
        """d(r, z)/dt; shape (len(t), 2)."""
        u = self._u(t)
        du = 0.5 * (self.end_u - self.start_u)
        return du * np.stack([-self.semi_axis_r * np.sin(u), self.semi_axis_z * np.cos(u)], axis=-1)

    def tangents(self, t: np.ndarray) -> np.ndarray:
        d = self.derivative(t)
        return d / np.linalg.norm(d, axis=-1, keepdims=True)

    @property
    def start(self) -> tuple[float, float]:
        return tuple(self.points(np.array([-1.0]))[0])

    @property
    def end(self) -> tuple[float, float]:
        return tuple(self.points(np.array([1.0]))[0])

    @property
    def length(self) -> float:
        x, w = np.polynomial.legendre.leggauss(64)
        return float(np.sum(w * np.linalg.norm(self.derivative(x), axis=-1)))

    def split(self, t: float) -> tuple[EllipseArc, EllipseArc]:
        mid = float(self._u(np.array([t]))[0])
        return (
            EllipseArc(self.center_z, self.semi_axis_r, self.semi_axis_z, self.start_u, mid),
            EllipseArc(self.center_z, self.semi_axis_r, self.semi_axis_z, mid, self.end_u),
        )

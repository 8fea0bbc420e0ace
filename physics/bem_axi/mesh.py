"""Graded boundary discretisation of generating curves into high-order panels.

Every piece of every conductor's curve is cut into panels; each panel carries ``order``
Gauss-Legendre nodes on which the surface charge density is collocated and interpolated.
Panels are graded geometrically towards corners and free sheet edges, neighbours along a
curve differ in length by a bounded factor, and panels facing another conductor or the
ground-plane image across a narrow gap are no longer than ``gap_factor`` times the gap; a
:class:`MeshRule` gives the grading ratio, the balance factor and the grading steps.

Refinement level ``level`` halves every level-0 panel ``level`` times and adds the rule's
grading steps per level at singular corners, so meshes of successive levels are nested.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from elopt.physics.geometry import Arc, Curve, EllipseArc, Segment
from elopt.physics.layout import Layout
from elopt.physics.quadrature import gauss_legendre

KIND_SEGMENT, KIND_ARC, KIND_ELLIPSE = 0, 1, 2

#: Bulk panels per largest extent of a conductor at level 0.
BASE_PANELS_PER_SIZE = 2
#: Largest turning angle of one arc panel at level 0 (radians).
MAX_ARC_ANGLE = math.pi / 2
#: Largest tangent turning of one ellipse-arc panel at level 0 (radians).
ELLIPSE_TURN_ANGLE = math.pi / 8
#: Grading halvings at a singular corner at level 0 per panel order (more for tighter
#: requests, which use higher orders), and the halvings added per level.
CORNER_LEVELS_0 = {4: 6, 6: 9, 8: 12}
CORNER_LEVELS_PER_LEVEL = 4


def corner_levels(order: int) -> int:
    """Level-0 halvings towards a singular corner for panels of ``order`` nodes."""
    return CORNER_LEVELS_0.get(order, 3 * order // 2)


#: A panel is at most this many times its distance to another conductor or an image.
GAP_FACTOR = 2.0


@dataclass(frozen=True)
class MeshRule:
    """How level-0 panels are graded and how levels refine them.

    ``corner_steps``: grading steps towards a singular corner at level 0 (a non-singular one
    gets half, at least one); ``steps_per_level``: steps added per level; each step cuts the
    panel touching the corner at 1/``grade_ratio`` of its length; neighbours along a curve
    differ in length by at most ``balance_ratio``.
    """

    corner_steps: int
    steps_per_level: int
    grade_ratio: float = 2.0
    balance_ratio: float = 2.0


def default_rule(order: int) -> MeshRule:
    """Ratio-2 grading with :func:`corner_levels` steps (the rule of every solver but one)."""
    return MeshRule(corner_levels(order), CORNER_LEVELS_PER_LEVEL)


@dataclass(frozen=True)
class AxiMesh:
    """Panels of all conductors; node arrays have N = P * order rows, panel-major.

    Per panel (P,): ``conductor`` index, ``kind`` (segment/arc/ellipse), ``coef`` (P, 5)
    sub-piece coefficients, ``length_m``, ``center_m`` (P, 2), ``at_corner`` (touches a
    singular corner). Per node (N,): ``points_m`` (N, 2), ``tangents`` (N, 2), ``normals``
    (N, 2) outward (for sheets: the tangent turned clockwise), ``jac_m`` arc length per unit
    reference parameter, ``weights_m`` arc-length quadrature weight, ``arc_m`` arc-length
    coordinate from the start of the conductor's curve.
    """

    order: int
    level: int
    conductor: np.ndarray
    kind: np.ndarray
    coef: np.ndarray
    length_m: np.ndarray
    center_m: np.ndarray
    at_corner: np.ndarray
    points_m: np.ndarray
    tangents: np.ndarray
    normals: np.ndarray
    jac_m: np.ndarray
    weights_m: np.ndarray
    arc_m: np.ndarray

    @property
    def n_panels(self) -> int:
        return len(self.conductor)

    @property
    def n_nodes(self) -> int:
        return len(self.points_m)

    @property
    def node_conductor(self) -> np.ndarray:
        return np.repeat(self.conductor, self.order)

    @property
    def ring_area_m2(self) -> np.ndarray:
        """Surface area of revolution per node (N,): 2 pi r times the arc weight."""
        return 2 * np.pi * self.points_m[:, 0] * self.weights_m


def panel_geometry(kind: np.ndarray, coef: np.ndarray, tau: np.ndarray):
    """Points (B, Q, 2) and d(point)/d(tau) (B, Q, 2) at reference parameters ``tau`` (B, Q).

    ``kind`` (B,) and ``coef`` (B, 5) select the panels.
    """
    kind = np.asarray(kind)
    tau = np.asarray(tau, dtype=float)
    pts = np.empty(tau.shape + (2,))
    der = np.empty(tau.shape + (2,))
    s = 0.5 * (tau + 1.0)
    for k in (KIND_SEGMENT, KIND_ARC, KIND_ELLIPSE):
        sel = np.nonzero(kind == k)[0]
        if len(sel) == 0:
            continue
        c = coef[sel].T[:, :, None]
        ss = s[sel]
        if k == KIND_SEGMENT:  # (ar, az, br, bz)
            pts[sel, :, 0] = c[0] + ss * (c[2] - c[0])
            pts[sel, :, 1] = c[1] + ss * (c[3] - c[1])
            der[sel, :, 0] = 0.5 * (c[2] - c[0])
            der[sel, :, 1] = 0.5 * (c[3] - c[1])
        elif k == KIND_ARC:  # (cr, cz, R, a0, a1)
            ang = c[3] + ss * (c[4] - c[3])
            cos, sin = np.cos(ang), np.sin(ang)
            da = 0.5 * (c[4] - c[3]) * c[2]
            pts[sel, :, 0] = c[0] + c[2] * cos
            pts[sel, :, 1] = c[1] + c[2] * sin
            der[sel, :, 0] = -da * sin
            der[sel, :, 1] = da * cos
        else:  # (cz, a, b, u0, u1)
            u = c[3] + ss * (c[4] - c[3])
            cos, sin = np.cos(u), np.sin(u)
            du = 0.5 * (c[4] - c[3])
            pts[sel, :, 0] = c[1] * cos
            pts[sel, :, 1] = c[0] + c[2] * sin
            der[sel, :, 0] = -du * c[1] * sin
            der[sel, :, 1] = du * c[2] * cos
    return pts, der


def _piece_coefs(piece, ab: np.ndarray) -> tuple[int, np.ndarray]:
    """Kind and coefficients (n, 5) of the parts of ``piece`` between parameters ab (n, 2)."""
    t0, t1 = ab[:, 0], ab[:, 1]
    out = np.zeros((len(ab), 5))
    if isinstance(piece, Segment):
        out[:, 0:2] = piece.points(t0)
        out[:, 2:4] = piece.points(t1)
        return KIND_SEGMENT, out
    if isinstance(piece, Arc):
        out[:, 0:3] = (piece.center[0], piece.center[1], piece.radius)
        out[:, 3] = piece.start_angle + 0.5 * (t0 + 1) * piece.sweep
        out[:, 4] = piece.start_angle + 0.5 * (t1 + 1) * piece.sweep
        return KIND_ARC, out
    if isinstance(piece, EllipseArc):
        span = piece.end_u - piece.start_u
        out[:, 0:3] = (piece.center_z, piece.semi_axis_r, piece.semi_axis_z)
        out[:, 3] = piece.start_u + 0.5 * (t0 + 1) * span
        out[:, 4] = piece.start_u + 0.5 * (t1 + 1) * span
        return KIND_ELLIPSE, out
    raise TypeError(f"unsupported curve piece {type(piece).__name__}")


@lru_cache(maxsize=64)
def _orientation(curve: Curve) -> float:
    """+1 if the closed outline of a body/ring runs counter-clockwise in (r, z), else -1."""
    pts = curve.sample(16)
    if curve.kind == "body":
        pts = np.concatenate([pts, pts[:1]])
    x, y = pts[:, 0], pts[:, 1]
    area = 0.5 * np.sum(x[:-1] * y[1:] - x[1:] * y[:-1])
    return 1.0 if area >= 0 else -1.0


def _initial_intervals(curve: Curve, level: int) -> list[list[tuple[float, float]]]:
    h = curve.size / BASE_PANELS_PER_SIZE
    out = []
    for piece in curve.pieces:
        n = math.ceil(piece.length / h - 1e-9)
        if isinstance(piece, Arc):
            n = max(n, math.ceil(abs(piece.sweep) / MAX_ARC_ANGLE - 1e-9))
        if isinstance(piece, EllipseArc):
            edges = _equal_turning_edges(piece, max(n, 1), ELLIPSE_TURN_ANGLE, level)
            out.append([(float(edges[i]), float(edges[i + 1])) for i in range(len(edges) - 1)])
            continue
        n = max(n, 1) * 2**level
        edges = np.linspace(-1.0, 1.0, n + 1)
        out.append([(float(edges[i]), float(edges[i + 1])) for i in range(n)])
    return out


def _equal_turning_edges(piece: EllipseArc, n_min: int, max_turn: float, level: int) -> np.ndarray:
    """Panel edges (parameters) of an ellipse arc that turn its tangent by equal angles.

    Curvature concentrates at the tips of an elongated ellipse; equal turning puts panels there.
    """
    t = np.linspace(-1.0, 1.0, 4001)
    tang = piece.tangents(t)
    turn = np.concatenate(
        [[0.0], np.cumsum(np.abs(np.diff(np.unwrap(np.arctan2(tang[:, 1], tang[:, 0])))))]
    )
    n = max(n_min, math.ceil(turn[-1] / max_turn - 1e-9)) * 2**level
    return np.interp(np.linspace(0.0, turn[-1], n + 1), turn, t)


def _grade_towards(
    intervals: list[tuple[float, float]], at_end: bool, times: int, ratio: float
) -> None:
    """Cut the interval touching one end of a piece ``times`` times at 1/``ratio`` of its
    length from that end (in place)."""
    for _ in range(times):
        if at_end:
            a, b = intervals[-1]
            m = b - (b - a) / ratio
            intervals[-1:] = [(a, m), (m, b)]
        else:
            a, b = intervals[0]
            m = a + (b - a) / ratio
            intervals[:1] = [(a, m), (m, b)]


def _interval_lengths(piece, intervals) -> np.ndarray:
    """Arc lengths (n,) of the parts of ``piece`` between parameter pairs ``intervals``."""
    ab = np.asarray(intervals, dtype=float).reshape(-1, 2)
    half = 0.5 * (ab[:, 1] - ab[:, 0])
    if isinstance(piece, EllipseArc):
        x, w = gauss_legendre(8)
        t = (0.5 * (ab[:, 0] + ab[:, 1]))[:, None] + half[:, None] * x
        speed = np.linalg.norm(piece.derivative(t.ravel()), axis=-1).reshape(t.shape)
        return half * (speed @ w)
    return piece.length * half


@lru_cache(maxsize=4096)
def _panel_sizes(
    piece, intervals: tuple[tuple[float, float], ...]
) -> tuple[np.ndarray, np.ndarray]:
    """Arc lengths (n,) and mid-parameter points (n, 2) of the parts of ``piece`` between
    parameter pairs ``intervals``; cached, as grading and gap refinement re-test unchanged
    pieces many times."""
    ab = np.asarray(intervals, dtype=float).reshape(-1, 2)
    return _interval_lengths(piece, intervals), piece.points(ab.mean(axis=1))


def _balance(curve: Curve, per_piece: list[list[tuple[float, float]]], ratio: float) -> None:
    """Split panels until neighbours along the curve differ by at most a factor ``ratio``."""
    closed = curve.kind == "ring"
    changed = True
    while changed:
        changed = False
        flat = [(k, j) for k, iv in enumerate(per_piece) for j in range(len(iv))]
        lengths = np.concatenate(
            [
                _panel_sizes(piece, tuple(iv))[0]
                for piece, iv in zip(curve.pieces, per_piece, strict=True)
            ]
        ).tolist()
        n = len(flat)
        split = set()
        for i in range(n - 1 + int(closed)):
            a, b = i, (i + 1) % n
            if lengths[a] > ratio * lengths[b] * (1 + 1e-9):
                split.add(flat[a])
            elif lengths[b] > ratio * lengths[a] * (1 + 1e-9):
                split.add(flat[b])
        if split:
            changed = True
            for k, j in sorted(split, reverse=True):
                a0, b0 = per_piece[k][j]
                m = 0.5 * (a0 + b0)
                per_piece[k][j : j + 1] = [(a0, m), (m, b0)]


def build_mesh(
    layout: Layout, level: int = 0, order: int = 8, rule: MeshRule | None = None
) -> AxiMesh:
    """Mesh every conductor of ``layout`` at refinement ``level`` with ``order`` nodes/panel.

    Level 0 is graded, balanced and gap-refined once (cached per layout and ``rule``, default
    :func:`default_rule`); level L splits every level-0 panel into 2**L and grades singular
    corners ``rule.steps_per_level * L`` steps more.
    """
    if rule is None:
        rule = default_rule(order)
    per_conductor = []
    frac = np.linspace(0.0, 1.0, 2**level + 1)
    for curve, base, corner_ends in _base_intervals(layout, rule):
        intervals = []
        for iv in base:
            ab = np.asarray(iv, dtype=float)
            edges = ab[:, :1] + (ab[:, 1:] - ab[:, :1]) * frac  # (n, 2**level + 1)
            intervals.append(
                list(
                    zip(edges[:, :-1].ravel().tolist(), edges[:, 1:].ravel().tolist(), strict=True)
                )
            )
        for k, at_end in corner_ends:
            _grade_towards(intervals[k], at_end, rule.steps_per_level * level, rule.grade_ratio)
        per_conductor.append((curve, intervals, corner_ends))
    return _assemble_mesh(layout, per_conductor, level, order)


def clear_mesh_cache() -> None:
    """Forget the cached level-0 intervals and panel sizes (a benchmark times a trial's
    meshing with it)."""
    for cached in (_base_intervals, _panel_sizes, _orientation):
        cached.cache_clear()


@lru_cache(maxsize=8)
def _base_intervals(layout: Layout, rule: MeshRule):
    """Level-0 parameter intervals per piece of every conductor, and its singular corner ends."""
    per_conductor = []
    for cond in layout.conductors:
        curve: Curve = cond.shape
        intervals = _initial_intervals(curve, 0)
        corner_ends: set[tuple[int, bool]] = set()
        n_pieces = len(curve.pieces)
        for corner in curve.corners():
            times = rule.corner_steps if corner.singular else max(rule.corner_steps // 2, 1)
            sides = [(corner.piece_index, corner.at_end)]
            if corner.angle > 0:
                sides.append(((corner.piece_index + 1) % n_pieces, False))
            for k, at_end in sides:
                _grade_towards(intervals[k], at_end, times, rule.grade_ratio)
                if corner.singular:
                    corner_ends.add((k, at_end))
        _balance(curve, intervals, rule.balance_ratio)
        per_conductor.append((curve, intervals, frozenset(corner_ends)))
    _refine_gaps(layout, per_conductor, rule.balance_ratio)
    return tuple(
        (curve, tuple(tuple(iv) for iv in intervals), ends)
        for curve, intervals, ends in per_conductor
    )


def _refine_gaps(layout: Layout, per_conductor, balance_ratio: float) -> None:
    """Split panels longer than GAP_FACTOR times their distance to other surfaces/images."""
    samples = [cond.shape.sample(24) for cond in layout.conductors]
    clouds = []
    for ci in range(len(samples)):
        others = [samples[j] for j in range(len(samples)) if j != ci]
        if layout.ground_plane:
            others += [s * np.array([1.0, -1.0]) for s in samples]
        clouds.append(np.concatenate(others) if others else None)
    for ci, (curve, intervals, _) in enumerate(per_conductor):
        cloud = clouds[ci]
        if cloud is None:
            continue
        for _ in range(40):
            # Every piece's panels against the cloud at once (a piece's splits do not change
            # another piece's test).
            sizes = [
                _panel_sizes(piece, tuple(iv))
                for piece, iv in zip(curve.pieces, intervals, strict=True)
            ]
            centres = np.concatenate([c for _, c in sizes])
            gap2 = (centres[:, None, 0] - cloud[None, :, 0]) ** 2 + (
                centres[:, None, 1] - cloud[None, :, 1]
            ) ** 2
            dist = np.sqrt(gap2.min(axis=1))
            lengths = np.concatenate([n for n, _ in sizes])
            bad = lengths > GAP_FACTOR * dist
            if not np.any(bad):
                break
            start = 0
            for iv in intervals:
                n = len(iv)
                for j in np.nonzero(bad[start : start + n])[0][::-1]:
                    a, b = iv[j]
                    m = 0.5 * (a + b)
                    iv[j : j + 1] = [(a, m), (m, b)]
                start += n
            _balance(curve, intervals, balance_ratio)


def _assemble_mesh(layout: Layout, per_conductor, level: int, order: int) -> AxiMesh:
    xg, wg = gauss_legendre(order)
    conductor, kind, coef, at_corner = [], [], [], []
    for ci, (curve, intervals, corner_ends) in enumerate(per_conductor):
        for k, piece in enumerate(curve.pieces):
            ab = np.asarray(intervals[k], dtype=float)
            kd, cf = _piece_coefs(piece, ab)
            n = len(ab)
            conductor.append(np.full(n, ci))
            kind.append(np.full(n, kd))
            coef.append(cf)
            touches = np.zeros(n, dtype=bool)
            touches[0] |= (k, False) in corner_ends
            touches[-1] |= (k, True) in corner_ends
            at_corner.append(touches)
    conductor_a = np.concatenate(conductor).astype(np.int64)
    kind_a = np.concatenate(kind).astype(np.int64)
    coef_a = np.concatenate(coef)
    tau = np.broadcast_to(xg, (len(kind_a), order))
    pts, der = panel_geometry(kind_a, coef_a, tau)
    jac = np.linalg.norm(der, axis=-1)
    tang = der / jac[..., None]
    signs = np.array(
        [_orientation(c.shape) if c.shape.kind != "sheet" else 1.0 for c in layout.conductors]
    )
    sgn = signs[conductor_a][:, None, None]
    normals = sgn * np.stack([tang[..., 1], -tang[..., 0]], axis=-1)
    weights = jac * wg
    length = weights.sum(axis=1)
    # Arc length from the start of each conductor's curve to the start of each panel.
    ends = np.cumsum(length)
    first = np.searchsorted(conductor_a, conductor_a)
    arc_start = ends - length - np.where(first > 0, ends[first - 1], 0.0)
    arc = arc_start[:, None] + 0.5 * (xg + 1.0) * length[:, None]
    center, _ = panel_geometry(kind_a, coef_a, np.zeros((len(kind_a), 1)))
    return AxiMesh(
        order=order,
        level=level,
        conductor=conductor_a,
        kind=kind_a,
        coef=coef_a,
        length_m=length,
        center_m=center[:, 0, :],
        at_corner=np.concatenate(at_corner),
        points_m=pts.reshape(-1, 2),
        tangents=tang.reshape(-1, 2),
        normals=normals.reshape(-1, 2),
        jac_m=jac.reshape(-1),
        weights_m=weights.reshape(-1),
        arc_m=arc.reshape(-1),
    )

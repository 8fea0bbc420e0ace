"""Graded boundary discretisation of generating curves into high-order panels.

Every piece of every conductor's curve is cut into panels; each panel carries ``order``
Gauss-Legendre nodes on which the surface charge density is collocated and interpolated.
Panels are graded geometrically towards corners and free sheet edges, neighbours along a
curve differ in length by a bounded factor, and panels facing another conductor or the
ground-plane image across a narrow gap are no longer than ``gap_factor`` times the gap; a
:class:`MeshRule` gives the grading ratio, the balance factor and the grading steps.

Refinement level ``level`` halves every level-0 panel ``level`` times and adds the rule's
grading steps per level at singular corners. With ratio-2 grading, meshes of successive levels
are nested; coarser ratios grade each level's corner panels afresh from the split level-0
panel, so there only level 0 nests in level 1.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from elopt.physics.geometry import Arc, Curve, EllipseArc, Segment
from elopt.physics.layout import Layout
from elopt.physics.quadrature import gauss_legendre

KIND_SEGMENT, KIND_ARC, KIND_ELLIPSE, KIND_MAPPED = 0, 1, 2, 3

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


#: A panel is at most this many times its distance to another conductor or an image (the
#: default of MeshRule.gap_factor).
GAP_FACTOR = 2.0
#: (r, z) -> (r, -z): a point's image in the ground plane.
_MIRROR_Z = np.array([1.0, -1.0])


@dataclass(frozen=True)
class MeshRule:
    """How level-0 panels are graded and how levels refine them.

    ``corner_steps``: grading steps towards a singular corner at level 0 (a non-singular one
    gets half, at least one); ``steps_per_level``: steps added per level; each step cuts the
    panel touching the corner at 1/``grade_ratio`` of its length; neighbours along a curve
    differ in length by at most ``balance_ratio``. ``mapped_steps``: when set, the straight
    side of a singular corner with a polynomial map (:func:`corner_map_power`) is not graded
    by ``corner_steps`` but cut this many times at level 0 and never per level; its panel
    touching the corner is a mapped panel (``KIND_MAPPED``). ``gap_factor``: a level-0 panel
    is at most this many times its distance to another conductor or an image.
    """

    corner_steps: int
    steps_per_level: int
    grade_ratio: float = 2.0
    balance_ratio: float = 2.0
    mapped_steps: int | None = None
    gap_factor: float = GAP_FACTOR


#: Map powers m of mapped corner panels by the conductor's opening angle at the corner: the
#: density behaves like s^(alpha - 1), alpha = pi / (2 pi - angle); with s = L u^m the charge
#: per unit parameter, sigma ds/du ~ u^(m alpha - 1), is a polynomial in u when m alpha is an
#: integer: a right-angle edge (alpha = 2/3) takes m = 3, a free sheet edge (alpha = 1/2)
#: m = 2 (Kress 1990; Elschner & Graham 1995: polynomial graded parametrisations at corners).
#: Other angles keep the geometric grading.
CORNER_MAP_POWERS = ((math.pi / 2, 3), (0.0, 2))


def corner_map_power(angle: float) -> int:
    """The map power of a singular corner of opening ``angle`` (radians), 0 if none."""
    for a, m in CORNER_MAP_POWERS:
        if abs(angle - a) < 1e-6:
            return m
    return 0


def default_rule(order: int) -> MeshRule:
    """Ratio-2 grading with :func:`corner_levels` steps (the rule of every solver but one)."""
    return MeshRule(corner_levels(order), CORNER_LEVELS_PER_LEVEL)


@dataclass(frozen=True)
class AxiMesh:
    """Panels of all conductors; node arrays have N = P * order rows, panel-major.

    Per panel (P,): ``conductor`` index, ``kind`` (segment/arc/ellipse/mapped), ``coef`` (P, 5)
    sub-piece coefficients, ``length_m``, ``center_m`` (P, 2), ``at_corner`` (touches a
    singular corner). Per node (N,): ``points_m`` (N, 2), ``tangents`` (N, 2), ``normals``
    (N, 2) outward (for sheets: the tangent turned clockwise), ``jac_m`` arc length per unit
    reference parameter, ``weights_m`` arc-length quadrature weight, ``arc_m`` arc-length
    coordinate from the start of the conductor's curve, ``interp_jac`` the factor between
    the quantity a panel interpolates and sigma: 1, or on a mapped corner panel
    (``KIND_MAPPED``) ``jac_m``: there sigma * jac (charge per unit parameter) is the
    polynomial, and sigma off the nodes is its interpolant divided by the length element.
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
    interp_jac: np.ndarray | None = None

    @property
    def n_panels(self) -> int:
        return len(self.conductor)

    @property
    def density_scale(self) -> np.ndarray:
        """``interp_jac`` (N,), ones for a mesh without mapped panels."""
        if self.interp_jac is None:
            return np.ones(self.n_nodes)
        return self.interp_jac

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
    for k in (KIND_SEGMENT, KIND_ARC, KIND_ELLIPSE, KIND_MAPPED):
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
        elif k == KIND_MAPPED:  # (ar, az, br, bz, +-m)
            frac, dfrac = mapped_fraction(tau[sel], c[4])
            pts[sel, :, 0] = c[0] + frac * (c[2] - c[0])
            pts[sel, :, 1] = c[1] + frac * (c[3] - c[1])
            der[sel, :, 0] = dfrac * (c[2] - c[0])
            der[sel, :, 1] = dfrac * (c[3] - c[1])
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


def mapped_fraction(tau, power):
    """Fraction of a mapped panel's chord at parameter ``tau`` and its derivative in tau.

    ``power`` m > 0: the corner at tau = -1, fraction u^m with u = (tau + 1) / 2; m < 0: the
    corner at tau = +1, fraction 1 - v^|m| with v = (1 - tau) / 2. Broadcasts.
    """
    m = np.abs(power)
    at_start = power > 0
    u = np.where(at_start, 0.5 * (tau + 1.0), 0.5 * (1.0 - tau))
    um1 = u ** (m - 1)
    frac = np.where(at_start, um1 * u, 1.0 - um1 * u)
    return frac, 0.5 * m * um1


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
        out.append(list(_equal_intervals(max(n, 1) * 2**level)))
    return out


@lru_cache(maxsize=64)
def _equal_intervals(n: int) -> tuple[tuple[float, float], ...]:
    """The ``n`` equal parameter intervals of [-1, 1] (edges by ``np.linspace``)."""
    edges = np.linspace(-1.0, 1.0, n + 1).tolist()
    return tuple(zip(edges[:-1], edges[1:], strict=True))


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


@dataclass(frozen=True)
class _CurvePanels:
    """Panels of one conductor's curve as flat arrays (n,), piece-major along the curve:
    ``piece`` (index into the curve's pieces) and parameters ``t0`` < ``t1``."""

    piece: np.ndarray
    t0: np.ndarray
    t1: np.ndarray

    @staticmethod
    def of(per_piece: list[list[tuple[float, float]]]) -> _CurvePanels:
        return _CurvePanels(
            np.array([k for k, iv in enumerate(per_piece) for _ in iv], dtype=np.int64),
            np.array([a for iv in per_piece for a, _ in iv], dtype=float),
            np.array([b for iv in per_piece for _, b in iv], dtype=float),
        )

    def split(self, mask: np.ndarray) -> _CurvePanels:
        """These panels with every panel of ``mask`` (n,) halved in parameter."""
        reps = np.where(mask, 2, 1)
        idx = np.repeat(np.arange(len(self.piece)), reps)
        t0, t1 = self.t0[idx], self.t1[idx]
        cut = np.nonzero(mask)[0]
        first = (np.cumsum(reps) - reps)[cut]
        mid = 0.5 * (self.t0[cut] + self.t1[cut])
        t1[first] = mid
        t0[first + 1] = mid
        return _CurvePanels(self.piece[idx], t0, t1)


@lru_cache(maxsize=64)
def _curve_pieces(curve: Curve) -> tuple[np.ndarray, np.ndarray, np.ndarray, bool]:
    """Per piece of ``curve``: arc length (n,), kind (n,) and :func:`_piece_spec` (n, 5); and
    whether every piece is a segment or an arc (graded by :mod:`grading_kernels`)."""
    specs = [_piece_spec(p) for p in curve.pieces]
    kinds = [k for k, _ in specs]
    return (
        np.array([p.length for p in curve.pieces], dtype=float),
        np.array(kinds, dtype=np.int64),
        np.array([v for _, sp in specs for v in sp], dtype=float).reshape(-1, 5),
        KIND_ELLIPSE not in kinds,
    )


def _curve_lengths(curve: Curve, panels: _CurvePanels) -> np.ndarray:
    """Arc lengths (n,) of a curve's panels."""
    piece_length, piece_kind, _, _ = _curve_pieces(curve)
    lengths = piece_length[panels.piece] * (0.5 * (panels.t1 - panels.t0))
    if (piece_kind == KIND_ELLIPSE).any():
        for j in np.nonzero(piece_kind == KIND_ELLIPSE)[0].tolist():
            sel = panels.piece == j
            ab = np.stack([panels.t0[sel], panels.t1[sel]], axis=1)
            lengths[sel] = _interval_lengths(curve.pieces[j], ab)
    return lengths


def _curve_midpoints(curve: Curve, panels: _CurvePanels) -> np.ndarray:
    """Points (n, 2) at the parameter midpoints of a curve's panels (the formulas of
    :func:`_panel_coefs` and :func:`panel_geometry` at a panel's start, for one point each)."""
    _, piece_kind, piece_spec, _ = _curve_pieces(curve)
    mid = 0.5 * (panels.t0 + panels.t1)
    kind = piece_kind[panels.piece]
    sp = piece_spec[panels.piece]
    out = np.empty((len(mid), 2))
    seg = kind == KIND_SEGMENT
    if seg.all():
        m = mid[:, None]
        return 0.5 * (1 - m) * sp[:, 0:2] + 0.5 * (1 + m) * sp[:, 2:4]
    if seg.any():
        m = mid[seg][:, None]
        out[seg] = 0.5 * (1 - m) * sp[seg, 0:2] + 0.5 * (1 + m) * sp[seg, 2:4]
    for k in (KIND_ARC, KIND_ELLIPSE):
        sel = kind == k
        if not sel.any():
            continue
        c = sp[sel]
        ang = c[:, 3] + 0.5 * (mid[sel] + 1) * c[:, 4]
        if k == KIND_ARC:  # (cr, cz, R, a0, sweep)
            out[sel, 0] = c[:, 0] + c[:, 2] * np.cos(ang)
            out[sel, 1] = c[:, 1] + c[:, 2] * np.sin(ang)
        else:  # (cz, a, b, u0, span)
            out[sel, 0] = c[:, 1] * np.cos(ang)
            out[sel, 1] = c[:, 0] + c[:, 2] * np.sin(ang)
    return out


def _balance(curve: Curve, panels: _CurvePanels, ratio: float) -> _CurvePanels:
    """Split panels until neighbours along the curve differ by at most a factor ``ratio``."""
    closed = curve.kind == "ring"
    piece_length, _, _, compiled = _curve_pieces(curve)
    if compiled:
        from elopt.physics.bem_axi.grading_kernels import balance_panels

        return _CurvePanels(
            *balance_panels(piece_length, *_flat_panels(panels), closed, float(ratio))
        )
    while True:
        lengths = _curve_lengths(curve, panels)
        n = len(lengths)
        a = np.arange(n - 1 + int(closed))
        b = (a + 1) % n
        la, lb = lengths[a], lengths[b]
        mask = np.zeros(n, dtype=bool)
        mask[a[la > ratio * lb * (1 + 1e-9)]] = True
        mask[b[lb > ratio * la * (1 + 1e-9)]] = True
        if not mask.any():
            return panels
        panels = panels.split(mask)


def _flat_panels(panels: _CurvePanels) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``panels``' piece (int64), t0, t1 (float) as contiguous arrays (one compiled variant)."""
    return (
        np.ascontiguousarray(panels.piece, dtype=np.int64),
        np.ascontiguousarray(panels.t0, dtype=float),
        np.ascontiguousarray(panels.t1, dtype=float),
    )


def build_mesh(
    layout: Layout, level: int = 0, order: int = 8, rule: MeshRule | None = None
) -> AxiMesh:
    """Mesh every conductor of ``layout`` at refinement ``level`` with ``order`` nodes/panel.

    Level 0 is graded, balanced and gap-refined once (cached per layout and ``rule``, default
    :func:`default_rule`); level L splits every level-0 panel into 2**L and grades singular
    corners ``rule.steps_per_level * L`` steps more.
    """
    from elopt.physics.bem_axi.mesh_kernels import split_panels

    if rule is None:
        rule = default_rule(order)
    base = _base_panels(layout, rule)
    piece, t0, t1 = split_panels(base.piece, base.t0, base.t1, _level_fractions(level))
    piece, t0, t1 = _grade_corners(base, piece, t0, t1, rule.steps_per_level * level, rule)
    return _assemble_mesh(layout, base, piece, t0, t1, level, order)


@lru_cache(maxsize=16)
def _level_fractions(level: int) -> np.ndarray:
    """Fractions (2**level + 1,) of a level-0 panel's parameter interval at its level-``level``
    panels' edges."""
    return np.linspace(0.0, 1.0, 2**level + 1)


def level_zero_unknowns(layout: Layout, order: int, rule: MeshRule | None = None) -> int:
    """Nodes of ``build_mesh(layout, 0, order, rule)`` without assembling it (its panels are
    the cached level-0 panels)."""
    return len(_base_panels(layout, rule or default_rule(order)).piece) * order


def _grade_corners(
    base: _BasePanels, piece: np.ndarray, t0: np.ndarray, t1: np.ndarray, steps: int, rule: MeshRule
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Panels (piece, t0, t1; each (M,), sorted by piece and parameter) with the panel at each
    of ``base``'s singular corners cut ``steps`` times towards it (``rule.grade_ratio``)."""
    if not steps or not base.corner_ends:
        return piece, t0, t1
    first, last = _piece_ends(piece)
    drop, extra = [], []
    for k, at_end in base.corner_ends:
        j = last[k] if at_end else first[k]
        cuts = _graded_edges(float(t0[j]), float(t1[j]), at_end, steps, rule.grade_ratio)
        drop.append(j)
        extra.append((np.full(len(cuts) - 1, k), cuts[:-1], cuts[1:]))
    keep = np.ones(len(piece), dtype=bool)
    keep[drop] = False
    piece = np.concatenate([piece[keep]] + [e[0] for e in extra])
    t0 = np.concatenate([t0[keep]] + [np.asarray(e[1]) for e in extra])
    t1 = np.concatenate([t1[keep]] + [np.asarray(e[2]) for e in extra])
    order = np.lexsort((t0, piece))
    return piece[order], t0[order], t1[order]


def _piece_ends(piece: np.ndarray) -> tuple[dict[int, int], dict[int, int]]:
    """Index of the first and of the last panel of every piece in ``piece`` (sorted, (P,))."""
    first = np.flatnonzero(np.diff(piece, prepend=-1))
    ids = piece[first].tolist()
    last = np.append(first[1:], len(piece)) - 1
    return dict(zip(ids, first.tolist(), strict=True)), dict(zip(ids, last.tolist(), strict=True))


def _graded_edges(a: float, b: float, at_end: bool, times: int, ratio: float) -> list[float]:
    """Edges of the parameter interval (a, b) cut ``times`` times at 1/``ratio`` of the
    interval touching one end from that end, as :func:`_grade_towards` cuts it."""
    iv = [(a, b)]
    _grade_towards(iv, at_end, times, ratio)
    return [iv[0][0]] + [e for _, e in iv]


@dataclass(frozen=True)
class _BasePanels:
    """Level-0 panels of a layout as flat arrays (M,), piece-major in layout order: ``piece``
    (index into ``pieces``), parameters ``t0`` < ``t1``; per piece (n,): ``pieces``,
    ``conductor``, ``kind``, ``spec`` (n, 5) (segment: start and end points; arc: centre,
    radius, start angle, sweep; ellipse arc: centre z, semi-axes, start parameter, span);
    ``corner_ends``: (piece, at_end) of every singular corner, graded further per level;
    ``mapped_ends``: (piece, at_end, map power) of every mapped corner side (its panel
    touching the corner is mapped at every level, never graded further);
    ``signs`` (conductors,): orientation of each conductor's normal; ``corner_piece``,
    ``corner_at_end`` (K,): ``corner_ends`` as arrays; ``mapped_piece`` (M,) and
    ``mapped_power`` (M,) (float; ``mapped_powers`` the same as ints): ``mapped_ends``' pieces
    and map powers, negative at a piece's end.
    """

    piece: np.ndarray
    t0: np.ndarray
    t1: np.ndarray
    pieces: tuple
    conductor: np.ndarray
    kind: np.ndarray
    spec: np.ndarray
    corner_ends: tuple[tuple[int, bool], ...]
    mapped_ends: tuple[tuple[int, bool, int], ...]
    signs: np.ndarray
    corner_piece: np.ndarray
    corner_at_end: np.ndarray
    mapped_piece: np.ndarray
    mapped_power: np.ndarray
    mapped_powers: tuple[int, ...]


def _piece_spec(piece) -> tuple[int, tuple[float, ...]]:
    if isinstance(piece, Segment):
        return KIND_SEGMENT, (*piece.start, *piece.end, 0.0)
    if isinstance(piece, Arc):
        return KIND_ARC, (*piece.center, piece.radius, piece.start_angle, piece.sweep)
    if isinstance(piece, EllipseArc):
        span = piece.end_u - piece.start_u
        return KIND_ELLIPSE, (
            piece.center_z,
            piece.semi_axis_r,
            piece.semi_axis_z,
            piece.start_u,
            span,
        )
    raise TypeError(f"unsupported curve piece {type(piece).__name__}")


@lru_cache(maxsize=8)
def _base_panels(layout: Layout, rule: MeshRule) -> _BasePanels:
    pieces, conductor, kind, spec, piece_id, t0, t1 = [], [], [], [], [], [], []
    corners, mapped = [], []
    for ci, (curve, panels, ends) in enumerate(_base_intervals(layout, rule)):
        corner_ends, mapped_ends = ends
        offset = len(pieces)
        _, piece_kind, piece_spec, _ = _curve_pieces(curve)  # cached by the grading
        pieces.extend(curve.pieces)
        conductor.append(np.full(len(curve.pieces), ci, dtype=np.int64))
        kind.append(piece_kind)
        spec.append(piece_spec)
        piece_id.append(panels.piece + offset)
        t0.append(panels.t0)
        t1.append(panels.t1)
        for k, at_end in sorted(corner_ends):
            corners.append((offset + k, at_end))
        for k, at_end, power in sorted(mapped_ends):
            mapped.append((offset + k, at_end, power))
    signs = np.array(
        [_orientation(c.shape) if c.shape.kind != "sheet" else 1.0 for c in layout.conductors]
    )
    return _BasePanels(
        piece=np.concatenate(piece_id).astype(np.int64),
        t0=np.concatenate(t0),
        t1=np.concatenate(t1),
        pieces=tuple(pieces),
        conductor=np.concatenate(conductor),
        kind=np.concatenate(kind),
        spec=np.concatenate(spec),
        corner_ends=tuple(corners),
        mapped_ends=tuple(mapped),
        signs=signs,
        corner_piece=np.array([k for k, _ in corners], dtype=np.int64),
        corner_at_end=np.array([e for _, e in corners], dtype=np.bool_),
        mapped_piece=np.array([k for k, _, _ in mapped], dtype=np.int64),
        mapped_power=np.array([-m if e else m for _, e, m in mapped], dtype=float),
        mapped_powers=tuple(-m if e else m for _, e, m in mapped),
    )


def clear_mesh_cache() -> None:
    """Forget the cached level-0 intervals and panel sizes (a benchmark times a trial's
    meshing with it)."""
    for cached in (_base_panels, _base_intervals, _curve_pieces, _orientation):
        cached.cache_clear()


@lru_cache(maxsize=8)
def _base_intervals(layout: Layout, rule: MeshRule):
    """Level-0 panels (:class:`_CurvePanels`) of every conductor's curve, and its singular
    corner ends (piece, at_end)."""
    per_conductor = []
    for cond in layout.conductors:
        curve: Curve = cond.shape
        intervals = _initial_intervals(curve, 0)
        corner_ends: set[tuple[int, bool]] = set()
        mapped_ends: set[tuple[int, bool, int]] = set()
        n_pieces = len(curve.pieces)
        for corner in curve.corners():
            times = rule.corner_steps if corner.singular else max(rule.corner_steps // 2, 1)
            sides = [(corner.piece_index, corner.at_end)]
            if corner.angle > 0:
                sides.append(((corner.piece_index + 1) % n_pieces, False))
            power = corner_map_power(corner.angle) if corner.singular else 0
            for k, at_end in sides:
                if rule.mapped_steps is not None and power and isinstance(curve.pieces[k], Segment):
                    _grade_towards(intervals[k], at_end, rule.mapped_steps, 2.0)
                    mapped_ends.add((k, at_end, power))
                    continue
                _grade_towards(intervals[k], at_end, times, rule.grade_ratio)
                if corner.singular:
                    corner_ends.add((k, at_end))
        for k, at_end, _ in mapped_ends:
            if (
                not at_end
                and len(intervals[k]) == 1
                and any(e[:2] == (k, True) for e in mapped_ends)
            ):
                _grade_towards(intervals[k], False, 1, 2.0)  # one mapped panel per corner
        panels = _balance(curve, _CurvePanels.of(intervals), rule.balance_ratio)
        per_conductor.append((curve, panels, (frozenset(corner_ends), frozenset(mapped_ends))))
    return tuple(_refine_gaps(layout, per_conductor, rule.balance_ratio, rule.gap_factor))


def _refine_gaps(layout: Layout, per_conductor, balance_ratio: float, gap_factor: float) -> list:
    """Split panels longer than ``gap_factor`` times their distance to other surfaces/images.

    The cloud of distances is every conductor's ``sample(24)`` and, over a ground plane, their
    images; a conductor's own samples (not its image) are left out for its panels."""
    samples = [cond.shape.sample(24) for cond in layout.conductors]
    bounds = np.cumsum([0] + [len(s) for s in samples]).tolist()
    cloud = np.concatenate(samples)
    if layout.ground_plane:
        cloud = np.concatenate([cloud, cloud * _MIRROR_Z])
    cloud_r, cloud_z = cloud.T.copy()  # contiguous columns
    out = []
    for ci, (curve, panels, ends) in enumerate(per_conductor):
        lo, hi = bounds[ci], bounds[ci + 1]
        if hi - lo < len(cloud):
            panels = _refine_curve_gaps(
                curve, panels, balance_ratio, gap_factor, cloud_r, cloud_z, lo, hi
            )
        out.append((curve, panels, ends))
    return out


def _refine_curve_gaps(
    curve: Curve,
    panels: _CurvePanels,
    balance_ratio: float,
    gap_factor: float,
    cloud_r: np.ndarray,
    cloud_z: np.ndarray,
    lo: int,
    hi: int,
) -> _CurvePanels:
    """:func:`_refine_gaps` for one curve against the cloud (m,) less its points lo..hi-1."""
    piece_length, piece_kind, piece_spec, compiled = _curve_pieces(curve)
    rounds = 40
    if compiled:
        from elopt.physics.bem_axi.grading_kernels import refine_gap_panels

        return _CurvePanels(
            *refine_gap_panels(
                piece_kind,
                piece_spec,
                piece_length,
                *_flat_panels(panels),
                curve.kind == "ring",
                float(balance_ratio),
                cloud_r,
                cloud_z,
                lo,
                hi,
                float(gap_factor),
                rounds,
            )
        )
    cloud_r = np.concatenate([cloud_r[:lo], cloud_r[hi:]])
    cloud_z = np.concatenate([cloud_z[:lo], cloud_z[hi:]])
    for _ in range(rounds):
        lengths = _curve_lengths(curve, panels)
        centres = _curve_midpoints(curve, panels)
        gap2 = (centres[:, 0, None] - cloud_r) ** 2 + (centres[:, 1, None] - cloud_z) ** 2
        bad = lengths > gap_factor * np.sqrt(gap2.min(axis=1))
        if not bad.any():
            break
        panels = _balance(curve, panels.split(bad), balance_ratio)
    return panels


def _assemble_mesh(
    layout: Layout,
    base: _BasePanels,
    piece: np.ndarray,
    t0: np.ndarray,
    t1: np.ndarray,
    level: int,
    order: int,
) -> AxiMesh:
    """The mesh of the panels (piece, t0, t1) (P,) of ``base``'s pieces (compiled:
    :func:`mesh_kernels.assemble_panels`)."""
    from elopt.physics.bem_axi.mesh_kernels import assemble_panels

    xg, wg = gauss_legendre(order)
    frac, dfrac = _mapped_tables(order, base.mapped_powers)
    (conductor, kind, coef, length, centre, at_corner, *nodes) = assemble_panels(
        base.kind,
        base.spec,
        base.conductor,
        base.signs,
        piece,
        t0,
        t1,
        base.corner_piece,
        base.corner_at_end,
        base.mapped_piece,
        base.mapped_power,
        frac,
        dfrac,
        xg,
        wg,
    )
    points, tangents, normals, jac, weights, arc, interp_jac = nodes
    return AxiMesh(
        order=order,
        level=level,
        conductor=conductor,
        kind=kind,
        coef=coef,
        length_m=length,
        center_m=centre,
        at_corner=at_corner,
        points_m=points,
        tangents=tangents,
        normals=normals,
        jac_m=jac,
        weights_m=weights,
        arc_m=arc,
        interp_jac=interp_jac,
    )


@lru_cache(maxsize=64)
def _mapped_tables(order: int, powers: tuple[int, ...]) -> tuple[np.ndarray, np.ndarray]:
    """:func:`mapped_fraction` and its derivative (M, order) at the Gauss-Legendre nodes for
    signed map powers ``powers`` (M,), computed by numpy (its power is not the C library's)."""
    xg, _ = gauss_legendre(order)
    m = np.array(powers, dtype=float).reshape(-1, 1)
    frac, dfrac = mapped_fraction(np.broadcast_to(xg, (len(m), order)), m)
    return np.ascontiguousarray(frac), np.ascontiguousarray(dfrac)

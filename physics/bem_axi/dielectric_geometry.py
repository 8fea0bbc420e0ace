"""Dielectric regions of a body of revolution: validation, interfaces and the media of surfaces.

A region's ``shape`` is a :class:`elopt.physics.geometry.Curve`: either a ``"body"`` curve
(both ends on the axis; the axis closes it) or a closed ``"ring"`` curve, which may run along
the axis, along a conductor, along the ground plane or along another region. Only the pieces
that separate two dielectrics become interfaces (the axis bounds no area; a piece on a
conductor or on the grounded plane carries the conductor's charge). A piece that lies only
partly on a conductor or another region must be split where it leaves it; the error says so.
A region may cross planar layer faces (its pieces split at each face); the part of a face
inside it becomes an interface of its own (the region's medium on both sides, the background's
permittivity jumping), see :func:`_face_chords`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.optimize

from elopt.physics.errors import GeometryError
from elopt.physics.geometry import (
    Arc,
    Curve,
    Segment,
    _first_self_intersection,
    point_in_region,
)
from elopt.physics.layout import Layout
from elopt.physics.media import DielectricRegion

#: Relative tolerance (of the layout size) for "this point lies on that curve".
ON_CURVE_TOL = 1e-7
_PIECE_SAMPLES = np.linspace(-1.0, 1.0, 7)


def distance_to_curve(points: np.ndarray, curve: Curve) -> np.ndarray:
    """Exact distance (M,) from points (M, 2) to ``curve`` (segments and arcs; ellipse arcs by
    a 2,000-chord polyline)."""
    return np.min([distance_to_piece(points, piece) for piece in curve.pieces], axis=0)


def distance_to_piece(points: np.ndarray, piece) -> np.ndarray:
    """Distance (M,) from points (M, 2) to one piece (as :func:`distance_to_curve`)."""
    if isinstance(piece, Segment):
        a, b = np.asarray(piece.start), np.asarray(piece.end)
        d = b - a
        t = np.clip((points - a) @ d / max(d @ d, 1e-300), 0.0, 1.0)
        return np.linalg.norm(points - (a + t[:, None] * d), axis=1)
    if isinstance(piece, Arc):
        c = np.asarray(piece.center)
        rel = points - c
        ang = np.arctan2(rel[:, 1], rel[:, 0])
        lo = min(piece.start_angle, piece.end_angle)
        hi = max(piece.start_angle, piece.end_angle)
        mid = 0.5 * (lo + hi)
        ang = ang + 2 * np.pi * np.round((mid - ang) / (2 * np.pi))
        inside = (ang >= lo) & (ang <= hi)
        ends = piece.points(np.array([-1.0, 1.0]))
        d_end = np.min(np.linalg.norm(points[:, None, :] - ends[None], axis=2), axis=1)
        return np.where(inside, np.abs(np.linalg.norm(rel, axis=1) - piece.radius), d_end)
    poly = piece.points(np.linspace(-1.0, 1.0, 2001))
    return np.min(np.linalg.norm(points[:, None, :] - poly[None], axis=2), axis=1)


def _nearest_on_piece(points: np.ndarray, piece) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Distance (M,), foot point (M, 2) and unit tangent there (M, 2) on one piece."""
    if isinstance(piece, Segment):
        a, b = np.asarray(piece.start), np.asarray(piece.end)
        d = b - a
        t = np.clip((points - a) @ d / max(d @ d, 1e-300), 0.0, 1.0)
        foot = a + t[:, None] * d
        tan = np.broadcast_to(d / np.linalg.norm(d), points.shape)
    else:
        grid = np.linspace(-1.0, 1.0, 2001)
        poly = piece.points(grid)
        k = np.argmin(np.linalg.norm(points[:, None, :] - poly[None], axis=2), axis=1)
        t = grid[k]
        for _ in range(3):  # Newton on (x(t) - p) . x'(t) = 0, with x'' by differences
            x = piece.points(t)
            dx = piece.derivative(t)
            h = 1e-6
            ddx = (
                piece.derivative(np.clip(t + h, -1, 1)) - piece.derivative(np.clip(t - h, -1, 1))
            ) / (2 * h)
            g = np.sum((x - points) * dx, axis=1)
            gp = np.sum(dx * dx, axis=1) + np.sum((x - points) * ddx, axis=1)
            t = np.clip(t - g / np.where(np.abs(gp) > 0, gp, 1.0), -1.0, 1.0)
        foot = piece.points(t)
        tan = piece.tangents(t)
    return np.linalg.norm(points - foot, axis=1), foot, tan


def nearest_side(points: np.ndarray, curve: Curve) -> tuple[np.ndarray, np.ndarray]:
    """Distance (M,) to ``curve`` and the side (M,): +1 left of its direction, -1 right."""
    best = np.full(len(points), np.inf)
    side = np.zeros(len(points))
    for piece in curve.pieces:
        dist, foot, tan = _nearest_on_piece(points, piece)
        rel = points - foot
        cross = tan[:, 0] * rel[:, 1] - tan[:, 1] * rel[:, 0]
        better = dist < best
        best = np.where(better, dist, best)
        side = np.where(better, np.sign(cross), side)
    return best, side


def region_outline(curve: Curve) -> np.ndarray:
    """Closed polygon (K, 2) of the area a region's curve encloses in the (r, z) half-plane."""
    pts = curve.sample(256)
    return np.concatenate([pts, pts[:1]])


def _orientation(outline: np.ndarray) -> float:
    x, y = outline[:, 0], outline[:, 1]
    return 1.0 if np.sum(x[:-1] * y[1:] - x[1:] * y[:-1]) >= 0 else -1.0


@dataclass(frozen=True)
class InterfaceChain:
    """Consecutive interface pieces of one region: the curve, the permittivity inside (the
    region) and per piece outside, and the sign turning the mesh normal (tangent turned
    clockwise) into the normal pointing out of the region."""

    region: str
    curve: Curve
    eps_inside: float
    eps_outside: tuple[float, ...]
    normal_sign: float


@dataclass(frozen=True)
class DielectricGeometry:
    """Validated regions: interface chains, and a way to tell the medium at any point."""

    layout: Layout
    chains: tuple[InterfaceChain, ...]
    outlines: tuple[np.ndarray, ...]
    junctions: np.ndarray  # (J, 2) points where an interface ends on a conductor or the plane

    def region_index_at(self, points: np.ndarray) -> np.ndarray:
        """Index (M,) of the region containing each point, -1 outside every region.

        A polygon test, except within 1e-3 of the size of a boundary, where the side of the
        nearest boundary point decides (the polygon's chords would be too coarse there).
        """
        out = np.full(len(points), -1)
        for k, (outline, reg) in enumerate(zip(self.outlines, self.layout.regions, strict=True)):
            inside = point_in_region(points, outline)
            dist, side = nearest_side(points, reg.shape)
            near = dist <= 1e-3 * reg.shape.size
            inside[near] = (side[near] * _orientation(outline)) > 0
            out[inside & (out < 0)] = k
        return out

    def eps_r_at(self, points: np.ndarray) -> np.ndarray:
        """Relative permittivity (M,) at points (M, 2): region, else layer, else medium."""
        idx = self.region_index_at(points)
        eps = self.layout.layer_stack.eps_r_at(points[:, 1])
        regions = self.layout.regions
        for k in range(len(regions)):
            eps[idx == k] = regions[k].eps_r
        return eps


def _piece_points(piece) -> np.ndarray:
    return piece.points(_PIECE_SAMPLES)


def _check_region_curve(region: DielectricRegion, size: float) -> Curve:
    curve = region.shape
    if not isinstance(curve, Curve):
        raise GeometryError(
            f"region '{region.name}': shape must be a generating curve (Curve), got "
            f"{type(curve).__name__}"
        )
    if curve.kind == "sheet":
        raise GeometryError(
            f"region '{region.name}': boundary is open (from {curve.start} to {curve.end}); it "
            "must be closed, or run from the axis back to the axis"
        )
    pts = curve.sample(32)
    tol = ON_CURVE_TOL * size
    if float(pts[:, 0].min()) < -tol:
        i = int(pts[:, 0].argmin())
        raise GeometryError(
            f"region '{region.name}': boundary crosses the axis (reaches r = {pts[i, 0]:.6g} m at "
            f"z = {pts[i, 1]:.6g} m); every point must have r >= 0"
        )
    hit = _self_intersection(curve)
    if hit is not None:
        raise GeometryError(
            f"region '{region.name}': boundary intersects itself near (r, z) = "
            f"({hit[0]:.6g}, {hit[1]:.6g}) m"
        )
    return curve


def _self_intersection(curve: Curve) -> tuple[float, float] | None:
    """A point where two non-adjacent chords of the closed boundary cross or touch, else None."""
    pts = curve.sample(32)
    if curve.kind == "body":
        pts = np.concatenate([pts, pts[:1]])
    return _first_self_intersection(pts, closed=True)


def _on(points: np.ndarray, curve: Curve, tol: float) -> np.ndarray:
    return distance_to_curve(points, curve) <= tol


def build_dielectric_geometry(layout: Layout) -> DielectricGeometry:
    """Validate ``layout.regions`` against each other, the conductors, the axis, the plane and
    the layers; return the interface chains. Raises GeometryError with one line per rule."""
    conductors = [c.shape for c in layout.conductors]
    size = max(
        [c.size for c in conductors]
        + [r.shape.size for r in layout.regions if hasattr(r.shape, "size")]
    )
    tol = ON_CURVE_TOL * size
    names = [r.name for r in layout.regions]
    dup = {n for n in names if names.count(n) > 1}
    if dup:
        raise GeometryError(f"layout: region names must be unique, repeated: {sorted(dup)}")
    curves = [_check_region_curve(r, size) for r in layout.regions]
    outlines = tuple(region_outline(c) for c in curves)
    stack = layout.layer_stack
    for reg, curve in zip(layout.regions, curves, strict=True):
        pts = curve.sample(32)
        if layout.ground_plane and float(pts[:, 1].min()) < -tol:
            raise GeometryError(
                f"region '{reg.name}': crosses the ground plane z = 0 (reaches z = "
                f"{pts[:, 1].min():.6g} m); every point must have z >= 0"
            )
        for zi in stack.interfaces_m:
            for piece in curve.pieces:
                zz = _piece_points(piece)[:, 1]
                if zz.min() < zi - tol and zz.max() > zi + tol:
                    raise GeometryError(
                        f"region '{reg.name}': a boundary piece from {_fmt(piece.start)} to "
                        f"{_fmt(piece.end)} crosses the layer interface z = {zi:.6g} m; split "
                        "it at the interface"
                    )
    _check_overlaps(layout, curves, outlines, tol)
    chains: list[InterfaceChain] = []
    junctions: list[tuple[float, float]] = []
    done: list[Curve] = []
    for k, (reg, curve) in enumerate(zip(layout.regions, curves, strict=True)):
        sign = _orientation(outlines[k])
        run: list = []
        outside: list[float] = []
        pieces = list(curve.pieces)
        # start a closed ring at a piece that is not kept, so that chains do not wrap around
        keep = [_interface_piece(reg, p, conductors, layout, done, tol) for p in pieces]
        if curve.kind == "ring" and not all(keep):
            first = keep.index(False)
            pieces = pieces[first:] + pieces[:first]
            keep = keep[first:] + keep[:first]
        for piece, kept in zip(pieces, keep, strict=True):
            if kept:
                mid = piece.points(np.array([0.0]))
                normal = sign * np.array(
                    [piece.tangents(np.array([0.0]))[0][1], -piece.tangents(np.array([0.0]))[0][0]]
                )
                probe = mid + 1e-5 * size * normal
                out_idx = [
                    j for j, o in enumerate(outlines) if j != k and point_in_region(probe, o)[0]
                ]
                eps_out = (
                    layout.regions[out_idx[0]].eps_r
                    if out_idx
                    else float(stack.eps_r_at(probe[:, 1])[0])
                )
                run.append(piece)
                outside.append(eps_out)
            elif run:
                chains.append(_chain(reg, run, outside, sign))
                run, outside = [], []
        if run:
            chains.append(_chain(reg, run, outside, sign))
        chains.extend(_face_chords(reg, curve, outlines[k], layout, tol))
        done.append(curve)
    for ch in chains:
        for end in (ch.curve.start, ch.curve.end):
            p = np.asarray([end])
            if end[0] <= tol:
                continue
            on_cond = any(_on(p, c, tol)[0] for c in conductors)
            on_plane = layout.ground_plane and abs(end[1]) <= tol
            if on_cond or on_plane or ch.curve.kind == "sheet":
                junctions.append(end)
    return DielectricGeometry(
        layout=layout,
        chains=tuple(chains),
        outlines=outlines,
        junctions=np.asarray(junctions, float).reshape(-1, 2),
    )


def _face_chords(
    reg: DielectricRegion, curve: Curve, outline: np.ndarray, layout: Layout, tol: float
) -> list[InterfaceChain]:
    """Interfaces where a layer face runs through the region: the region's medium is on both
    sides, but the background's permittivity jumps, so the face carries polarisation charge
    relative to the background (normal +z; dielectric_solve's kappa = (eps_b- - eps_b+) / 2).
    """
    pts = curve.sample(32)
    closed = [region_outline(c.shape) for c in layout.conductors if c.shape.kind != "sheet"]
    out = []
    for zi in layout.layer_stack.interfaces_m:
        if not (pts[:, 1].min() < zi - tol and pts[:, 1].max() > zi + tol):
            continue
        cuts = [0.0]
        for poly in (outline, *closed):
            a, b = poly[:-1], poly[1:]
            on = np.abs(a[:, 1] - zi) <= tol
            cuts.extend(a[on, 0])
            da, db = a[:, 1] - zi, b[:, 1] - zi
            cross = (da * db < 0) & ~on & (np.abs(db) > tol)
            f = da[cross] / (da[cross] - db[cross])
            cuts.extend(a[cross, 0] + f * (b[cross, 0] - a[cross, 0]))
        cuts = np.unique(np.round(np.asarray(cuts) / tol) * tol)
        for ra, rb in zip(cuts[:-1], cuts[1:], strict=True):
            if rb - ra <= 2 * tol:
                continue
            mid = np.array([[0.5 * (ra + rb), zi]])
            if not point_in_region(mid, outline)[0] or distance_to_curve(mid, curve)[0] <= tol:
                continue
            if any(point_in_region(mid, c)[0] for c in closed):
                continue
            chord = Curve((Segment((float(ra), float(zi)), (float(rb), float(zi))),))
            out.append(InterfaceChain(reg.name, chord, reg.eps_r, (reg.eps_r,), -1.0))
    return out


def _chain(reg: DielectricRegion, run: list, outside: list[float], sign: float) -> InterfaceChain:
    return InterfaceChain(reg.name, Curve(tuple(run)), reg.eps_r, tuple(outside), sign)


def _interface_piece(reg, piece, conductors, layout: Layout, done, tol: float) -> bool:
    """Whether a region boundary piece separates two dielectrics (see the module text)."""
    pts = _piece_points(piece)
    if np.all(pts[:, 0] <= tol):
        return False
    if layout.ground_plane and np.all(np.abs(pts[:, 1]) <= tol):
        return False
    for c, cond in zip(conductors, layout.conductors, strict=True):
        on = _on(pts, c, tol)
        if on.all():
            return False
        if on[1:-1].any():
            raise GeometryError(
                f"region '{reg.name}': a boundary piece from {_fmt(piece.start)} to "
                f"{_fmt(piece.end)} runs partly along conductor '{cond.name}'; split it where it "
                "leaves the conductor"
            )
    for other in done:
        on = _on(pts, other, tol)
        if on.all():
            return False  # shared with an earlier region, which carries the interface
        if on[1:-1].any():
            raise GeometryError(
                f"region '{reg.name}': a boundary piece from {_fmt(piece.start)} to "
                f"{_fmt(piece.end)} runs partly along another region; split it where it leaves"
            )
    return True


def _fmt(p) -> str:
    return f"({p[0]:.6g}, {p[1]:.6g}) m"


def _check_overlaps(layout: Layout, curves, outlines, tol: float) -> None:
    """Regions may touch but not overlap each other or cut into a conductor."""
    probes = []
    for curve in curves:
        pts = []
        for piece in curve.pieces:
            p = piece.points(np.linspace(-0.9, 0.9, 9))
            pts.append(p)
        probes.append(np.concatenate(pts))
    for i, reg in enumerate(layout.regions):
        for j, other in enumerate(layout.regions):
            if i == j:
                continue
            p = probes[i]
            inside = point_in_region(p, outlines[j]) & (distance_to_curve(p, curves[j]) > tol)
            if inside.any():
                q = p[int(np.argmax(inside))]
                raise GeometryError(
                    f"regions '{reg.name}' and '{other.name}' overlap: the boundary of "
                    f"'{reg.name}' enters '{other.name}' at {_fmt(q)}; regions may touch, not overlap"
                )
        for cond in layout.conductors:
            shape = cond.shape
            if shape.kind == "sheet":
                p = shape.sample(32)
                if np.any(point_in_region(p, outlines[i])) and not np.all(
                    point_in_region(p, outlines[i])
                ):
                    raise GeometryError(
                        f"region '{reg.name}': conductor '{cond.name}' (a sheet) crosses its "
                        "boundary; a sheet must lie wholly inside or outside a region"
                    )
                continue
            outline = region_outline(shape)
            p = probes[i]
            inside = point_in_region(p, outline) & (distance_to_curve(p, shape) > tol)
            if inside.any():
                q = p[int(np.argmax(inside))]
                raise GeometryError(
                    f"region '{reg.name}': cuts into conductor '{cond.name}' at {_fmt(q)}; a "
                    "region may touch or enclose a conductor, not overlap it"
                )


def piece_media(
    geom: DielectricGeometry, curve: Curve, normal_sign: float, what: str
) -> np.ndarray:
    """Permittivity (P, 2) on the normal side and the other side of each piece of ``curve``.

    The normal is ``normal_sign`` times the tangent turned clockwise. Raises GeometryError when
    a piece changes medium along its length (it must be split at the junction).
    """
    size = geom_size(geom)
    t = np.array([-0.6, 0.0, 0.6])
    probes = []
    for piece in curve.pieces:
        pts = piece.points(t)
        tan = piece.tangents(t)
        nrm = normal_sign * np.stack([tan[:, 1], -tan[:, 0]], axis=1)
        # Small: a piece leaving a layer face tangentially (a rim resting on a sheet) is only
        # a hair above the face at its probe points.
        off = 1e-6 * min(piece.length, size)
        probes += [pts + off * nrm, pts - off * nrm]
    # one medium look-up for every probe: (piece, side, point)
    eps = geom.eps_r_at(np.concatenate(probes)).reshape(len(curve.pieces), 2, len(t))
    for k, piece in enumerate(curve.pieces):
        e = eps[k]
        if np.any(np.ptp(e, axis=1) > 0):
            raise GeometryError(
                f"{what}: the piece from {_fmt(piece.start)} to {_fmt(piece.end)} faces "
                f"media of eps_r {e.min():g} and {e.max():g} along its length; split it "
                "where the medium changes"
            )
    return eps[:, :, 0].copy()


def node_piece(curve: Curve, points: np.ndarray) -> np.ndarray:
    """Index (N,) of the piece of ``curve`` nearest each point (N, 2)."""
    return np.argmin([distance_to_piece(points, p) for p in curve.pieces], axis=0)


def geom_size(geom: DielectricGeometry) -> float:
    return max(c.shape.size for c in geom.layout.conductors)


def is_junction_point(geom: DielectricGeometry, points: np.ndarray, tol_m: float) -> np.ndarray:
    """(M,) True where a point lies within ``tol_m`` of an interface junction."""
    if len(geom.junctions) == 0:
        return np.zeros(len(points), bool)
    d = np.linalg.norm(points[:, None, :] - geom.junctions[None], axis=2)
    return np.min(d, axis=1) <= tol_m


def wedge_exponent(wedges: list[tuple[float, float]]) -> float:
    """Smallest exponent nu > 0 of phi ~ rho^nu in a fan of dielectric wedges between two
    grounded conductor faces; ``wedges`` lists (opening angle rad, eps_r) in order.

    In each wedge phi = a sin(nu theta) + b cos(nu theta); phi and eps dphi/dtheta are
    continuous across the rays between wedges and phi = 0 on both conductor faces. The
    transfer matrix [[cos nu a, sin nu a / eps], [-eps sin nu a, cos nu a]] of each wedge
    carries (phi, eps phi' / nu) across it, so nu is the first positive root of the product's
    (0, 1) entry (one wedge of angle a: nu = pi / a). The field and the surface densities
    behave like rho^(nu - 1) (common practice, no source; the two-wedge case is the textbook
    separation of variables in each medium).
    """
    nu = np.linspace(1e-3, 4.0, 4000)

    def entry(v: np.ndarray) -> np.ndarray:
        m00, m01, m10, m11 = np.ones_like(v), np.zeros_like(v), np.zeros_like(v), np.ones_like(v)
        for angle, eps in wedges:
            c, s = np.cos(v * angle), np.sin(v * angle)
            m00, m01, m10, m11 = (
                c * m00 + s / eps * m10,
                c * m01 + s / eps * m11,
                -eps * s * m00 + c * m10,
                -eps * s * m01 + c * m11,
            )
        return m01

    f = entry(nu)
    hit = np.nonzero((f[:-1] > 0) & (f[1:] <= 0) | (f[:-1] < 0) & (f[1:] >= 0))[0]
    if not len(hit):
        return math.inf
    i = int(hit[0])
    if f[i + 1] == 0.0:
        return float(nu[i + 1])
    return float(
        scipy.optimize.brentq(
            lambda v: float(entry(np.array([v]))[0]), nu[i], nu[i + 1], xtol=1e-14
        )
    )


def _rays_at(point: np.ndarray, curve: Curve, tol: float) -> list[tuple[float, int]]:
    """Directions (angle rad, sense) in which ``curve`` leaves ``point``: sense +1 along the
    curve's direction, -1 against it (none if it misses the point)."""
    out = []
    for piece in curve.pieces:
        if np.linalg.norm(np.asarray(piece.start) - point) <= tol:
            out.append((piece.tangents(np.array([-1.0]))[0], 1))
        elif np.linalg.norm(np.asarray(piece.end) - point) <= tol:
            out.append((-piece.tangents(np.array([1.0]))[0], -1))
        elif distance_to_piece(point[None], piece)[0] <= tol:
            _, _, tan = _nearest_on_piece(point[None], piece)
            out += [(tan[0], 1), (-tan[0], -1)]
    return [(math.atan2(v[1], v[0]) % (2 * math.pi), sense) for v, sense in out]


def _ccw_between(a: float, lo: float, hi: float) -> bool:
    """Whether angle ``a`` lies on the counter-clockwise sweep from ``lo`` to ``hi``."""
    return (a - lo) % (2 * math.pi) < (hi - lo) % (2 * math.pi)


def junction_exponents(geom: DielectricGeometry, points: np.ndarray, tol: float) -> np.ndarray:
    """Exponent nu (:func:`wedge_exponent`) of the junction at each of ``points`` (J, 2): the
    smallest over the fans of media between the conductor faces (and the grounded plane)
    meeting there. 0 where no conductor meets the point (an interface ending in the media)
    or where an interface leaves tangentially to a conductor face: treated as singular."""
    layout = geom.layout
    size = geom_size(geom)
    fans, probes = [], []
    for pt in np.asarray(points, float).reshape(-1, 2):
        walls: dict[float, bool] = {}  # angle -> is a conductor face
        metal: list[tuple[float, float]] = []  # ccw sweeps (from, to) inside metal
        for cond in layout.conductors:
            rays = _rays_at(pt, cond.shape, tol)
            for a, _ in rays:
                walls[a] = True
            if cond.shape.kind != "sheet" and len(rays) == 2:
                # metal lies left of the curve's direction when it runs counter-clockwise
                out = next(a for a, sense in rays if sense > 0)
                back = next(a for a, sense in rays if sense < 0)
                ccw = _orientation(region_outline(cond.shape)) > 0
                metal.append((out, back) if ccw else (back, out))
        if layout.ground_plane and abs(pt[1]) <= tol:
            walls[0.0] = walls[math.pi] = True
            metal.append((math.pi, 2 * math.pi))
        faces = [a for ch in geom.chains for a, _ in _rays_at(pt, ch.curve, tol)]
        # an interface leaving along a conductor face (a tangent cusp of one medium) has no
        # wedge exponent: singular, as every junction without a conductor
        cusp = any(min(abs(a - w), 2 * math.pi - abs(a - w)) < 1e-6 for a in faces for w in walls)
        if not walls or cusp:
            fans.append(None)
            continue
        for a in faces:
            walls.setdefault(a, False)
        angles = sorted(walls)
        angles = [a for i, a in enumerate(angles) if i == 0 or a - angles[i - 1] > 1e-9]
        n = len(angles)
        gaps = [
            ((angles[(i + 1) % n] - angles[i]) % (2 * math.pi)) or 2 * math.pi for i in range(n)
        ]
        mids = [angles[i] + 0.5 * gaps[i] for i in range(n)]
        solid = [any(_ccw_between(m, lo, hi) for lo, hi in metal) for m in mids]
        fans.append((angles, gaps, solid, [walls[a] for a in angles], len(probes)))
        probes += [pt + 1e-6 * size * np.array([math.cos(m), math.sin(m)]) for m in mids]
    eps = geom.eps_r_at(np.asarray(probes).reshape(-1, 2)) if probes else np.zeros(0)
    out = np.zeros(len(fans))
    for j, fan in enumerate(fans):
        if fan is None:
            continue
        angles, gaps, solid, is_wall, first = fan
        n = len(angles)
        start = is_wall.index(True)
        best = math.inf
        wedges: list[tuple[float, float]] = []
        for k in range(n):
            i = (start + k) % n
            if not solid[i]:
                wedges.append((gaps[i], float(eps[first + i])))
            if is_wall[(i + 1) % n]:
                if wedges:
                    best = min(best, wedge_exponent(wedges))
                wedges = []
        out[j] = best
    return out

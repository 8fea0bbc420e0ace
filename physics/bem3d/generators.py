"""Built-in surface meshes: sphere, ellipsoid, torus, boxes and guard frames, flat sheets.

Each generator is a pure function of its arguments (the same call gives a bit-identical
mesh); lengths in metres. Closed surfaces face outward. Boxes and frames are built as
orthogonal solids on a rectilinear grid graded toward their edges (:mod:`.grading`); a
fillet of radius f rounds every convex edge by moving each vertex onto the offset surface
of the solid's core (the solid shrunk by f): x -> c + f (x - c) / |x - c|, c the nearest
core point. Concave edges (the corners of a frame's hole) stay sharp; the charge density
vanishes there, so no peak field hides in them.

Flat panels inscribed in a fillet cut its corner: the polygon lies inside the arc by up to
R (1 - cos(dtheta / 2)), an error of the capacitance in dtheta^2 that dominates on filleted
pads. With ``secant`` the vertices inside a rounding are put on the radius R k instead (k^2
on a corner's sphere, curved both ways), with k chosen so that the chords of each quarter
circle, whose end vertices stay on the faces, enclose the arc's area (:func:`secant_factor`;
the equal-area polygon's mean position is the arc's, so the leading geometric error
cancels); as the steps shrink k tends to 1 and the mesh still converges to the rounded solid.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence

import numpy as np

from elopt.physics.bem3d.grading import ARC_STEPS, axis_nodes, fillet_arc_steps
from elopt.physics.bem3d.mesh import TriangleMesh

Box = tuple[tuple[float, float, float], tuple[float, float, float]]


# -- round bodies ---------------------------------------------------------------------------
def icosphere(subdivisions: int) -> TriangleMesh:
    """Unit sphere from an icosahedron split ``subdivisions`` times: 20 * 4**s triangles."""
    g = (1.0 + math.sqrt(5.0)) / 2.0
    v = np.array(
        [
            [-1, g, 0], [1, g, 0], [-1, -g, 0], [1, -g, 0],
            [0, -1, g], [0, 1, g], [0, -1, -g], [0, 1, -g],
            [g, 0, -1], [g, 0, 1], [-g, 0, -1], [-g, 0, 1],
        ],
        dtype=float,
    )  # fmt: skip
    f = np.array(
        [
            [0, 11, 5], [0, 5, 1], [0, 1, 7], [0, 7, 10], [0, 10, 11],
            [1, 5, 9], [5, 11, 4], [11, 10, 2], [10, 7, 6], [7, 1, 8],
            [3, 9, 4], [3, 4, 2], [3, 2, 6], [3, 6, 8], [3, 8, 9],
            [4, 9, 5], [2, 4, 11], [6, 2, 10], [8, 6, 7], [9, 8, 1],
        ]
    )  # fmt: skip
    mesh = TriangleMesh(v / np.linalg.norm(v, axis=1, keepdims=True), f)
    for _ in range(subdivisions):
        m = mesh.subdivided()
        p = m.vertices_m
        mesh = TriangleMesh(p / np.linalg.norm(p, axis=1, keepdims=True), m.triangles)
    return mesh


def ellipsoid_mesh(
    semi_axes_m: Sequence[float], subdivisions: int, center_m: Sequence[float] = (0, 0, 0)
) -> TriangleMesh:
    """Ellipsoid x^2/a^2 + y^2/b^2 + z^2/c^2 = 1 (a sphere when a = b = c), outward faces."""
    unit = icosphere(subdivisions)
    v = unit.vertices_m * np.asarray(semi_axes_m, dtype=float) + np.asarray(center_m, float)
    return TriangleMesh(v, unit.triangles)


def torus_mesh(
    major_radius_m: float,
    minor_radius_m: float,
    n_around: int,
    n_tube: int,
    center_m: Sequence[float] = (0, 0, 0),
) -> TriangleMesh:
    """Ring torus about the z axis with ``n_around`` x ``n_tube`` quads split in two."""
    u = 2 * math.pi * np.arange(n_around) / n_around
    w = 2 * math.pi * np.arange(n_tube) / n_tube
    uu, ww = np.meshgrid(u, w, indexing="ij")
    rr = major_radius_m + minor_radius_m * np.cos(ww)
    v = np.stack([rr * np.cos(uu), rr * np.sin(uu), minor_radius_m * np.sin(ww)], axis=-1)
    i, j = np.meshgrid(np.arange(n_around), np.arange(n_tube), indexing="ij")
    i1, j1 = (i + 1) % n_around, (j + 1) % n_tube
    a, b = i * n_tube + j, i1 * n_tube + j
    c, d = i1 * n_tube + j1, i * n_tube + j1
    tri = np.concatenate(
        [np.stack([a, b, c], -1).reshape(-1, 3), np.stack([a, c, d], -1).reshape(-1, 3)]
    )
    mesh = TriangleMesh(v.reshape(-1, 3) + np.asarray(center_m, float), tri)
    return mesh if mesh.volume_m3 > 0 else mesh.flipped()


# -- orthogonal solids ----------------------------------------------------------------------
def orthogonal_solid(
    nodes: tuple[np.ndarray, np.ndarray, np.ndarray],
    occupied: Callable[[np.ndarray], np.ndarray],
    center_m: np.ndarray,
) -> TriangleMesh:
    """Closed outward surface of the grid cells where ``occupied(centres (..., 3))`` holds.

    Each boundary face of the rectilinear grid ``nodes`` becomes two triangles, split along
    the diagonal through the corner nearest ``center_m`` so that mirror-symmetric solids get
    mirror-symmetric meshes.
    """
    xs, ys, zs = (np.asarray(n, dtype=float) for n in nodes)
    shape = (len(xs), len(ys), len(zs))
    cx, cy, cz = (0.5 * (n[1:] + n[:-1]) for n in (xs, ys, zs))
    centres = np.stack(np.meshgrid(cx, cy, cz, indexing="ij"), axis=-1)
    occ = np.pad(np.asarray(occupied(centres), dtype=bool), 1)
    grid = np.stack(np.meshgrid(xs, ys, zs, indexing="ij"), axis=-1)
    vid = np.arange(np.prod(shape)).reshape(shape)
    quads = []
    for ax in range(3):
        p_ax, q_ax = (ax + 1) % 3, (ax + 2) % 3
        o = np.moveaxis(occ, ax, 0)
        inner = [slice(1, -1), slice(1, -1)]
        order = sorted([p_ax, q_ax])
        sl_lo = o[(slice(None, -1), *inner)]
        sl_hi = o[(slice(1, None), *inner)]
        for outward, mask in ((+1, sl_lo & ~sl_hi), (-1, ~sl_lo & sl_hi)):
            idx = np.argwhere(mask)
            if not len(idx):
                continue
            full = np.empty((len(idx), 3), dtype=np.int64)
            full[:, ax] = idx[:, 0]
            full[:, order[0]] = idx[:, 1]
            full[:, order[1]] = idx[:, 2]
            corners = []
            for dp, dq in ((0, 0), (1, 0), (1, 1), (0, 1)):
                c = full.copy()
                c[:, p_ax] += dp
                c[:, q_ax] += dq
                corners.append(vid[c[:, 0], c[:, 1], c[:, 2]])
            quad = np.stack(corners, axis=1)
            quads.append(quad if outward > 0 else quad[:, ::-1])
    quad = np.concatenate(quads)
    pts = grid.reshape(-1, 3)
    corners = pts[quad]
    dist = np.linalg.norm(corners - center_m, axis=-1)
    # Ties (a quad halved by a plane through the centre) go to the corner lowest in z, then
    # x, then y: a rule of the geometry alone, not of the corners' order (which a mirror image
    # reverses), and unchanged by the mirror y -> -y (x -> -x) wherever it breaks a tie in x (y).
    ties = np.round(dist / (1e-9 * max(float(np.ptp(pts)), 1e-300))).astype(np.int64)
    key = (corners[..., 1], corners[..., 0], corners[..., 2], ties)
    near = np.lexsort(key, axis=1)[:, 0] % 2
    d02 = np.concatenate([quad[:, [0, 1, 2]], quad[:, [0, 2, 3]]])
    d13 = np.concatenate([quad[:, [0, 1, 3]], quad[:, [1, 2, 3]]])
    keep02 = np.concatenate([near == 0, near == 0])
    tri = np.where(keep02[:, None], d02, d13)
    used, remap = np.unique(tri, return_inverse=True)
    return TriangleMesh(pts[used], remap.reshape(-1, 3))


def secant_factor(arc_step_rad: float) -> float:
    """Radius factor k of the inner vertices of a fillet's quarter circle cut into m = (pi / 2)
    / t chords of angle t, whose two end vertices stay on the faces (radius 1): the fan then
    has the quarter circle's area, (m - 2) k^2 + 2 k = m t / sin(t); 1 for t = 0."""
    t = float(arc_step_rad)
    if t <= 0:
        return 1.0
    m = max(2, round(0.5 * math.pi / t))
    q = m * t / math.sin(t)
    if m == 2:
        return q / 2.0
    return (-1.0 + math.sqrt(1.0 + (m - 2) * q)) / (m - 2)


def rounded(
    mesh: TriangleMesh, boxes: Sequence[Box], fillet_m: float, arc_step_rad: float = 0.0
) -> TriangleMesh:
    """Move every vertex of an orthogonal solid's mesh onto its rounding by ``fillet_m``.

    ``boxes`` are the axis-aligned boxes (lo, hi) whose union is the solid. ``arc_step_rad``
    > 0: the angle between neighbouring vertices on the fillets; vertices inside a rounding
    go on the equal-area radius (module docstring), the rest stay on the faces.
    """
    if fillet_m <= 0:
        return mesh
    v = mesh.vertices_m
    best = np.full(len(v), np.inf)
    nearest = np.empty_like(v)
    for lo, hi in boxes:
        c = np.clip(v, np.asarray(lo) + fillet_m, np.asarray(hi) - fillet_m)
        d = np.linalg.norm(v - c, axis=1)
        better = d < best
        best[better] = d[better]
        nearest[better] = c[better]
    off = v - nearest
    radius = np.full(len(v), fillet_m)
    if arc_step_rad > 0:
        # Offset along 2 axes: on an edge's cylinder; along 3: on a corner's sphere.
        curved = np.count_nonzero(np.abs(off) > 1e-9 * fillet_m, axis=1)
        k = secant_factor(arc_step_rad)
        radius[curved == 2] *= k
        radius[curved == 3] *= k * k
    moved = nearest + radius[:, None] * off / best[:, None]
    return TriangleMesh(moved, mesh.triangles, mesh.closed)


def _arc_step_rad(h_m: float, fillet_m: float, arc_steps: int, level: int, secant: bool) -> float:
    """Angle between fillet vertices at ``level`` when ``secant`` (else 0: no correction)."""
    if not secant or fillet_m <= 0:
        return 0.0
    return 0.25 * math.pi / (fillet_arc_steps(h_m, fillet_m, arc_steps) * 2**level)


def box_mesh(
    size_m: Sequence[float],
    h_m: float,
    level: int = 0,
    *,
    center_m: Sequence[float] = (0, 0, 0),
    fillet_m: float = 0.0,
    grade: float = 2.0,
    arc_steps: int = ARC_STEPS,
    secant: bool = False,
    centred: bool = False,
) -> TriangleMesh:
    """Rectangular box (edges ``size_m``), step about ``h_m`` at level 0, edges rounded by
    ``fillet_m`` (0: sharp, steps graded toward the edges like s**grade).

    ``arc_steps``: level-0 steps on each half of a fillet's quarter circle (at least);
    ``secant``: fillet vertices on the equal-area radius (module docstring); ``centred``: a
    node plane through 0 on each axis the box straddles symmetrically (mirror-symmetric mesh).
    """
    c = np.asarray(center_m, dtype=float)
    half = 0.5 * np.asarray(size_m, dtype=float)
    nodes = tuple(
        axis_nodes(
            [c[k] - half[k], c[k] + half[k]],
            h_m,
            level,
            fillet=fillet_m,
            grade=grade,
            arc_steps=arc_steps,
            centred=centred,
        )
        for k in range(3)
    )
    mesh = orthogonal_solid(nodes, lambda p: np.ones(p.shape[:-1], dtype=bool), c)
    step = _arc_step_rad(h_m, fillet_m, arc_steps, level, secant)
    return rounded(mesh, [(tuple(c - half), tuple(c + half))], fillet_m, step)


def frame_boxes(
    outer_m: Sequence[float], hole_m: Sequence[float], z0_m: float, thickness_m: float
) -> list[Box]:
    """The four bars (boxes) of a rectangular frame centred on the z axis."""
    ox, oy = 0.5 * outer_m[0], 0.5 * outer_m[1]
    ix, iy = 0.5 * hole_m[0], 0.5 * hole_m[1]
    z1 = z0_m + thickness_m
    return [
        ((-ox, -oy, z0_m), (-ix, oy, z1)),
        ((ix, -oy, z0_m), (ox, oy, z1)),
        ((-ox, -oy, z0_m), (ox, -iy, z1)),
        ((-ox, iy, z0_m), (ox, oy, z1)),
    ]


def frame_mesh(
    outer_m: Sequence[float],
    hole_m: Sequence[float],
    z0_m: float,
    thickness_m: float,
    h_m: float,
    level: int = 0,
    *,
    fillet_m: float = 0.0,
    grade: float = 2.0,
    arc_steps: int = ARC_STEPS,
    secant: bool = False,
    centred: bool = False,
) -> TriangleMesh:
    """Rectangular frame (a slab with a centred rectangular hole) on the z axis, bottom at z0
    (``arc_steps``, ``secant``, ``centred`` as for :func:`box_mesh`)."""
    ox, oy = 0.5 * outer_m[0], 0.5 * outer_m[1]
    ix, iy = 0.5 * hole_m[0], 0.5 * hole_m[1]
    kw = {"fillet": fillet_m, "grade": grade, "arc_steps": arc_steps}
    xs = axis_nodes([-ox, -ix, ix, ox], h_m, level, centred=centred, **kw)
    ys = axis_nodes([-oy, -iy, iy, oy], h_m, level, centred=centred, **kw)
    zs = axis_nodes([z0_m, z0_m + thickness_m], h_m, level, **kw)

    def inside(p: np.ndarray) -> np.ndarray:
        return ~((np.abs(p[..., 0]) < ix) & (np.abs(p[..., 1]) < iy))

    center = np.array([0.0, 0.0, z0_m + 0.5 * thickness_m])
    mesh = orthogonal_solid((xs, ys, zs), inside, center)
    step = _arc_step_rad(h_m, fillet_m, arc_steps, level, secant)
    return rounded(mesh, frame_boxes(outer_m, hole_m, z0_m, thickness_m), fillet_m, step)


# -- open sheets ----------------------------------------------------------------------------
def flat_sheet(
    xs: np.ndarray, ys: np.ndarray, z_m: float, occupied: Callable[[np.ndarray], np.ndarray]
) -> TriangleMesh:
    """Open flat sheet at height ``z_m``: the grid cells (xs x ys) where ``occupied`` holds.

    Normals point to +z; quads split along the diagonal through the corner nearest the
    origin (mirror-symmetric sheets get mirror-symmetric meshes).
    """
    cx, cy = 0.5 * (xs[1:] + xs[:-1]), 0.5 * (ys[1:] + ys[:-1])
    centres = np.stack(np.meshgrid(cx, cy, indexing="ij"), axis=-1)
    idx = np.argwhere(np.asarray(occupied(centres), dtype=bool))
    ny = len(ys)
    i, j = idx[:, 0], idx[:, 1]
    quad = np.stack([i * ny + j, (i + 1) * ny + j, (i + 1) * ny + j + 1, i * ny + j + 1], axis=1)
    gx, gy = np.meshgrid(xs, ys, indexing="ij")
    pts = np.stack([gx.ravel(), gy.ravel(), np.full(gx.size, z_m)], axis=1)
    dist = np.linalg.norm(pts[quad][..., :2], axis=-1)
    near = np.argmin(dist, axis=1) % 2
    d02 = np.concatenate([quad[:, [0, 1, 2]], quad[:, [0, 2, 3]]])
    d13 = np.concatenate([quad[:, [0, 1, 3]], quad[:, [1, 2, 3]]])
    tri = np.where(np.concatenate([near == 0, near == 0])[:, None], d02, d13)
    used, remap = np.unique(tri, return_inverse=True)
    return TriangleMesh(pts[used], remap.reshape(-1, 3), closed=False)


def rectangle_sheet(
    size_m: Sequence[float], z_m: float, h_m: float, level: int = 0, *, grade: float = 2.0
) -> TriangleMesh:
    """Thin rectangular plate centred on the z axis, steps graded toward its rim."""
    hx, hy = 0.5 * size_m[0], 0.5 * size_m[1]
    xs = axis_nodes([-hx, hx], h_m, level, fillet=0.0, grade=grade)
    ys = axis_nodes([-hy, hy], h_m, level, fillet=0.0, grade=grade)
    return flat_sheet(xs, ys, z_m, lambda p: np.ones(p.shape[:-1], dtype=bool))


def frame_sheet(
    outer_m: Sequence[float],
    hole_m: Sequence[float],
    z_m: float,
    h_m: float,
    level: int = 0,
    *,
    grade: float = 2.0,
) -> TriangleMesh:
    """Thin rectangular frame (plate with a centred rectangular hole) at height ``z_m``."""
    ox, oy = 0.5 * outer_m[0], 0.5 * outer_m[1]
    ix, iy = 0.5 * hole_m[0], 0.5 * hole_m[1]
    xs = axis_nodes([-ox, -ix, ix, ox], h_m, level, fillet=0.0, grade=grade)
    ys = axis_nodes([-oy, -iy, iy, oy], h_m, level, fillet=0.0, grade=grade)
    return flat_sheet(xs, ys, z_m, lambda p: ~((np.abs(p[..., 0]) < ix) & (np.abs(p[..., 1]) < iy)))

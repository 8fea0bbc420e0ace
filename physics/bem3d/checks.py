"""Checks of triangle surfaces before a solve; each failure is one GeometryError line.

Per surface: finite coordinates, valid indices, no degenerate or duplicate triangles, every
edge shared by at most two triangles (manifold), a closed surface without rim edges, faces
oriented consistently (and outward, for a closed surface), no self-intersection. Between
conductors: no intersection, no conductor inside another, nothing on or below a ground plane.

Intersections are found by a sweep over the triangles' extents along a generic direction,
then exact segment-triangle tests (the edges of each triangle against the other). Triangles
sharing a vertex are not tested against each other; coplanar overlaps that no edge crosses
are not detected.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from elopt.physics.bem3d.mesh import TriangleMesh
from elopt.physics.errors import GeometryError
from elopt.physics.kernel_cache import drop_stale_kernel_caches

drop_stale_kernel_caches()

#: A triangle whose smallest height is below this fraction of its longest edge is degenerate.
SLIVER_RATIO = 1e-6
#: Sweep direction: generic, so that no face of an axis-aligned solid is perpendicular to it.
_SWEEP = np.array([1.0, 0.5772156649, 0.3141592654]) / math.sqrt(
    1.0 + 0.5772156649**2 + 0.3141592654**2
)


def _where(p: np.ndarray) -> str:
    return f"({p[0]:.6g}, {p[1]:.6g}, {p[2]:.6g}) m"


def check_surface(mesh: TriangleMesh, name: str, what: str = "conductor") -> None:
    """Raise GeometryError naming the ``what`` (conductor, region) ``name`` if ``mesh`` breaks
    a rule above."""
    who = f"{what} '{name}'"
    v, t = mesh.vertices_m, mesh.triangles
    if v.ndim != 2 or v.shape[1] != 3 or t.ndim != 2 or t.shape[1] != 3 or len(t) == 0:
        raise GeometryError(
            f"{who}: a mesh needs vertices (V, 3) and triangles (T, 3) with T >= 1, "
            f"got {v.shape} and {t.shape}"
        )
    if not np.all(np.isfinite(v)):
        raise GeometryError(f"{who}: every vertex coordinate must be finite")
    if t.min() < 0 or t.max() >= len(v):
        raise GeometryError(
            f"{who}: triangle vertex indices must lie in [0, {len(v) - 1}], got "
            f"[{t.min()}, {t.max()}]"
        )
    repeated = (t[:, 0] == t[:, 1]) | (t[:, 1] == t[:, 2]) | (t[:, 2] == t[:, 0])
    heights = 2.0 * mesh.areas_m2 / np.maximum(mesh.diameters_m, 1e-300)
    sliver = repeated | (heights <= SLIVER_RATIO * mesh.diameters_m)
    if np.any(sliver):
        k = int(np.argmax(sliver))
        raise GeometryError(
            f"{who}: {int(sliver.sum())} degenerate triangle(s) (zero area or height "
            f"below {SLIVER_RATIO:g} of the longest edge), first #{k} near "
            f"{_where(mesh.centroids_m[k])}; remove or re-mesh them"
        )
    tri_key = np.sort(t, axis=1)
    _, counts = np.unique(tri_key, axis=0, return_counts=True)
    if np.any(counts > 1):
        raise GeometryError(
            f"{who}: {int((counts > 1).sum())} triangle(s) appear more than once; "
            "each face must be listed once"
        )
    unique, owner, inverse = mesh.edges
    count = np.bincount(inverse, minlength=len(unique))
    if np.any(count > 2):
        e = unique[int(np.argmax(count > 2))]
        raise GeometryError(
            f"{who}: the mesh is non-manifold: {int((count > 2).sum())} edge(s) are "
            f"shared by more than two triangles, e.g. the edge at {_where(v[e].mean(axis=0))}"
        )
    rim = count == 1
    if mesh.closed and np.any(rim):
        e = unique[int(np.argmax(rim))]
        raise GeometryError(
            f"{who}: declared closed but the mesh is open: {int(rim.sum())} edge(s) "
            f"belong to one triangle only, e.g. at {_where(v[e].mean(axis=0))}; close the holes "
            "or declare the surface an open sheet"
        )
    directed = np.stack([t.reshape(-1), t[:, [1, 2, 0]].reshape(-1)], axis=1)
    _, dcount = np.unique(directed, axis=0, return_counts=True)
    if np.any(dcount > 1):
        raise GeometryError(
            f"{who}: faces are not oriented consistently ({int((dcount > 1).sum())} "
            "edge(s) run the same way in both neighbouring triangles); orient every face the same "
            "way round"
        )
    if mesh.closed and mesh.volume_m3 <= 0:
        raise GeometryError(
            f"{who}: the closed mesh is inverted (its faces point inward, enclosed "
            f"volume {mesh.volume_m3:.3g} m^3); reverse the vertex order of every face"
        )
    hit = _first_intersection(mesh, mesh, same=True)
    if hit is not None:
        raise GeometryError(f"{who}: the surface intersects itself near {_where(hit)}")


def check_apart(a: TriangleMesh, name_a: str, b: TriangleMesh, name_b: str) -> None:
    """Raise GeometryError if two conductors' surfaces intersect or one lies inside the other."""
    hit = _first_intersection(a, b, same=False)
    if hit is not None:
        raise GeometryError(
            f"conductors '{name_a}' and '{name_b}' intersect near {_where(hit)}; conductors must "
            "be apart"
        )
    for inner, n_in, outer, n_out in ((a, name_a, b, name_b), (b, name_b, a, name_a)):
        if outer.closed and abs(winding_number(outer, inner.vertices_m[:1])[0]) > 0.5:
            raise GeometryError(
                f"conductor '{n_in}' lies inside conductor '{n_out}' (vertex at "
                f"{_where(inner.vertices_m[0])}); conductors must not overlap"
            )


def check_above_plane(mesh: TriangleMesh, name: str, what: str = "conductor") -> None:
    """Raise GeometryError unless every vertex has z > 0 (the ground plane is z = 0)."""
    who = f"{what} '{name}'"
    z = mesh.vertices_m[:, 2]
    k = int(np.argmin(z))
    if z[k] <= 0:
        raise GeometryError(
            f"{who}: touches or crosses the ground plane z = 0 (reaches z = "
            f"{z[k]:.6g} m at {_where(mesh.vertices_m[k])}); every point must have z > 0"
        )


def winding_number(mesh: TriangleMesh, points_m: np.ndarray) -> np.ndarray:
    """Winding number (M,) of a closed outward mesh around points (M, 3): 1 inside, 0 out.

    Sum of the signed solid angles of the faces (Van Oosterom & Strackee, IEEE Trans.
    Biomed. Eng. 30, 125 (1983)) over 4 pi.
    """
    p = np.atleast_2d(np.asarray(points_m, dtype=float))
    out = np.empty(len(p))
    c = mesh.corners_m
    for k, x in enumerate(p):
        r = c - x
        n = np.linalg.norm(r, axis=2)
        num = np.einsum("ij,ij->i", r[:, 0], np.cross(r[:, 1], r[:, 2]))
        den = (
            n[:, 0] * n[:, 1] * n[:, 2]
            + np.einsum("ij,ij->i", r[:, 0], r[:, 1]) * n[:, 2]
            + np.einsum("ij,ij->i", r[:, 1], r[:, 2]) * n[:, 0]
            + np.einsum("ij,ij->i", r[:, 2], r[:, 0]) * n[:, 1]
        )
        out[k] = 2.0 * np.arctan2(num, den).sum() / (4.0 * np.pi)
    return out


def _first_intersection(a: TriangleMesh, b: TriangleMesh, same: bool) -> np.ndarray | None:
    ca, cb = a.corners_m, b.corners_m
    pa, pb = ca @ _SWEEP, cb @ _SWEEP
    lo_a, hi_a = pa.min(axis=1), pa.max(axis=1)
    lo_b, hi_b = pb.min(axis=1), pb.max(axis=1)
    order_b = np.argsort(lo_b, kind="stable")
    tol = 1e-9 * max(a.size_m, b.size_m)
    k = _sweep_hit(
        ca,
        cb,
        a.triangles,
        b.triangles,
        lo_a,
        hi_a,
        lo_b[order_b],
        hi_b[order_b],
        order_b,
        same,
        tol,
    )
    if k < 0:
        return None
    return ca[k].mean(axis=0)


@njit(cache=True)
def _segment_hits_triangle(p: np.ndarray, q: np.ndarray, tri: np.ndarray, tol: float) -> bool:
    """Segment p-q crosses triangle tri (3, 3) (Moeller-Trumbore, inclusive by ``tol``)."""
    e1x, e1y, e1z = tri[1, 0] - tri[0, 0], tri[1, 1] - tri[0, 1], tri[1, 2] - tri[0, 2]
    e2x, e2y, e2z = tri[2, 0] - tri[0, 0], tri[2, 1] - tri[0, 1], tri[2, 2] - tri[0, 2]
    dx, dy, dz = q[0] - p[0], q[1] - p[1], q[2] - p[2]
    hx, hy, hz = dy * e2z - dz * e2y, dz * e2x - dx * e2z, dx * e2y - dy * e2x
    det = e1x * hx + e1y * hy + e1z * hz
    dd = dx * dx + dy * dy + dz * dz
    scale = math.sqrt(
        (e1x * e1x + e1y * e1y + e1z * e1z) * (e2x * e2x + e2y * e2y + e2z * e2z) * dd
    )
    if abs(det) <= 1e-12 * scale:
        return False
    sx, sy, sz = p[0] - tri[0, 0], p[1] - tri[0, 1], p[2] - tri[0, 2]
    u = (sx * hx + sy * hy + sz * hz) / det
    qx, qy, qz = sy * e1z - sz * e1y, sz * e1x - sx * e1z, sx * e1y - sy * e1x
    v = (dx * qx + dy * qy + dz * qz) / det
    t = (e2x * qx + e2y * qy + e2z * qz) / det
    rel = tol / math.sqrt(dd)
    return u >= -rel and v >= -rel and u + v <= 1.0 + rel and -rel <= t <= 1.0 + rel


@njit(cache=True)
def _tri_tri(ta: np.ndarray, tb: np.ndarray, tol: float) -> bool:
    for i in range(3):
        if _segment_hits_triangle(ta[i], ta[(i + 1) % 3], tb, tol):
            return True
        if _segment_hits_triangle(tb[i], tb[(i + 1) % 3], ta, tol):
            return True
    return False


@njit(cache=True)
def _sweep_hit(ca, cb, ta, tb, lo_a, hi_a, lo_b, hi_b, order_b, same, tol) -> int:
    """Index of the first triangle of ``a`` that intersects one of ``b`` (-1: none)."""
    nb = lo_b.shape[0]
    span = 0.0
    for s in range(nb):
        span = max(span, hi_b[s] - lo_b[s])
    for i in range(ca.shape[0]):
        # b triangles starting before lo_a - span end before lo_a: skip them by bisection.
        start = lo_a[i] - span - tol
        lo, hi = 0, nb
        while lo < hi:
            m = (lo + hi) // 2
            if lo_b[m] < start:
                lo = m + 1
            else:
                hi = m
        for s in range(lo, nb):
            if lo_b[s] > hi_a[i] + tol:
                break
            if hi_b[s] < lo_a[i] - tol:
                continue
            j = order_b[s]
            if same:
                if j <= i:
                    continue
                shared = False
                for x in range(3):
                    for y in range(3):
                        if ta[i, x] == tb[j, y]:
                            shared = True
                if shared:
                    continue
            bad = False
            for c in range(3):
                amin = min(ca[i, 0, c], ca[i, 1, c], ca[i, 2, c])
                amax = max(ca[i, 0, c], ca[i, 1, c], ca[i, 2, c])
                bmin = min(cb[j, 0, c], cb[j, 1, c], cb[j, 2, c])
                bmax = max(cb[j, 0, c], cb[j, 1, c], cb[j, 2, c])
                if amax < bmin - tol or bmax < amin - tol:
                    bad = True
            if bad:
                continue
            if _tri_tri(ca[i], cb[j], tol):
                return i
    return -1

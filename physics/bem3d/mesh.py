"""Triangle surface meshes: an immutable value with the panel geometry the 3-D solver needs.

A mesh is ``vertices_m`` (V, 3) float64 in metres and ``triangles`` (T, 3) int64 vertex
indices. Faces of a closed surface are ordered counter-clockwise seen from outside, so the
right-hand normal (v1 - v0) x (v2 - v0) points out of the conductor. An open thin sheet
(``closed=False``) has no inside; its normal only names the "+" face.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np


@dataclass(frozen=True, eq=False)
class TriangleMesh:
    """A triangulated surface (see the module docstring). Transforms return new meshes."""

    vertices_m: np.ndarray
    triangles: np.ndarray
    closed: bool = True

    def __post_init__(self) -> None:
        v = np.ascontiguousarray(self.vertices_m, dtype=np.float64)
        t = np.ascontiguousarray(self.triangles, dtype=np.int64)
        v.setflags(write=False)
        t.setflags(write=False)
        object.__setattr__(self, "vertices_m", v)
        object.__setattr__(self, "triangles", t)

    # -- sizes -------------------------------------------------------------------------------
    @property
    def n_triangles(self) -> int:
        return int(self.triangles.shape[0])

    @property
    def n_vertices(self) -> int:
        return int(self.vertices_m.shape[0])

    # -- panel geometry (cached; arrays are read-only) ---------------------------------------
    @cached_property
    def corners_m(self) -> np.ndarray:
        """Vertex coordinates per triangle, (T, 3, 3): [triangle, corner, xyz]."""
        return _frozen(self.vertices_m[self.triangles])

    @cached_property
    def _cross(self) -> np.ndarray:
        c = self.corners_m
        return np.cross(c[:, 1] - c[:, 0], c[:, 2] - c[:, 0])

    @cached_property
    def areas_m2(self) -> np.ndarray:
        """Triangle areas (T,) in m^2."""
        return _frozen(0.5 * np.linalg.norm(self._cross, axis=1))

    @cached_property
    def normals(self) -> np.ndarray:
        """Unit right-hand normals (T, 3); zero rows for degenerate triangles."""
        n = self._cross
        length = np.linalg.norm(n, axis=1, keepdims=True)
        return _frozen(np.divide(n, length, out=np.zeros_like(n), where=length > 0))

    @cached_property
    def centroids_m(self) -> np.ndarray:
        """Triangle centroids (T, 3) in m: the collocation points."""
        return _frozen(self.corners_m.mean(axis=1))

    @cached_property
    def diameters_m(self) -> np.ndarray:
        """Longest edge of each triangle (T,) in m: the panel size h."""
        c = self.corners_m
        e = np.stack(
            [
                np.linalg.norm(c[:, 1] - c[:, 0], axis=1),
                np.linalg.norm(c[:, 2] - c[:, 1], axis=1),
                np.linalg.norm(c[:, 0] - c[:, 2], axis=1),
            ],
            axis=1,
        )
        return _frozen(e.max(axis=1))

    @property
    def area_m2(self) -> float:
        return float(self.areas_m2.sum())

    @property
    def size_m(self) -> float:
        """Largest extent of the bounding box in m (for tolerances)."""
        return float(np.max(np.ptp(self.vertices_m, axis=0)))

    @cached_property
    def volume_m3(self) -> float:
        """Signed enclosed volume (divergence theorem); negative for an inward-facing mesh."""
        c = self.corners_m
        return float(np.einsum("ij,ij->i", c[:, 0], np.cross(c[:, 1], c[:, 2])).sum() / 6.0)

    @cached_property
    def edges(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Undirected edges: unique (E, 2) sorted vertex pairs, the owning triangle and slot of
        each directed half-edge (3T,), and the edge index of each half-edge (3T,)."""
        t = self.triangles
        a = t.reshape(-1)
        b = t[:, [1, 2, 0]].reshape(-1)
        key = np.stack([np.minimum(a, b), np.maximum(a, b)], axis=1)
        unique, inverse = np.unique(key, axis=0, return_inverse=True)
        return unique, np.repeat(np.arange(len(t)), 3), inverse.reshape(-1)

    @cached_property
    def boundary_edges(self) -> np.ndarray:
        """Edges (B, 2) used by exactly one triangle: the rim of an open sheet."""
        unique, _, inverse = self.edges
        count = np.bincount(inverse, minlength=len(unique))
        return unique[count == 1]

    @cached_property
    def feature_panels(self) -> np.ndarray:
        """(T,) bool: triangle touches a sharp edge (normals turn by > 30 degrees) or a rim."""
        unique, owner, inverse = self.edges
        n_edges = len(unique)
        count = np.bincount(inverse, minlength=n_edges)
        sharp = count != 2
        order = np.argsort(inverse, kind="stable")
        inv_sorted = inverse[order]
        own_sorted = owner[order]
        starts = np.searchsorted(inv_sorted, np.arange(n_edges))
        pair = count == 2
        first = own_sorted[starts[pair]]
        second = own_sorted[starts[pair] + 1]
        cosang = np.einsum("ij,ij->i", self.normals[first], self.normals[second])
        sharp_pair = cosang < np.cos(np.radians(30.0))
        sharp[np.nonzero(pair)[0][sharp_pair]] = True
        return _frozen(np.bincount(owner[sharp[inverse]], minlength=self.n_triangles) > 0)

    # -- transforms --------------------------------------------------------------------------
    def transformed(
        self, rotation: np.ndarray | None = None, translation_m: np.ndarray | None = None
    ) -> TriangleMesh:
        """The mesh moved rigidly: x -> R x + t (R (3, 3) proper rotation, t (3,) in m)."""
        v = self.vertices_m
        if rotation is not None:
            v = v @ np.asarray(rotation, dtype=float).T
        if translation_m is not None:
            v = v + np.asarray(translation_m, dtype=float)
        return TriangleMesh(v, self.triangles, self.closed)

    def translated(self, offset_m: tuple[float, float, float]) -> TriangleMesh:
        return self.transformed(translation_m=np.asarray(offset_m, dtype=float))

    def scaled(self, factor: float) -> TriangleMesh:
        return TriangleMesh(self.vertices_m * float(factor), self.triangles, self.closed)

    def flipped(self) -> TriangleMesh:
        """Same surface with every face's orientation reversed."""
        return TriangleMesh(self.vertices_m, self.triangles[:, ::-1], self.closed)

    def subdivided(self) -> TriangleMesh:
        """Each triangle split into four at its edge midpoints (the same flat surface, h/2).

        Midpoints are shared between neighbours, so a watertight mesh stays watertight and
        the result is a pure function of the input (bit-identical on repeat).
        """
        unique, _, inverse = self.edges
        v = self.vertices_m
        mid = 0.5 * (v[unique[:, 0]] + v[unique[:, 1]])
        m = (inverse + self.n_vertices).reshape(-1, 3)
        t = self.triangles
        a, b, c = t[:, 0], t[:, 1], t[:, 2]
        ab, bc, ca = m[:, 0], m[:, 1], m[:, 2]
        new = np.concatenate(
            [
                np.stack([a, ab, ca], axis=1),
                np.stack([ab, b, bc], axis=1),
                np.stack([ca, bc, c], axis=1),
                np.stack([ab, bc, ca], axis=1),
            ]
        )
        return TriangleMesh(np.concatenate([v, mid]), new, self.closed)


def merged_vertices(vertices: np.ndarray, triangles: np.ndarray, tol: float) -> TriangleMesh:
    """Weld vertices closer than ``tol`` metres (grid rounding) and drop unused ones."""
    key = np.round(np.asarray(vertices) / tol).astype(np.int64)
    _, first, inverse = np.unique(key, axis=0, return_index=True, return_inverse=True)
    inverse = inverse.reshape(-1)
    tri = inverse[np.asarray(triangles)]
    used = np.unique(tri)
    remap = np.full(len(first), -1, dtype=np.int64)
    remap[used] = np.arange(len(used))
    return TriangleMesh(np.asarray(vertices)[first[used]], remap[tri])


def concatenated(meshes: list[TriangleMesh]) -> tuple[TriangleMesh, np.ndarray]:
    """All meshes as one (closedness of the first kept) and the part index of each triangle."""
    offset = 0
    verts, tris, part = [], [], []
    for k, m in enumerate(meshes):
        verts.append(m.vertices_m)
        tris.append(m.triangles + offset)
        part.append(np.full(m.n_triangles, k, dtype=np.int64))
        offset += m.n_vertices
    mesh = TriangleMesh(np.concatenate(verts), np.concatenate(tris), meshes[0].closed)
    return mesh, np.concatenate(part)


def rotation_about_axis(axis: np.ndarray, angle_rad: float) -> np.ndarray:
    """Right-handed rotation matrix (3, 3) by ``angle_rad`` about the unit vector ``axis``."""
    k = np.asarray(axis, dtype=float)
    k = k / np.linalg.norm(k)
    kx = np.array([[0.0, -k[2], k[1]], [k[2], 0.0, -k[0]], [-k[1], k[0], 0.0]])
    return np.eye(3) + np.sin(angle_rad) * kx + (1.0 - np.cos(angle_rad)) * (kx @ kx)


def _frozen(a: np.ndarray) -> np.ndarray:
    a = np.ascontiguousarray(a)
    a.setflags(write=False)
    return a

"""The panels of one refinement level: every conductor's mesh in one set, with owners.

Unknowns are one constant charge density per flat triangle (C/m^2), collocated at the
triangle's centroid. For an open sheet that density is the sum over both faces.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np

from elopt.physics.bem3d.checks import check_above_plane, check_apart, check_surface
from elopt.physics.bem3d.layered_green import LayeredBackground, layered_background
from elopt.physics.bem3d.mesh import TriangleMesh, concatenated
from elopt.physics.bem3d.surfaces import Surface
from elopt.physics.errors import GeometryError
from elopt.physics.layout import Layout


@dataclass(frozen=True, eq=False)
class PanelSet:
    """Panels of all conductors at one level; ``owner`` (N,) is the conductor index."""

    mesh: TriangleMesh
    owner: np.ndarray
    level: int
    ground_plane: bool
    closed: tuple[bool, ...]
    smooth: tuple[bool | None, ...]
    #: Green's function of the layout's planar layers (:mod:`.layered_green`); None: homogeneous.
    background: LayeredBackground | None = None

    @property
    def n(self) -> int:
        return self.mesh.n_triangles

    @cached_property
    def sheet(self) -> np.ndarray:
        """(N,) bool: panel belongs to an open sheet."""
        return ~np.asarray(self.closed)[self.owner]

    @cached_property
    def kernel_arrays(self) -> tuple[np.ndarray, ...]:
        """(corners (N,3,3), centroids (N,3), areas (N,), diameters (N,)) as the kernels take."""
        m = self.mesh
        return (
            np.ascontiguousarray(m.corners_m),
            np.ascontiguousarray(m.centroids_m),
            np.ascontiguousarray(m.areas_m2),
            np.ascontiguousarray(m.diameters_m),
        )

    @cached_property
    def feature(self) -> np.ndarray:
        """(N,) bool: panel touches a sharp edge or an open rim of its own conductor.

        Surfaces declared smooth have none; for the others the mesh decides (dihedral angle
        above 30 degrees, or a rim edge).
        """
        out = np.zeros(self.n, dtype=bool)
        for k, m in enumerate(self._parts):
            if self.smooth[k] is not True:
                out[self.owner == k] = m.feature_panels
        return out

    @property
    def all_smooth(self) -> bool:
        """Every surface smooth (declared, or undeclared and without feature panels)."""
        return all(s is True for s in self.smooth) or not bool(np.any(self.feature))

    @cached_property
    def _parts(self) -> tuple[TriangleMesh, ...]:
        return tuple(
            TriangleMesh(self.mesh.vertices_m, self.mesh.triangles[self.owner == k], c)
            for k, c in enumerate(self.closed)
        )


def conductor_surfaces(layout: Layout) -> tuple[Surface, ...]:
    """The layout's shapes, each required to be a 3-D :class:`Surface`."""
    out = []
    for c in layout.conductors:
        if not isinstance(c.shape, Surface):
            raise GeometryError(
                f"conductor '{c.name}': the 3-D solver needs a triangle surface (elopt.physics.bem3d "
                f"Surface), got {type(c.shape).__name__}; revolve a curve with "
                "elopt.physics.bem3d.revolve.revolved_layout first"
            )
        out.append(c.shape)
    return tuple(out)


def discretise(layout: Layout, level: int, *, check: bool = True) -> PanelSet:
    """Mesh every conductor at ``level`` and (with ``check``) validate the meshes."""
    surfaces = conductor_surfaces(layout)
    meshes = [s.mesh(level) for s in surfaces]
    if check:
        names = layout.names
        for m, name in zip(meshes, names, strict=True):
            check_surface(m, name)
            if layout.ground_plane:
                check_above_plane(m, name)
        for i in range(len(meshes)):
            for j in range(i + 1, len(meshes)):
                check_apart(meshes[i], names[i], meshes[j], names[j])
    mesh, owner = concatenated(meshes)
    return PanelSet(
        background=layered_background(layout, mesh, owner),
        mesh=mesh,
        owner=owner,
        level=level,
        ground_plane=layout.ground_plane,
        closed=tuple(s.closed for s in surfaces),
        smooth=tuple(s.smooth for s in surfaces),
    )

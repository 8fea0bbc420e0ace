"""The panels of one refinement level: every conductor's and body's mesh in one set.

Unknowns are one constant charge density per flat triangle (C/m^2), collocated at the
triangle's centroid. For an open sheet that density is the sum over both faces. Conductor
panels come first (``owner`` their conductor), then the interface panels of the dielectric
bodies (``owner`` -1, ``region`` their body). Every panel knows the relative permittivity on
its normal side (``eps_front``) and on the other (``eps_back``): the medium touching a
conductor, or outside / inside a body's surface.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np

from elopt.physics.bem3d.bodies import (
    body_media,
    check_bodies,
    region_surfaces,
)
from elopt.physics.bem3d.checks import check_above_plane, check_apart, check_surface
from elopt.physics.bem3d.layered_green import (
    LayeredBackground,
    check_bodies_without_layers,
    layered_background,
)
from elopt.physics.bem3d.mesh import TriangleMesh, concatenated
from elopt.physics.bem3d.surfaces import Surface
from elopt.physics.errors import GeometryError
from elopt.physics.layout import Layout


@dataclass(frozen=True, eq=False)
class PanelSet:
    """Panels at one level; ``owner`` (N,) is the conductor index (-1 on body panels),
    ``region`` (N,) the body index (-1 on conductor panels), ``eps_front`` / ``eps_back`` (N,)
    the relative permittivities on either side, ``eps_medium`` the layout's medium (in which
    every panel's charge radiates), ``closed`` / ``smooth`` per conductor,
    ``region_smooth`` per body."""

    mesh: TriangleMesh
    owner: np.ndarray
    level: int
    ground_plane: bool
    closed: tuple[bool, ...]
    smooth: tuple[bool | None, ...]
    region: np.ndarray | None = None
    eps_front: np.ndarray | None = None
    eps_back: np.ndarray | None = None
    eps_medium: float = 1.0
    region_smooth: tuple[bool | None, ...] = ()
    #: Green's function of the layout's planar layers (:mod:`.layered_green`); None: homogeneous.
    background: LayeredBackground | None = None

    def __post_init__(self) -> None:
        n = self.mesh.n_triangles
        if self.region is None:
            object.__setattr__(self, "region", np.full(n, -1, dtype=np.int64))
        for key in ("eps_front", "eps_back"):
            if getattr(self, key) is None:
                object.__setattr__(self, key, np.full(n, float(self.eps_medium)))

    @property
    def n(self) -> int:
        return self.mesh.n_triangles

    @cached_property
    def n_conductor_panels(self) -> int:
        """Conductor panels (they come first)."""
        return int(np.count_nonzero(self.owner >= 0))

    @cached_property
    def interface(self) -> np.ndarray:
        """(N,) bool: the panel lies on a dielectric body's surface (a second-kind row)."""
        return self.region >= 0

    @cached_property
    def contrast(self) -> np.ndarray:
        """(N,) lambda = (eps_front - eps_back) / (eps_front + eps_back) (0 on conductors)."""
        out = (self.eps_front - self.eps_back) / (self.eps_front + self.eps_back)
        out[~self.interface] = 0.0
        return out

    @cached_property
    def part(self) -> np.ndarray:
        """(N,) which surface a panel belongs to: its conductor, or n_conductors + its body."""
        return np.where(self.owner >= 0, self.owner, len(self.closed) + self.region)

    @cached_property
    def sheet(self) -> np.ndarray:
        """(N,) bool: panel belongs to an open sheet."""
        out = np.zeros(self.n, dtype=bool)
        cond = self.owner >= 0
        out[cond] = ~np.asarray(self.closed)[self.owner[cond]]
        return out

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
        conductors = all(s is True for s in self.smooth) or not bool(np.any(self.feature))
        bodies = all(
            s is True or (s is None and not np.any(m.feature_panels))
            for s, m in zip(self.region_smooth, self._region_parts, strict=True)
        )
        return conductors and bodies

    @cached_property
    def _parts(self) -> tuple[TriangleMesh, ...]:
        return tuple(
            TriangleMesh(self.mesh.vertices_m, self.mesh.triangles[self.owner == k], c)
            for k, c in enumerate(self.closed)
        )

    @cached_property
    def _region_parts(self) -> tuple[TriangleMesh, ...]:
        return tuple(
            TriangleMesh(self.mesh.vertices_m, self.mesh.triangles[self.region == k], True)
            for k in range(len(self.region_smooth))
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
    """Mesh every conductor and dielectric body at ``level`` and (with ``check``) validate the
    meshes."""
    check_bodies_without_layers(layout)
    surfaces = conductor_surfaces(layout)
    bodies = region_surfaces(layout)
    meshes = [s.mesh(level) for s in surfaces]
    body_meshes = [s.mesh(level) for s in bodies]
    if check:
        names = layout.names
        for m, name in zip(meshes, names, strict=True):
            check_surface(m, name)
            if layout.ground_plane:
                check_above_plane(m, name)
        for i in range(len(meshes)):
            for j in range(i + 1, len(meshes)):
                check_apart(meshes[i], names[i], meshes[j], names[j])
        check_bodies(layout, meshes, body_meshes)
    mesh, part = concatenated(meshes + body_meshes)
    n_cond = len(meshes)
    owner = np.where(part < n_cond, part, -1)
    region = np.where(part >= n_cond, part - n_cond, -1)
    eps_front = np.full(mesh.n_triangles, float(layout.eps_r))
    eps_back = eps_front.copy()
    if body_meshes:
        media = body_media(layout, meshes, body_meshes)
        cond = owner >= 0
        eps_front[cond] = media.around_conductor[owner[cond]]
        eps_back[cond] = eps_front[cond]
        eps_front[~cond] = media.outside[region[~cond]]
        eps_back[~cond] = media.inside[region[~cond]]
    return PanelSet(
        background=layered_background(layout, mesh, owner),
        mesh=mesh,
        owner=owner,
        level=level,
        ground_plane=layout.ground_plane,
        closed=tuple(s.closed for s in surfaces),
        smooth=tuple(s.smooth for s in surfaces),
        region=region,
        eps_front=eps_front,
        eps_back=eps_back,
        eps_medium=float(layout.eps_r),
        region_smooth=tuple(s.smooth for s in bodies),
    )

"""Conductor shapes for the 3-D solver: surfaces that can be meshed at any refinement level.

A :class:`Surface` is the ``shape`` of a :class:`elopt.physics.layout.Conductor` in a 3-D layout.
``mesh(level)`` returns the triangle mesh of that level; level l + 1 halves the panel size
of level l (four times the panels), which is what the solver's h vs h/2 error estimate
compares. Generated shapes are re-meshed from their exact description at every level;
an imported mesh is refined by splitting its flat triangles (its geometry is the mesh).
Every surface is an immutable value: the same surface and level give a bit-identical mesh.
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from elopt.physics.bem3d import generators as gen
from elopt.physics.bem3d.grading import ARC_STEPS, axis_node_count
from elopt.physics.bem3d.mesh import TriangleMesh
from elopt.physics.errors import SolverError

#: Most panels one surface may be meshed with: four times the 3-D solver's own limit, so the
#: solver's level-by-level limit is the one met first in every ordinary case.
MESH_MAX_PANELS = 5_000_000


def _box_panels(nx: float, ny: float, nz: float) -> float:
    """Triangles on the six faces of an nx x ny x nz node grid."""
    return 4.0 * ((nx - 1) * (ny - 1) + (ny - 1) * (nz - 1) + (nx - 1) * (nz - 1))


def _frame_axes(
    outer_m, hole_m, h_m, level, fillet_m, grade, arc_steps=ARC_STEPS, centred=False
) -> tuple[float, float]:
    ox, oy = 0.5 * outer_m[0], 0.5 * outer_m[1]
    ix, iy = 0.5 * hole_m[0], 0.5 * hole_m[1]
    kw = {"fillet": fillet_m, "grade": grade, "arc_steps": arc_steps, "centred": centred}
    nx = axis_node_count([-ox, -ix, ix, ox], h_m, level, **kw)
    ny = axis_node_count([-oy, -iy, iy, oy], h_m, level, **kw)
    return nx, ny


class Surface(ABC):
    """A conductor surface; ``closed`` is False for an open thin sheet.

    ``smooth`` is True when the exact surface has no sharp convex edge or rim (the charge
    density is bounded and flat panels converge at second order), False when it has, and
    None when only the mesh can tell (an imported mesh: judged from its dihedral angles).
    """

    closed: bool = True
    smooth: bool | None = None

    @abstractmethod
    def build(self, level: int) -> TriangleMesh:
        """The mesh at ``level`` (not cached; call :meth:`mesh`)."""

    def estimated_panels(self, level: int) -> float:
        """About how many panels :meth:`mesh` makes at ``level``, found without meshing
        (inf when too many to count; 0 when a surface cannot say)."""
        return 0.0

    def mesh(self, level: int) -> TriangleMesh:
        """The mesh at refinement ``level`` >= 0 (cached).

        The panel count is estimated first: above :data:`MESH_MAX_PANELS` a SolverError gives
        the numbers before anything is allocated.
        """
        estimate = self.estimated_panels(int(level))
        if estimate > MESH_MAX_PANELS:
            raise SolverError(
                f"meshing this {self.describe()} at level {level} would make about "
                f"{estimate:.3g} panels; at most {MESH_MAX_PANELS:.3g} can be meshed"
            )
        return _cached_mesh(self, int(level))

    def describe(self) -> str:
        """A few words naming the shape and its mesh step, for messages."""
        h = getattr(self, "h_m", None)
        what = type(self).__name__.removesuffix("Surface").lower() or "surface"
        return what if h is None else f"{what} (panel size {h:.3g} m)"

    def transformed(
        self, rotation: np.ndarray | None = None, translation_m: np.ndarray | None = None
    ) -> TransformedSurface:
        """This surface moved rigidly: x -> R x + t."""
        r = np.eye(3) if rotation is None else np.asarray(rotation, dtype=float)
        t = np.zeros(3) if translation_m is None else np.asarray(translation_m, dtype=float)
        return TransformedSurface(self, _tuple33(r), tuple(float(x) for x in t))


@lru_cache(maxsize=24)
def _cached_mesh(surface: Surface, level: int) -> TriangleMesh:
    mesh = surface.build(level)
    if mesh.closed != surface.closed:
        mesh = TriangleMesh(mesh.vertices_m, mesh.triangles, surface.closed)
    return mesh


def _tuple33(r: np.ndarray) -> tuple[tuple[float, float, float], ...]:
    return tuple(tuple(float(x) for x in row) for row in r)


@dataclass(frozen=True, eq=False)
class MeshSurface(Surface):
    """A fixed triangle mesh (e.g. imported); levels split every triangle into four."""

    base: TriangleMesh
    closed: bool = True

    def estimated_panels(self, level: int) -> float:
        return float(self.base.n_triangles) * 4.0**level

    def build(self, level: int) -> TriangleMesh:
        m = TriangleMesh(self.base.vertices_m, self.base.triangles, self.closed)
        for _ in range(level):
            m = m.subdivided()
        return m


@dataclass(frozen=True)
class EllipsoidSurface(Surface):
    """Ellipsoid with semi-axes (a, b, c) along x, y, z (m); 20 * 4**(s + level) panels."""

    semi_axes_m: tuple[float, float, float]
    center_m: tuple[float, float, float] = (0.0, 0.0, 0.0)
    subdivisions: int = 2
    smooth = True

    def estimated_panels(self, level: int) -> float:
        return 20.0 * 4.0 ** (self.subdivisions + level)

    def build(self, level: int) -> TriangleMesh:
        return gen.ellipsoid_mesh(self.semi_axes_m, self.subdivisions + level, self.center_m)


def sphere(radius_m: float, center_m=(0.0, 0.0, 0.0), subdivisions: int = 2) -> EllipsoidSurface:
    """A sphere of ``radius_m`` (an ellipsoid with equal semi-axes)."""
    r = float(radius_m)
    return EllipsoidSurface((r, r, r), tuple(float(c) for c in center_m), subdivisions)


@dataclass(frozen=True)
class TorusSurface(Surface):
    """Ring torus about the z axis: tube centre circle ``major_radius_m``, tube radius
    ``minor_radius_m``; ``n_around`` x ``n_tube`` quads at level 0, doubled per level."""

    major_radius_m: float
    minor_radius_m: float
    center_m: tuple[float, float, float] = (0.0, 0.0, 0.0)
    n_around: int = 24
    n_tube: int = 8
    smooth = True

    def estimated_panels(self, level: int) -> float:
        return 2.0 * self.n_around * self.n_tube * 4.0**level

    def build(self, level: int) -> TriangleMesh:
        k = 2**level
        return gen.torus_mesh(
            self.major_radius_m,
            self.minor_radius_m,
            self.n_around * k,
            self.n_tube * k,
            self.center_m,
        )


@dataclass(frozen=True)
class BoxSurface(Surface):
    """Rectangular box, edge lengths ``size_m``, step ``h_m`` at level 0, edges rounded by
    ``fillet_m`` (0: sharp, steps graded toward the edges with exponent ``grade``);
    ``arc_steps``, ``secant``, ``centred`` as in :func:`elopt.physics.bem3d.generators.box_mesh`."""

    size_m: tuple[float, float, float]
    h_m: float
    center_m: tuple[float, float, float] = (0.0, 0.0, 0.0)
    fillet_m: float = 0.0
    grade: float = 2.0
    arc_steps: int = ARC_STEPS
    secant: bool = False
    centred: bool = False

    @property
    def smooth(self) -> bool:  # type: ignore[override]
        return self.fillet_m > 0

    def estimated_panels(self, level: int) -> float:
        n = [
            axis_node_count(
                [c - 0.5 * a, c + 0.5 * a],
                self.h_m,
                level,
                fillet=self.fillet_m,
                grade=self.grade,
                arc_steps=self.arc_steps,
                centred=self.centred,
            )
            for a, c in zip(self.size_m, self.center_m, strict=True)
        ]
        return _box_panels(*n)

    def build(self, level: int) -> TriangleMesh:
        return gen.box_mesh(
            self.size_m,
            self.h_m,
            level,
            center_m=self.center_m,
            fillet_m=self.fillet_m,
            grade=self.grade,
            arc_steps=self.arc_steps,
            secant=self.secant,
            centred=self.centred,
        )


@dataclass(frozen=True)
class FrameSurface(Surface):
    """Rectangular frame on the z axis: outer and hole sizes (x, y), bottom at ``z0_m``,
    ``thickness_m`` thick, convex edges rounded by ``fillet_m`` (``arc_steps``, ``secant``,
    ``centred`` as in :func:`elopt.physics.bem3d.generators.box_mesh`)."""

    outer_m: tuple[float, float]
    hole_m: tuple[float, float]
    z0_m: float
    thickness_m: float
    h_m: float
    fillet_m: float = 0.0
    grade: float = 2.0
    arc_steps: int = ARC_STEPS
    secant: bool = False
    centred: bool = False
    smooth = False

    def estimated_panels(self, level: int) -> float:
        nx, ny = _frame_axes(
            self.outer_m,
            self.hole_m,
            self.h_m,
            level,
            self.fillet_m,
            self.grade,
            self.arc_steps,
            self.centred,
        )
        nz = axis_node_count(
            [self.z0_m, self.z0_m + self.thickness_m],
            self.h_m,
            level,
            fillet=self.fillet_m,
            grade=self.grade,
            arc_steps=self.arc_steps,
        )
        return _box_panels(nx, ny, nz) + 4.0 * (nx + ny) * (nz - 1)  # + the hole's walls

    def build(self, level: int) -> TriangleMesh:
        return gen.frame_mesh(
            self.outer_m,
            self.hole_m,
            self.z0_m,
            self.thickness_m,
            self.h_m,
            level,
            fillet_m=self.fillet_m,
            grade=self.grade,
            arc_steps=self.arc_steps,
            secant=self.secant,
            centred=self.centred,
        )


@dataclass(frozen=True)
class RectangleSheetSurface(Surface):
    """Thin rectangular plate (open sheet) centred on the z axis at height ``z_m``."""

    size_m: tuple[float, float]
    z_m: float
    h_m: float
    grade: float = 2.0
    closed: bool = False
    smooth = False

    def estimated_panels(self, level: int) -> float:
        nx, ny = (
            axis_node_count([-0.5 * a, 0.5 * a], self.h_m, level, fillet=0.0, grade=self.grade)
            for a in self.size_m
        )
        return 2.0 * (nx - 1) * (ny - 1)

    def build(self, level: int) -> TriangleMesh:
        return gen.rectangle_sheet(self.size_m, self.z_m, self.h_m, level, grade=self.grade)


@dataclass(frozen=True)
class FrameSheetSurface(Surface):
    """Thin rectangular frame (open sheet with a hole) centred on the z axis at ``z_m``."""

    outer_m: tuple[float, float]
    hole_m: tuple[float, float]
    z_m: float
    h_m: float
    grade: float = 2.0
    closed: bool = False
    smooth = False

    def estimated_panels(self, level: int) -> float:
        nx, ny = _frame_axes(self.outer_m, self.hole_m, self.h_m, level, 0.0, self.grade)
        return 2.0 * (nx - 1) * (ny - 1)

    def build(self, level: int) -> TriangleMesh:
        return gen.frame_sheet(
            self.outer_m, self.hole_m, self.z_m, self.h_m, level, grade=self.grade
        )


@dataclass(frozen=True)
class TransformedSurface(Surface):
    """``base`` moved rigidly: x -> rotation @ x + translation_m."""

    base: Surface
    rotation: tuple[tuple[float, float, float], ...]
    translation_m: tuple[float, float, float]

    @property
    def closed(self) -> bool:  # type: ignore[override]
        return self.base.closed

    @property
    def smooth(self) -> bool | None:  # type: ignore[override]
        return self.base.smooth

    def estimated_panels(self, level: int) -> float:
        return self.base.estimated_panels(level)

    def describe(self) -> str:
        return self.base.describe()

    def build(self, level: int) -> TriangleMesh:
        m = self.base.mesh(level)
        return m.transformed(np.asarray(self.rotation), np.asarray(self.translation_m))

"""Import of triangle meshes from STL, OBJ and PLY files (through the ``trimesh`` library).

The file is read without any repair (trimesh ``process=False``): vertices that coincide to
within 1e-9 of the mesh size are welded (an STL stores every triangle's corners apart), and
then the mesh must pass :func:`elopt.physics.bem3d.checks.check_surface` as it is, so a broken file
is reported rather than silently patched. Files carry no unit: the caller names it.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from elopt.physics.bem3d.checks import check_surface
from elopt.physics.bem3d.mesh import TriangleMesh, merged_vertices
from elopt.physics.bem3d.surfaces import MeshSurface
from elopt.physics.errors import GeometryError

#: Length units a mesh file may be given in, as metres per unit.
LENGTH_UNITS: dict[str, float] = {"m": 1.0, "cm": 1e-2, "mm": 1e-3, "um": 1e-6, "in": 0.0254}
SUFFIXES = (".stl", ".obj", ".ply")


def load_mesh_surface(
    path: str | Path, *, length_unit: str, closed: bool = True, name: str | None = None
) -> MeshSurface:
    """Read ``path`` (STL, OBJ or PLY) in ``length_unit`` and return a checked surface.

    ``closed`` declares whether the mesh bounds a solid (True) or is an open thin sheet.
    ``name`` (default: the file name) appears in error messages.
    """
    p = Path(path)
    label = name or p.name
    if length_unit not in LENGTH_UNITS:
        raise GeometryError(
            f"mesh '{label}': length_unit {length_unit!r} is not one of {', '.join(LENGTH_UNITS)}"
        )
    if p.suffix.lower() not in SUFFIXES:
        raise GeometryError(
            f"mesh '{label}': file type {p.suffix or '(none)'} is not supported; use one of "
            f"{', '.join(SUFFIXES)}"
        )
    if not p.is_file():
        raise GeometryError(f"mesh '{label}': no such file {p}")
    vertices, faces = _read(p, label)
    scale = LENGTH_UNITS[length_unit]
    size = float(np.max(np.ptp(vertices, axis=0))) if len(vertices) else 0.0
    if not size > 0:
        raise GeometryError(
            f"mesh '{label}': the file holds no extended surface ({len(faces)} faces)"
        )
    mesh = merged_vertices(vertices * scale, faces, 1e-9 * size * scale)
    mesh = TriangleMesh(mesh.vertices_m, mesh.triangles, closed)
    check_surface(mesh, label)
    return MeshSurface(mesh, closed)


def _read(path: Path, label: str) -> tuple[np.ndarray, np.ndarray]:
    try:
        import trimesh
    except ImportError:
        raise GeometryError(
            f"mesh '{label}': reading mesh files needs the trimesh package "
            "(pip install 'elopt[mesh]')"
        ) from None
    try:
        loaded = trimesh.load(str(path), force="mesh", process=False)
    except Exception as exc:  # trimesh raises many types for malformed files
        raise GeometryError(f"mesh '{label}': cannot read {path.name}: {exc}") from None
    vertices = np.asarray(getattr(loaded, "vertices", np.zeros((0, 3))), dtype=float)
    faces = np.asarray(getattr(loaded, "faces", np.zeros((0, 3))), dtype=np.int64)
    if faces.ndim != 2 or faces.shape[1] != 3 or len(faces) == 0:
        raise GeometryError(f"mesh '{label}': {path.name} holds no triangles")
    return vertices, faces

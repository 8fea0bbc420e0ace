"""Import of triangle meshes from STL (read here), OBJ and PLY files (through ``trimesh``).

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
_STL_HEADER = 80
_STL_RECORD = 50  # normal, three corners (12 float32) and a 2-byte attribute count


def read_stl(path: Path, label: str) -> tuple[np.ndarray, np.ndarray]:
    """Corners (3T, 3) and triangles (T, 3) of a binary or ASCII STL file (unit as stored).

    STL is simple enough to read without an optional package, so that a damaged file is
    reported as what it is: a binary file must be 84 + 50 T bytes for the T triangles its
    header declares; an ASCII file starts with ``solid`` and lists ``vertex x y z`` lines,
    three per facet.
    """
    raw = path.read_bytes()
    if len(raw) >= _STL_HEADER + 4:
        declared = int(np.frombuffer(raw, "<u4", 1, _STL_HEADER)[0])
        if len(raw) == _STL_HEADER + 4 + _STL_RECORD * declared:
            rec = np.dtype([("n", "<f4", 3), ("v", "<f4", (3, 3)), ("a", "<u2")])
            v = np.frombuffer(raw, rec, declared, _STL_HEADER + 4)["v"].astype(float)
            return _stl_arrays(v.reshape(-1, 3), label, path)
    if raw.lstrip().startswith(b"solid"):
        return _read_ascii_stl(raw, label, path)
    if len(raw) >= _STL_HEADER + 4:
        binary = (
            f"its header declares {declared} triangles, which take "
            f"{_STL_HEADER + 4 + _STL_RECORD * declared} bytes as binary STL"
        )
    else:
        binary = f"a binary STL takes at least {_STL_HEADER + 4} bytes"
    raise GeometryError(
        f"mesh '{label}': {path.name} is not an STL file: it is {len(raw)} bytes long but "
        f"{binary}, and it does not start with 'solid' as ASCII STL does"
    )


def _read_ascii_stl(raw: bytes, label: str, path: Path) -> tuple[np.ndarray, np.ndarray]:
    corners = []
    for number, line in enumerate(raw.decode("ascii", errors="replace").splitlines(), 1):
        words = line.split()
        if not words or words[0] != "vertex":
            continue
        try:
            xyz = [float(w) for w in words[1:]]
        except ValueError:
            xyz = []
        if len(xyz) != 3:
            raise GeometryError(
                f"mesh '{label}': {path.name} line {number}: expected 'vertex x y z', got "
                f"{line.strip()[:60]!r}"
            )
        corners.append(xyz)
    if len(corners) % 3:
        raise GeometryError(
            f"mesh '{label}': {path.name} lists {len(corners)} vertices; every facet has three"
        )
    return _stl_arrays(np.asarray(corners, dtype=float).reshape(-1, 3), label, path)


def _stl_arrays(corners: np.ndarray, label: str, path: Path) -> tuple[np.ndarray, np.ndarray]:
    if len(corners) == 0:
        raise GeometryError(f"mesh '{label}': {path.name} holds no triangles")
    if not np.all(np.isfinite(corners)):
        raise GeometryError(f"mesh '{label}': {path.name} has non-finite vertex coordinates")
    return corners, np.arange(len(corners), dtype=np.int64).reshape(-1, 3)


def load_mesh_surface(
    path: str | Path,
    *,
    length_unit: str,
    closed: bool = True,
    name: str | None = None,
    max_triangles: int | None = None,
) -> MeshSurface:
    """Read ``path`` (STL, OBJ or PLY) in ``length_unit`` and return a checked surface.

    ``closed`` declares whether the mesh bounds a solid (True) or is an open thin sheet.
    ``name`` (default: the file name) appears in error messages. A file of more than
    ``max_triangles`` triangles (None: no limit) is refused before the (costly) checks.
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
    if max_triangles is not None and len(faces) > max_triangles:
        raise GeometryError(
            f"mesh '{label}': the file {p} has {len(faces)} triangles, more than the "
            f"{max_triangles} a solve can take (each refinement level multiplies them by 4); "
            "coarsen that mesh"
        )
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
    if path.suffix.lower() == ".stl":
        return read_stl(path, label)
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

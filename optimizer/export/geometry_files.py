"""A layout's conductors as CAD files in millimetres: DXF profiles and ASCII STL surfaces.

Bodies of revolution are given by their generating curve in the (r, z) half-plane: the DXF
draws it with r as x and z as y (straight pieces as LINE, circular ones as ARC, other pieces
as chains of short LINEs), one layer per conductor and the axis of revolution on layer AXIS.
STL takes the surface: a 3-D conductor's panel mesh, or a body of revolution revolved about
the z axis.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from elopt.optimizer.errors import ConfigError
from elopt.optimizer.export.dxf import DxfArc, DxfLine, dxf_text
from elopt.physics.geometry import Arc, Curve, Segment
from elopt.physics.layout import Layout

MM_PER_M = 1e3
GEOMETRY_SUFFIXES = (".dxf", ".stl")
#: Chords per non-circular curve piece in the DXF, and per piece of a revolved profile.
CHORDS_PER_PIECE = 32
#: Steps around the axis of a revolved profile (3.75 degrees each).
REVOLVE_STEPS = 96
#: Refinement level of a 3-D conductor's panel mesh written to STL.
STL_MESH_LEVEL = 1


def write_geometry(layout: Layout, path: Path) -> str:
    """Write ``layout``'s conductors to ``path`` (.dxf or .stl); a one-line description."""
    suffix = path.suffix.lower()
    if suffix not in GEOMETRY_SUFFIXES:
        raise ConfigError(
            f"--geometry {path}: the file name must end in {' or '.join(GEOMETRY_SUFFIXES)}"
        )
    curves = all(isinstance(c.shape, Curve) for c in layout.conductors)
    if suffix == ".dxf":
        if not curves:
            raise ConfigError(
                f"--geometry {path}: a 3-D design has no generating profile; write .stl instead"
            )
        entities = profile_entities(layout)
        path.write_text(dxf_text(entities), encoding="ascii")
        return f"generating profile (r as x, z as y, mm), {len(entities)} DXF entities"
    solids = [
        (c.name, revolved_triangles(c.shape) if curves else mesh_triangles(c.shape))
        for c in layout.conductors
    ]
    path.write_text(stl_text(solids), encoding="ascii")
    n = sum(len(t) for _, t in solids)
    what = "revolved surfaces" if curves else "panel surfaces"
    return f"{what} in mm, {n} triangles in {len(solids)} solids"


def profile_entities(layout: Layout) -> list[DxfLine | DxfArc]:
    """DXF entities (mm) of every conductor's generating curve, and the axis r = 0."""
    out: list[DxfLine | DxfArc] = []
    z_all = []
    for c in layout.conductors:
        for piece in c.shape.pieces:
            out += _piece_entities(piece, c.name)
        z_all.append(c.shape.sample(4)[:, 1])
    z = np.concatenate(z_all) * MM_PER_M
    out.append(DxfLine("AXIS", (0.0, float(z.min())), (0.0, float(z.max()))))
    return out


def _piece_entities(piece, layer: str) -> list[DxfLine | DxfArc]:
    if isinstance(piece, Segment):
        return [DxfLine(layer, _mm(piece.start), _mm(piece.end))]
    if isinstance(piece, Arc):
        a0, a1 = math.degrees(piece.start_angle), math.degrees(piece.end_angle)
        lo, hi = (a0, a1) if a1 >= a0 else (a1, a0)  # DXF arcs run counter-clockwise
        return [DxfArc(layer, _mm(piece.center), piece.radius * MM_PER_M, lo, hi)]
    pts = piece.points(np.linspace(-1.0, 1.0, CHORDS_PER_PIECE + 1)) * MM_PER_M
    return [DxfLine(layer, tuple(p), tuple(q)) for p, q in zip(pts[:-1], pts[1:], strict=True)]


def _mm(p) -> tuple[float, float]:
    return (float(p[0]) * MM_PER_M, float(p[1]) * MM_PER_M)


def revolved_triangles(curve: Curve) -> np.ndarray:
    """(T, 3, 3) triangles in mm of ``curve`` revolved about the z axis (none degenerate)."""
    prof = curve.sample(CHORDS_PER_PIECE) * MM_PER_M
    phi = np.linspace(0.0, 2.0 * math.pi, REVOLVE_STEPS + 1)[:-1]
    ring = np.stack(
        [
            prof[:, None, 0] * np.cos(phi),
            prof[:, None, 0] * np.sin(phi),
            np.repeat(prof[:, 1:2], len(phi), 1),
        ],
        axis=-1,
    )  # (P, S, 3)
    nxt = np.roll(np.arange(len(phi)), -1)
    a, b = ring[:-1], ring[:-1][:, nxt]
    c, d = ring[1:], ring[1:][:, nxt]
    tris = np.concatenate([np.stack([a, c, b], axis=2), np.stack([b, c, d], axis=2)])
    tris = tris.reshape(-1, 3, 3)
    area = 0.5 * np.linalg.norm(np.cross(tris[:, 1] - tris[:, 0], tris[:, 2] - tris[:, 0]), axis=1)
    return tris[area > 1e-12 * max(float(np.ptp(prof)), 1e-9) ** 2]


def mesh_triangles(surface) -> np.ndarray:
    """(T, 3, 3) triangles in mm of a 3-D conductor's panel mesh."""
    mesh = surface.mesh(STL_MESH_LEVEL)
    return np.asarray(mesh.vertices_m)[np.asarray(mesh.triangles)] * MM_PER_M


def stl_text(solids: list[tuple[str, np.ndarray]]) -> str:
    """ASCII STL with one ``solid`` block per (name, (T, 3, 3) triangles) pair."""
    out = []
    for name, tris in solids:
        out.append(f"solid {name}\n")
        n = np.cross(tris[:, 1] - tris[:, 0], tris[:, 2] - tris[:, 0])
        n /= np.maximum(np.linalg.norm(n, axis=1, keepdims=True), 1e-300)
        for normal, tri in zip(n, tris, strict=True):
            out.append(f"  facet normal {normal[0]:.6e} {normal[1]:.6e} {normal[2]:.6e}\n")
            out.append("    outer loop\n")
            for v in tri:
                out.append(f"      vertex {v[0]:.9g} {v[1]:.9g} {v[2]:.9g}\n")
            out.append("    endloop\n  endfacet\n")
        out.append(f"endsolid {name}\n")
    return "".join(out)

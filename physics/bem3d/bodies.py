"""Bounded dielectric bodies of a 3-D layout: their surfaces, their checks and their media.

A :class:`~elopt.physics.media.DielectricRegion` in 3-D has a closed, outward-oriented,
manifold triangle surface (a :class:`~elopt.physics.bem3d.surfaces.Surface`) as its shape and
fills what that surface encloses, except the conductors inside it: a body may enclose
conductors (a coating or a potting) and other bodies (nested: the inner body replaces the
outer one inside its surface). Surfaces never cross or touch one another, a conductor or the
ground plane, so every interface panel has one medium inside (the body's) and one outside
(the innermost other body around it, or the layout's medium), and every conductor one medium
around it. A conductor that pierces a body's surface cannot be described this way and is
refused.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from elopt.physics.bem3d.checks import (
    _first_intersection,
    _where,
    check_above_plane,
    check_surface,
    winding_number,
)
from elopt.physics.bem3d.mesh import TriangleMesh
from elopt.physics.bem3d.surfaces import Surface
from elopt.physics.errors import GeometryError
from elopt.physics.layout import Layout


@dataclass(frozen=True)
class BodyMedia:
    """Relative permittivities: around each conductor (n,), inside (R,) and just outside (R,)
    each body's surface."""

    around_conductor: np.ndarray
    inside: np.ndarray
    outside: np.ndarray


def region_surfaces(layout: Layout) -> tuple[Surface, ...]:
    """The layout's dielectric bodies' shapes, each required to be a closed 3-D Surface."""
    out = []
    names = [r.name for r in layout.regions]
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        raise GeometryError(f"layout: region names must be unique, repeated: {dup}")
    for r in layout.regions:
        if not isinstance(r.shape, Surface):
            raise GeometryError(
                f"region '{r.name}': the 3-D solver needs a closed triangle surface "
                f"(elopt.physics.bem3d Surface), got {type(r.shape).__name__}"
            )
        if not r.shape.closed:
            raise GeometryError(
                f"region '{r.name}': a dielectric body needs a closed surface, got an open sheet "
                "(closed = false); close the mesh"
            )
        out.append(r.shape)
    return tuple(out)


def check_layers_absent(layout: Layout) -> None:
    """Planar layers are not part of the 3-D bounded-body formulation."""
    if layout.layers:
        names = ", ".join(f"'{ly.name}'" for ly in layout.layers)
        raise GeometryError(
            f"layout: planar layers ({names}) are not supported by the 3-D solver; give a "
            "bounded body (region) instead"
        )


def check_bodies(
    layout: Layout, conductor_meshes: list[TriangleMesh], region_meshes: list[TriangleMesh]
) -> None:
    """Raise one GeometryError line for a body surface that breaks a rule of the module text."""
    cnames = layout.names
    rnames = [r.name for r in layout.regions]
    for mesh, name in zip(region_meshes, rnames, strict=True):
        check_surface(mesh, name, "region")
        if layout.ground_plane:
            check_above_plane(mesh, name, "region")
    for i, (a, na) in enumerate(zip(region_meshes, rnames, strict=True)):
        for b, nb in zip(region_meshes[i + 1 :], rnames[i + 1 :], strict=True):
            hit = _first_intersection(a, b, same=False)
            if hit is not None:
                raise GeometryError(
                    f"regions '{na}' and '{nb}' intersect near {_where(hit)}; body surfaces "
                    "must be apart (one may enclose the other)"
                )
        for c, nc in zip(conductor_meshes, cnames, strict=True):
            hit = _first_intersection(a, c, same=False)
            if hit is not None:
                raise GeometryError(
                    f"region '{na}' and conductor '{nc}' intersect near {_where(hit)}; a "
                    "conductor must lie wholly inside or wholly outside a body, apart from its "
                    "surface"
                )
            if c.closed and abs(winding_number(c, a.vertices_m[:1])[0]) > 0.5:
                raise GeometryError(
                    f"region '{na}' lies inside conductor '{nc}' (vertex at "
                    f"{_where(a.vertices_m[0])}); a body inside a conductor carries no field"
                )


def body_media(
    layout: Layout, conductor_meshes: list[TriangleMesh], region_meshes: list[TriangleMesh]
) -> BodyMedia:
    """The media around conductors and bodies (checked surfaces: apart, closed, outward)."""
    eps = np.array([r.eps_r for r in layout.regions], dtype=float)
    volume = np.array([m.volume_m3 for m in region_meshes], dtype=float)

    def around(point: np.ndarray, skip: int) -> float:
        inside = [
            k
            for k, m in enumerate(region_meshes)
            if k != skip and abs(winding_number(m, point[None])[0]) > 0.5
        ]
        if not inside:
            return float(layout.eps_r)
        return float(eps[min(inside, key=lambda k: volume[k])])

    cond = np.array([around(m.vertices_m[0], -1) for m in conductor_meshes])
    outside = np.array([around(m.vertices_m[0], k) for k, m in enumerate(region_meshes)])
    return BodyMedia(cond, eps, outside)

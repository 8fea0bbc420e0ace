"""Bounded dielectric regions of the 2-D solver (bound-charge second-kind formulation).

A region is a closed :class:`~elopt.physics.bem2d.shapes.Bar` outline (a rectangle, rounded up
to a circle) of permittivity eps_in, lying inside one slab of the layer stack (background
eps_b). Its boundary carries a density q (C/m^2) radiating through the same layered kernel as
the conductors' (which includes 1/eps_b), so the potential is one single layer over every
curve. With n the outward normal, E^+- the normal fields just outside / inside and
E^PV = (E^+ + E^-)/2, the jump eps_b (E^+ - E^-) = q and no free charge,
eps_b E^+ = eps_in E^-, give the second-kind equation

    q - 2 eps_b lambda E^PV[q] = 2 eps_b lambda E0 n_z,   lambda = (eps_in - eps_b)/(eps_in + eps_b)

(E0 the applied field along +z). E^PV is the central difference of the potential across the
curve, extrapolated from steps d and 2d (d = ``PV_STEP`` panel half-lengths) to remove its
O(d) part. A conductor inside a region touches eps_in: its free charge is (eps_in / eps_b) q.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from elopt.physics.bem2d.layered_green import Slabs
from elopt.physics.bem2d.shapes import Bar, sample_pieces
from elopt.physics.errors import GeometryError
from elopt.physics.layout import EPS0_F_PER_M, Layout

#: Offset (panel half-lengths) of the potential differences that give E^PV: small enough that
#: the O(d^2) rest after extrapolation is ~1e-10, large enough against cancellation.
PV_STEP = 1e-4


@dataclass(frozen=True)
class Region2D:
    """One validated region: name, outline (Bar), eps inside and of the background (F/m)."""

    name: str
    shape: Bar
    eps_in: float
    eps_b: float

    @property
    def contrast(self) -> float:
        """lambda = (eps_in - eps_b) / (eps_in + eps_b)."""
        return (self.eps_in - self.eps_b) / (self.eps_in + self.eps_b)


def _inside(outline: np.ndarray, pts: np.ndarray) -> np.ndarray:
    """Points (M, 2) strictly inside the closed polygon ``outline`` (K, 2) (even-odd rule)."""
    x, z = pts[:, 0][:, None], pts[:, 1][:, None]
    x0, z0 = outline[:-1, 0][None, :], outline[:-1, 1][None, :]
    x1, z1 = outline[1:, 0][None, :], outline[1:, 1][None, :]
    cross = (z0 > z) != (z1 > z)
    with np.errstate(divide="ignore", invalid="ignore"):
        xc = x0 + (z - z0) * (x1 - x0) / (z1 - z0)
    return (np.sum(cross & (x < xc), axis=1) % 2) == 1


def _outline(shape: Bar) -> np.ndarray:
    pts = sample_pieces(shape.pieces(), 400)
    return np.vstack([pts, pts[:1]])


def _distance(a: np.ndarray, b: np.ndarray) -> float:
    """Smallest distance (m) between two point clouds (M, 2), (K, 2)."""
    d = a[:, None, :] - b[None, :, :]
    return float(np.sqrt(np.min(np.sum(d * d, axis=2))))


def check_regions(
    layout: Layout, slabs: Slabs, period_m: float | None
) -> tuple[tuple[Region2D, ...], tuple[int, ...], list[float]]:
    """Validate ``layout.regions`` for the 2-D solver.

    Returns the regions, the region holding each conductor (-1: none) and mesh-size caps (m)
    from the regions' sizes and their distances to conductors and each other.
    """
    if not layout.regions:
        return (), (-1,) * len(layout.conductors), []
    regions: list[Region2D] = []
    outlines = []
    caps: list[float] = []
    for reg in layout.regions:
        shape = reg.shape
        if not isinstance(shape, Bar):
            raise GeometryError(
                f"region '{reg.name}': the 2-D solver takes a Bar outline (rectangle, corners "
                f"rounded up to a circle), got {type(shape).__name__}"
            )
        shape.validate(f"region {reg.name}")
        x0, x1, z0, z1 = shape.bounds
        if layout.ground_plane and z0 <= 0.0:
            raise GeometryError(
                f"region '{reg.name}': touches or crosses the ground plane (z from {z0:g} m); "
                "every point must have z > 0"
            )
        lo = int(slabs.index(np.array([z0]))[0])
        if not (z0 > slabs.bottom_m[lo] and z1 < slabs.top_m[lo]):
            face = slabs.bottom_m[lo] if z0 <= slabs.bottom_m[lo] else slabs.top_m[lo]
            raise GeometryError(
                f"region '{reg.name}': spans z = {z0:g} .. {z1:g} m, reaching the layer interface "
                f"at z = {face:g} m; a region must lie strictly inside one layer"
            )
        if period_m is not None and x1 - x0 >= period_m:
            raise GeometryError(
                f"region '{reg.name}': width {x1 - x0:g} m must be less than the period "
                f"{period_m:g} m"
            )
        eps_b = float(slabs.eps_F_per_m[lo])
        regions.append(Region2D(reg.name, shape, reg.eps_r * EPS0_F_PER_M, eps_b))
        outlines.append(_outline(shape))
        caps.append(0.5 * max(x1 - x0, z1 - z0))
    shifts = (0.0,) if period_m is None else (-period_m, 0.0, period_m)
    for a in range(len(regions)):
        for b in range(a + 1, len(regions)):
            for s in shifts:
                ob = outlines[b] + np.array([s, 0.0])
                if (
                    _inside(outlines[a], ob).any()
                    or _inside(ob, outlines[a]).any()
                    or _distance(outlines[a], ob) <= 1e-9 * caps[a]
                ):
                    raise GeometryError(
                        f"regions '{regions[a].name}' and '{regions[b].name}' overlap or touch; "
                        "regions must be apart"
                    )
            caps.append(2.0 * _distance(outlines[a], outlines[b]))
    holder = []
    for c in layout.conductors:
        pts = c.shape.sample(200)
        home = -1
        for r, (reg, out) in enumerate(zip(regions, outlines, strict=True)):
            for s in shifts:
                shifted = out + np.array([s, 0.0])
                inside = _inside(shifted, pts)
                gap = _distance(shifted, pts)
                if gap <= 1e-9 * caps[r] or (inside.any() and not inside.all()):
                    raise GeometryError(
                        f"conductor '{c.name}' overlaps or touches the boundary of region "
                        f"'{reg.name}' (gap {gap:.3g} m); a conductor must lie wholly inside or "
                        "wholly outside a region, apart from its boundary"
                    )
                if inside.all():
                    home = r
                caps.append(2.0 * gap)
        holder.append(home)
    return tuple(regions), tuple(holder), caps


def region_rows(
    regions: tuple[Region2D, ...],
    owner: np.ndarray,
    n_conductors: int,
    normals: np.ndarray,
    applied_field_V_per_m: float,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """For the region nodes: their indices (R,), 2 eps_b lambda (R,) and the applied-field
    right-hand side 2 eps_b lambda E0 n_z (R,)."""
    rows = np.nonzero(owner >= n_conductors)[0]
    reg = owner[rows] - n_conductors
    coef = np.array([2.0 * regions[r].eps_b * regions[r].contrast for r in reg])
    rhs = coef * applied_field_V_per_m * normals[rows].imag
    return rows, coef, rhs


def pv_points(points: np.ndarray, normals: np.ndarray, half: np.ndarray) -> np.ndarray:
    """Targets (4R,) x + d n, x - d n, x + 2d n, x - 2d n with d = PV_STEP * half."""
    d = PV_STEP * half * normals
    return np.concatenate([points + d, points - d, points + 2 * d, points - 2 * d])


def pv_from_potentials(a: np.ndarray, half: np.ndarray) -> np.ndarray:
    """E^PV matrix (R, N) from potential rows (4R, N) at :func:`pv_points`."""
    r = len(half)
    up, dn, up2, dn2 = a[:r], a[r : 2 * r], a[2 * r : 3 * r], a[3 * r :]
    d = (PV_STEP * half)[:, None]
    return (4.0 * (dn - up) - (dn2 - up2)) / (4.0 * d)


def free_factor(
    regions: tuple[Region2D, ...], holder: tuple[int, ...], owner: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Per node (N,): free / background charge ratio eps_in / eps_b on conductors inside a
    region (1 elsewhere), and the permittivity touching them (nan: take the layer's)."""
    factor = np.ones(len(owner))
    eps = np.full(len(owner), math.nan)
    for k, r in enumerate(holder):
        if r < 0:
            continue
        sel = owner == k
        factor[sel] = regions[r].eps_in / regions[r].eps_b
        eps[sel] = regions[r].eps_in
    return factor, eps

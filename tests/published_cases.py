"""The published cases the solvers are checked against, each buildable for either solver.

A case is one conductor whose capacitance (and, where the surface is smooth, peak surface
field) is known from docs/references.md; ``layout(solver)`` builds it for "axi" (generating
curves) or "3d" (triangle surfaces). Used by the conformance suite, the error-estimate honesty
test and tests/benchmarks/measure_error_estimate.py. ``COVERED_CASES`` are pairs (a driven pad
beside a grounded target) whose layouts' error estimate covers the pad only, with the
published C_pad,pad (tests/test_error_estimate_honesty_covered.py).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import reference_values as ref

from elopt.physics import geometry as geo
from elopt.physics.bem3d import BoxSurface, EllipsoidSurface, RevolvedSurface
from elopt.physics.bem3d import sphere as sphere_surface
from elopt.physics.layout import EPS0_F_PER_M, Layout, driven, floating


@dataclass(frozen=True)
class PublishedCase:
    """``capacitance_F``: reference C_00; ``peak_V_per_m``: reference peak surface field at
    the layout's excitation (None: none, or singular); ``item``: docs/references.md item."""

    name: str
    item: int
    build: Callable[[str], Layout]
    capacitance_F: float
    peak_V_per_m: float | None
    solvers: tuple[str, ...]

    def layout(self, solver: str) -> Layout:
        return self.build(solver)


def _body(name: str, curve: geo.Curve, surface_3d, volts: float = 1.0):
    def build(solver: str) -> Layout:
        shape = curve if solver == "axi" else surface_3d
        return Layout((driven(name, shape, volts),))

    return build


def _sphere_over_plane(h_over_r: float, h_3d: float) -> Callable[[str], Layout]:
    def build(solver: str) -> Layout:
        curve = geo.sphere(1.0, center_z=h_over_r)
        shape = curve if solver == "axi" else RevolvedSurface(curve, h_3d)
        return Layout((driven("ball", shape, 1.0),), ground_plane=True)

    return build


def _disk_over_plane(k: float, h_3d: float) -> Callable[[str], Layout]:
    # One disk of the coaxial pair at +V/2, its partner being the image in the plane.
    def build(solver: str) -> Layout:
        curve = geo.disk(1.0, 0.5 * k)
        shape = curve if solver == "axi" else RevolvedSurface(curve, h_3d)
        return Layout((driven("disk", shape, 0.5),), ground_plane=True)

    return build


def _sphere_in_field(solver: str) -> Layout:
    shape = geo.sphere(1.0) if solver == "axi" else sphere_surface(1.0, subdivisions=2)
    return Layout((floating("ball", shape, 0.0),), applied_field_V_per_m=1.0)


def _disk(solver: str) -> Layout:
    shape = geo.disk(1.0) if solver == "axi" else RevolvedSurface(geo.disk(1.0), 0.2)
    return Layout((driven("disk", shape, 1.0),))


def _cube(solver: str) -> Layout:
    return Layout((driven("cube", BoxSurface((1.0, 1.0, 1.0), 0.5, grade=2.0), 1.0),))


def _triaxial(solver: str) -> Layout:
    return Layout((driven("e", EllipsoidSurface((3.0, 2.0, 1.0), subdivisions=2), 1.0),))


BOTH = ("axi", "3d")

CASES: tuple[PublishedCase, ...] = (
    PublishedCase(
        "sphere",
        1,
        _body("ball", geo.sphere(1.0), sphere_surface(1.0, subdivisions=1)),
        ref.sphere_capacitance_F(1.0),
        1.0,
        BOTH,
    ),
    PublishedCase(
        "prolate spheroid 2:1",
        3,
        _body("body", geo.spheroid(1.0, 2.0), EllipsoidSurface((1.0, 1.0, 2.0), subdivisions=1)),
        ref.ellipsoid_capacitance_F(1.0, 1.0, 2.0),
        ref.ellipsoid_peak_field_V_per_m((1.0, 1.0, 2.0), 1.0),
        BOTH,
    ),
    PublishedCase(
        "oblate spheroid 1:0.5",
        3,
        _body("body", geo.spheroid(1.0, 0.5), EllipsoidSurface((1.0, 1.0, 0.5), subdivisions=1)),
        ref.ellipsoid_capacitance_F(1.0, 1.0, 0.5),
        ref.ellipsoid_peak_field_V_per_m((1.0, 1.0, 0.5), 1.0),
        BOTH,
    ),
    PublishedCase(
        "prolate spheroid 10:1",
        3,
        _body("body", geo.spheroid(1.0, 10.0), None),
        ref.ellipsoid_capacitance_F(1.0, 1.0, 10.0),
        ref.ellipsoid_peak_field_V_per_m((1.0, 1.0, 10.0), 1.0),
        ("axi",),
    ),
    PublishedCase(
        "triaxial ellipsoid 3:2:1",
        3,
        _triaxial,
        ref.ellipsoid_capacitance_F(3.0, 2.0, 1.0),
        ref.ellipsoid_peak_field_V_per_m((3.0, 2.0, 1.0), 1.0),
        ("3d",),
    ),
    PublishedCase("thin disk", 2, _disk, ref.disk_capacitance_F(1.0), None, BOTH),
    PublishedCase(
        "sphere over plane, h/R = 1.5",
        6,
        _sphere_over_plane(1.5, 0.3),
        ref.sphere_above_plane_capacitance_F(1.0, 1.5),
        None,
        BOTH,
    ),
    PublishedCase(
        "sphere over plane, h/R = 1.1",
        6,
        _sphere_over_plane(1.1, 0.2),
        ref.sphere_above_plane_capacitance_F(1.0, 1.1),
        None,
        ("axi",),
    ),
    PublishedCase(
        "coaxial disks, d/R = 1",
        7,
        _disk_over_plane(1.0, 0.2),
        2.0 * ref.love_disk_pair_capacitance(1.0) * EPS0_F_PER_M,
        None,
        BOTH,
    ),
    PublishedCase(
        "coaxial disks, d/R = 0.1",
        7,
        _disk_over_plane(0.1, 0.1),
        2.0 * ref.love_disk_pair_capacitance(0.1) * EPS0_F_PER_M,
        None,
        ("axi",),
    ),
    PublishedCase(
        "sphere in uniform field",
        9,
        _sphere_in_field,
        ref.sphere_capacitance_F(1.0),
        ref.SPHERE_IN_FIELD_ENHANCEMENT,
        BOTH,
    ),
    PublishedCase(
        "unit cube",
        4,
        _cube,
        ref.CUBE_C_OVER_4PI_EPS0_A * ref.FOUR_PI_EPS0,
        None,
        ("3d",),
    ),
)


def cases_for(solver: str) -> tuple[PublishedCase, ...]:
    return tuple(c for c in CASES if solver in c.solvers)


# ---------------------------------------------------------------- estimates of some entries
# Two conductors, the first driven ("pad"), the second grounded ("target"); each layout's
# error estimate covers the pad only (Layout.estimate_covers), and ``capacitance_F`` is the
# reference of that covered entry C_pad,pad.


def _disk_with_grounded_disk(k: float, h_3d: float) -> Callable[[str], Layout]:
    def build(solver: str) -> Layout:
        pad, target = geo.disk(1.0, 0.0), geo.disk(1.0, k)
        if solver != "axi":
            pad, target = RevolvedSurface(pad, h_3d), RevolvedSurface(target, h_3d)
        return Layout(
            (driven("pad", pad, 1.0), driven("target", target, 0.0)), estimate_covers=("pad",)
        )

    return build


def _sphere_with_grounded_sphere(b: float, c: float, h_3d: float) -> Callable[[str], Layout]:
    def build(solver: str) -> Layout:
        pad, target = geo.sphere(1.0), geo.sphere(b, center_z=c)
        if solver != "axi":
            pad, target = RevolvedSurface(pad, h_3d), RevolvedSurface(target, b * h_3d)
        return Layout(
            (driven("pad", pad, 1.0), driven("target", target, 0.0)), estimate_covers=("pad",)
        )

    return build


COVERED_CASES: tuple[PublishedCase, ...] = (
    PublishedCase(
        "disk, grounded coaxial disk at d/R = 1",
        7,
        _disk_with_grounded_disk(1.0, 0.5),
        ref.love_disk_pair_coefficients(1.0)[0] * EPS0_F_PER_M,
        None,
        BOTH,
    ),
    PublishedCase(
        "disk, grounded coaxial disk at d/R = 0.1",
        7,
        _disk_with_grounded_disk(0.1, 0.1),
        ref.love_disk_pair_coefficients(0.1)[0] * EPS0_F_PER_M,
        None,
        ("axi",),
    ),
    PublishedCase(
        "sphere, grounded sphere 0.25 R at gap 0.1 R",
        21,
        _sphere_with_grounded_sphere(0.25, 1.35, 0.2),
        ref.two_sphere_coefficients(1.0, 0.25, 1.35)[0],
        None,
        ("axi",),
    ),
    PublishedCase(
        "sphere, grounded sphere 0.5 R at gap 0.5 R",
        21,
        _sphere_with_grounded_sphere(0.5, 2.0, 0.45),
        ref.two_sphere_coefficients(1.0, 0.5, 2.0)[0],
        None,
        BOTH,
    ),
)


def covered_cases_for(solver: str) -> tuple[PublishedCase, ...]:
    return tuple(c for c in COVERED_CASES if solver in c.solvers)

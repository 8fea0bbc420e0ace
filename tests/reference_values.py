"""Published reference values and formulas: the one place tests take them from.

Every entry names its item in docs/references.md (the project's published-values sheet),
which gives the source and how sure the citation is. The formulas ``elopt check`` needs at run
time live in :mod:`elopt.physics.validation` and are re-exported here.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.special import elliprf

from elopt.physics.layout import EPS0_F_PER_M
from elopt.physics.validation import (
    kirchhoff_disk_pair_capacitance,
    love_disk_pair_capacitance,
    love_integral,
    sphere_above_plane_series,
)

__all__ = [
    "CUBE_C_OVER_4PI_EPS0_A",
    "CUBE_UNCERTAINTY",
    "EPS0_F_PER_M",
    "FOUR_PI_EPS0",
    "disk_capacitance_F",
    "disk_density_C_per_m2",
    "ellipsoid_capacitance_F",
    "ellipsoid_density_C_per_m2",
    "ellipsoid_peak_field_V_per_m",
    "kirchhoff_disk_pair_capacitance",
    "love_disk_pair_capacitance",
    "love_disk_pair_coefficients",
    "sphere_above_plane_capacitance_F",
    "sphere_above_plane_series",
    "sphere_capacitance_F",
    "sphere_in_field_density_C_per_m2",
    "two_sphere_coefficients",
    "two_sphere_images",
    "SPHERE_IN_FIELD_ENHANCEMENT",
]

FOUR_PI_EPS0 = 4.0 * math.pi * EPS0_F_PER_M

#: Unit cube, C / (4 pi eps0 a) (docs/references.md item 4: Hwang & Mascagni 2004) and its
#: stated uncertainty.
CUBE_C_OVER_4PI_EPS0_A = 0.6606782
CUBE_UNCERTAINTY = 1e-7

#: Peak surface field over the applied field on a conducting sphere in a uniform field
#: (docs/references.md item 9: Jackson sec. 2.5).
SPHERE_IN_FIELD_ENHANCEMENT = 3.0


def sphere_capacitance_F(radius_m: float) -> float:
    """C = 4 pi eps0 R; sigma = eps0 V / R, surface field V / R (docs/references.md item 1)."""
    return FOUR_PI_EPS0 * radius_m


def disk_capacitance_F(radius_m: float) -> float:
    """Thin disk: C = 8 eps0 R (docs/references.md item 2)."""
    return 8.0 * EPS0_F_PER_M * radius_m


def disk_density_C_per_m2(r_m: np.ndarray, radius_m: float, volts: float = 1.0) -> np.ndarray:
    """Thin disk, density summed over both faces, 4 eps0 V / (pi sqrt(R^2 - r^2)), half on
    each face (docs/references.md item 2)."""
    r = np.asarray(r_m, dtype=float)
    return 4.0 * EPS0_F_PER_M * volts / (math.pi * np.sqrt(radius_m**2 - r**2))


def ellipsoid_capacitance_F(a_m: float, b_m: float, c_m: float) -> float:
    """C = 4 pi eps0 / R_F(a^2, b^2, c^2), Carlson's R_F (docs/references.md item 3)."""
    return FOUR_PI_EPS0 / float(elliprf(a_m * a_m, b_m * b_m, c_m * c_m))


def ellipsoid_density_C_per_m2(
    points_m: np.ndarray, semi_axes_m: tuple[float, float, float], charge_C: float
) -> np.ndarray:
    """sigma = Q / (4 pi a b c) (x^2/a^4 + y^2/b^4 + z^2/c^4)^(-1/2) at surface points (M, 3)
    (docs/references.md item 3, from memory)."""
    a, b, c = semi_axes_m
    p = np.asarray(points_m, dtype=float)
    q = p[:, 0] ** 2 / a**4 + p[:, 1] ** 2 / b**4 + p[:, 2] ** 2 / c**4
    return charge_C / (4.0 * math.pi * a * b * c) / np.sqrt(q)


def ellipsoid_peak_field_V_per_m(semi_axes_m: tuple[float, float, float], volts: float) -> float:
    """Largest surface field of an ellipsoid at potential V: the density of item 3 at the tip
    of its longest semi-axis, over eps0 (docs/references.md item 3)."""
    a, b, c = semi_axes_m
    q = ellipsoid_capacitance_F(a, b, c) * volts
    return q * max(a, b, c) / (4.0 * math.pi * a * b * c) / EPS0_F_PER_M


def sphere_above_plane_capacitance_F(radius_m: float, height_m: float) -> float:
    """Sphere of radius R, centre at height h over a grounded plane: the image series
    4 pi eps0 R sinh(alpha) sum 1/sinh(n alpha), cosh(alpha) = h / R (docs/references.md
    item 6)."""
    return FOUR_PI_EPS0 * radius_m * sphere_above_plane_series(height_m / radius_m)


def sphere_in_field_density_C_per_m2(points_m: np.ndarray, field_V_per_m: float) -> np.ndarray:
    """Neutral conducting sphere centred at the origin in a uniform field E0 along the last
    coordinate: sigma = 3 eps0 E0 cos(theta) (docs/references.md item 9)."""
    p = np.asarray(points_m, dtype=float)
    cos_t = p[:, -1] / np.linalg.norm(p, axis=1)
    return SPHERE_IN_FIELD_ENHANCEMENT * EPS0_F_PER_M * field_V_per_m * cos_t


def love_disk_pair_coefficients(k: float, nodes: int = 400) -> tuple[float, float]:
    """Maxwell coefficients (C_11, C_12) / (eps0 R) of two equal coaxial disks, spacing k R:
    equal potentials give each disk 8 eps0 R V int f+ (Love's equation with the kernel's sign
    for like potentials), opposite ones C_11 - C_12 = 8 eps0 R int f-, so
    C_11 = 4 (int f+ + int f-) and C_12 = 4 (int f+ - int f-) (docs/references.md item 7;
    the like-potential sign from memory, checked in tests/test_error_estimate_honesty_covered.py
    against the far-apart limit)."""
    like, opposite = love_integral(k, -1.0, nodes), love_integral(k, 1.0, nodes)
    return 4.0 * (like + opposite), 4.0 * (like - opposite)


def two_sphere_coefficients(a_m: float, b_m: float, c_m: float) -> tuple[float, float, float]:
    """Maxwell coefficients (C_aa, C_ab, C_bb) in F of spheres of radii a and b, centres c
    apart, in vacuum: with cosh U = (c^2 - a^2 - b^2) / (2 a b), in units of 4 pi eps0,
    C_aa = a b sinh U sum_{n>=0} 1 / (a sinh nU + b sinh (n+1)U) (a and b swapped for C_bb),
    C_ab = -(a b / c) sinh U sum_{n>=1} 1 / sinh nU (docs/references.md item 21: Smythe,
    series from memory, checked against :func:`two_sphere_images`)."""
    u = math.acosh((c_m**2 - a_m**2 - b_m**2) / (2.0 * a_m * b_m))
    n = np.arange(0, int(600.0 / u))
    sh = np.sinh(u)

    def own(p: float, q: float) -> float:
        return float(p * q * sh * np.sum(1.0 / (p * np.sinh(n * u) + q * np.sinh((n + 1) * u))))

    mutual = -(a_m * b_m / c_m) * sh * float(np.sum(1.0 / np.sinh(n[1:] * u)))
    return FOUR_PI_EPS0 * own(a_m, b_m), FOUR_PI_EPS0 * mutual, FOUR_PI_EPS0 * own(b_m, a_m)


def two_sphere_images(a_m: float, b_m: float, c_m: float, terms: int = 400) -> tuple[float, float]:
    """(C_aa, C_ba) in F of the same two spheres by Kelvin's images: a charge 4 pi eps0 a at
    the centre of sphere a (at 1 V), each image in the other sphere q' = -q R / d at R^2 / d
    from its centre (docs/references.md item 21: method of images)."""
    q, x = a_m, 0.0  # charge (units 4 pi eps0) and its position along the line of centres
    on_a, q_a, q_b = True, a_m, 0.0
    for _ in range(terms):
        if on_a:
            d = c_m - x
            q, x = -q * b_m / d, c_m - b_m * b_m / d
            q_b += q
        else:
            d = x
            q, x = -q * a_m / d, a_m * a_m / d
            q_a += q
        on_a = not on_a
    return FOUR_PI_EPS0 * q_a, FOUR_PI_EPS0 * q_b

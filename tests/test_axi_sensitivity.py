"""Capacitance derivatives from one solve (Hadamard shape derivative) vs finite differences."""

from __future__ import annotations

import math

import numpy as np
import pytest
from reference_values import sphere_above_plane_capacitance_F

from elopt.physics import geometry as geo
from elopt.physics.bem_axi.solve import solve_axisymmetric
from elopt.physics.layout import Layout, driven


def _series(radius: float, height: float) -> float:
    # Sphere above a grounded plane, image series (Smythe, 3rd ed., ch. 5, from memory;
    # docs/references.md item 6).
    return sphere_above_plane_capacitance_F(radius, height)


def _sphere(height: float, radius: float = 1e-3) -> Layout:
    return Layout((driven("ball", geo.sphere(radius, height), 1.0),), ground_plane=True)


@pytest.mark.parametrize("h_over_r", [3.0, 1.5, 1.2])
def test_plane_derivative_of_sphere_matches_the_derivative_of_the_image_series(h_over_r):
    radius = 1e-3
    h = h_over_r * radius
    sol = solve_axisymmetric(_sphere(h), rel_accuracy=1e-8)
    # Moving the plane up by delta is the sphere moving down: dC/d(delta) = -dC/dh.
    step = 1e-5 * radius
    reference = -(_series(radius, h + step) - _series(radius, h - step)) / (2 * step)
    assert sol.plane_capacitance_derivative_F_per_m()[0, 0] == pytest.approx(reference, rel=1e-6)


def test_moving_the_sphere_itself_gives_the_same_derivative():
    radius, h = 1e-3, 1.5e-3
    sol = solve_axisymmetric(_sphere(h), rel_accuracy=1e-8)
    own = sol.conductor_capacitance_derivative_F_per_m("ball")[0, 0]
    step = 1e-5 * radius
    reference = (_series(radius, h + step) - _series(radius, h - step)) / (2 * step)
    assert own == pytest.approx(reference, rel=1e-6)


def _probe(standoff: float) -> Layout:
    a, g, w, t, rho = 2e-3, 0.2e-3, 1e-3, 1e-3, 0.1e-3
    sensor = geo.rounded_polyline(
        [(0, standoff), (a, standoff), (a, standoff + t), (0, standoff + t)], rho
    )
    r0, r1 = a + g, a + g + w
    d = standoff
    guard = geo.rounded_polyline(
        [(0.5 * (r0 + r1), d), (r1, d), (r1, d + t), (r0, d + t), (r0, d), (0.5 * (r0 + r1), d)],
        rho,
    )
    return Layout((driven("sensor", sensor, 1.0), driven("guard", guard, 1.0)), ground_plane=True)


def test_guarded_probe_shape_derivative_vs_central_differences():
    d = 0.5e-3
    sol = solve_axisymmetric(_probe(d), rel_accuracy=1e-8)
    deriv = sol.plane_capacitance_derivative_F_per_m()
    step = 1e-6
    up = solve_axisymmetric(_probe(d + step), rel_accuracy=1e-9).capacitance_matrix_F
    down = solve_axisymmetric(_probe(d - step), rel_accuracy=1e-9).capacitance_matrix_F
    fd = -(up - down) / (2 * step)
    scale = np.sqrt(np.outer(np.diag(fd), np.diag(fd)))
    np.testing.assert_array_less(np.abs(deriv - fd) / scale, 1e-5)


def test_sensitivity_density_integrates_to_the_derivative():
    sol = solve_axisymmetric(_probe(0.5e-3), rel_accuracy=1e-6)
    # Independent rule: composite Simpson on a fine uniform grid out to 60 mm.
    r = np.linspace(0.0, 60e-3, 60_001)
    density = sol.plane_sensitivity_density(0, 0, r)
    integral = (
        np.sum(np.diff(r) * 0.5 * (density[1:] * r[1:] + density[:-1] * r[:-1])) * 2 * math.pi
    )
    assert integral == pytest.approx(sol.plane_capacitance_derivative_F_per_m()[0, 0], rel=1e-4)

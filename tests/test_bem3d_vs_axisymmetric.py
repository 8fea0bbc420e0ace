"""The 3-D panel solver against the axisymmetric solver on bodies of revolution, and the
plane shape derivatives (standoff and tilt) against finite differences."""

from __future__ import annotations

import math

import numpy as np
import pytest

from elopt.physics.bem3d import RevolvedSurface, revolved_layout, solve_3d
from elopt.physics.bem3d.mesh import rotation_about_axis
from elopt.physics.bem_axi.solve import solve_axisymmetric
from elopt.physics.electrodes.guarded_disk import GuardedDisk, GuardedDiskParams
from elopt.physics.electrodes.target_tilt import tilt_metrics
from elopt.physics.geometry import sphere as sphere_curve
from elopt.physics.layout import Conductor, Layout, driven

PROBE = GuardedDiskParams(
    sensor_radius_mm=2.0,
    guard_gap_mm=0.3,
    guard_width_mm=1.0,
    thickness_mm=1.0,
    fillet_mm=0.15,
    standoff_mm=0.6,
    drive_V=10.0,
)


@pytest.fixture(scope="module")
def probe_pair():
    layout = GuardedDisk().build(PROBE)
    axi = solve_axisymmetric(layout, rel_accuracy=1e-6)
    sol3 = solve_3d(
        revolved_layout(layout, h_m=0.6e-3), rel_accuracy=1e-3, max_level=1, strict=False
    )
    return axi, sol3


def _scaled_gap(a: np.ndarray, b: np.ndarray) -> float:
    d = np.sqrt(np.outer(np.diag(b), np.diag(b)))
    return float(np.max(np.abs(a - b) / d))


def test_guarded_disk_capacitance_matrix_agrees_within_the_error_estimate(probe_pair):
    # Two independent discretisations of one problem (rings of high-order panels vs flat
    # triangles) must agree to within the 3-D solver's own h vs h/2 estimate.
    axi, sol3 = probe_pair
    gap = _scaled_gap(sol3.capacitance_matrix_F, axi.capacitance_matrix_F)
    assert gap <= sol3.rel_error_estimate
    assert sol3.capacitance_matrix_extrapolated_F is not None
    gap_rich = _scaled_gap(sol3.capacitance_matrix_extrapolated_F, axi.capacitance_matrix_F)
    assert gap_rich < 0.25 * gap


def test_guarded_disk_plane_derivative_agrees_with_axisymmetric(probe_pair):
    axi, sol3 = probe_pair
    d_axi = axi.plane_capacitance_derivative_F_per_m()
    d_3d = sol3.plane_capacitance_derivative_F_per_m()
    assert _scaled_gap(d_3d, d_axi) < 3 * sol3.rel_error_estimate
    r = np.array([0.0, 1.0e-3, 2.2e-3, 3.5e-3])
    dens_axi = axi.plane_sensitivity_density(0, 0, r)
    dens_3d = sol3.plane_sensitivity_density(
        0, 0, np.stack([r / math.sqrt(2), r / math.sqrt(2)], axis=1)
    )
    assert np.allclose(dens_3d, dens_axi, rtol=0.02, atol=0.01 * dens_axi[0])


def test_sphere_above_plane_agrees_with_axisymmetric():
    layout = Layout((driven("s", sphere_curve(1e-3, center_z=1.6e-3), 1.0),), ground_plane=True)
    axi = solve_axisymmetric(layout, rel_accuracy=1e-7)
    l3 = Layout(
        (driven("s", RevolvedSurface(sphere_curve(1e-3, center_z=1.6e-3), 0.3e-3), 1.0),),
        ground_plane=True,
    )
    sol3 = solve_3d(l3, rel_accuracy=1e-4, max_level=2, strict=False)
    gap = _scaled_gap(sol3.capacitance_matrix_F, axi.capacitance_matrix_F)
    assert gap <= sol3.rel_error_estimate
    assert _scaled_gap(sol3.capacitance_matrix_extrapolated_F, axi.capacitance_matrix_F) < 2e-4


def _rotated(layout: Layout, angle: float, axis_point: np.ndarray) -> Layout:
    """Every conductor turned by ``angle`` about the y axis through ``axis_point``."""
    rot = rotation_about_axis(np.array([0.0, 1.0, 0.0]), angle)
    shift = axis_point - rot @ axis_point
    return Layout(
        tuple(
            Conductor(c.name, c.shape.transformed(rot, shift), c.potential_V, c.charge_C)
            for c in layout.conductors
        ),
        eps_r=layout.eps_r,
        ground_plane=True,
    )


def test_tilt_derivative_matches_finite_differences_of_rotated_layouts():
    # Tilting the plane by theta about an axis in it is the same as turning the conductors
    # by -theta about that axis over a level plane (exact for the image method), so a
    # central difference of rotated layouts checks the Hadamard tilt formula.
    layout = revolved_layout(GuardedDisk().build(PROBE), h_m=0.8e-3)
    x0 = -1.5e-3
    sol = solve_3d(layout, rel_accuracy=1e-2, start_level=0, max_level=0, strict=False)
    d_tilt = sol.plane_tilt_derivative_F_per_rad(axis_point_m=(x0, 0.0), axis_direction=(0.0, 1.0))
    theta = 2e-3
    axis_point = np.array([x0, 0.0, 0.0])
    caps = []
    for sign in (+1, -1):
        turned = _rotated(layout, -sign * theta, axis_point)
        s = solve_3d(turned, rel_accuracy=1e-2, start_level=0, max_level=0, strict=False)
        caps.append(s.capacitance_matrix_F)
    fd = (caps[0] - caps[1]) / (2 * theta)
    # A nonzero check: with the axis off-centre the plane under the probe moves.
    assert abs(d_tilt[0, 0]) > 0.1 * abs(sol.plane_capacitance_derivative_F_per_m()[0, 0]) * abs(x0)
    assert np.allclose(d_tilt, fd, rtol=0.02, atol=0.02 * abs(fd[0, 0]))
    # An axis through the probe's centre: the first-order tilt response vanishes by symmetry.
    d_centre = sol.plane_tilt_derivative_F_per_rad(axis_point_m=(0.0, 0.0))
    assert np.max(np.abs(d_centre)) < 0.02 * abs(d_tilt[0, 0])


def test_guarded_disk_tilt_metrics_through_the_3d_solver(probe_pair):
    # The guarded disk over a level target, seen by the tilt helper: C_sense and its
    # standoff sensitivity agree with the axisymmetric solve; the tilt response about the
    # probe's own axis vanishes by symmetry, and about an off-centre axis it is the standoff
    # sensitivity times the lever arm (dz = -theta (x - x_a) under the probe's centre).
    axi, sol3 = probe_pair
    centre = tilt_metrics(sol3, 0.0)
    c_axi = axi.capacitance_matrix_F[0].sum() * 1e15
    assert centre["sense_capacitance_fF"] == pytest.approx(c_axi, rel=2 * sol3.rel_error_estimate)
    s_axi = axi.plane_capacitance_derivative_F_per_m()[0].sum() * 1e15 * 1e-6
    assert centre["sensitivity_fF_per_um"] == pytest.approx(s_axi, rel=3 * sol3.rel_error_estimate)
    assert abs(centre["tilt_sensitivity_fF_per_mrad"]) < 1e-3 * centre["sensitivity_fF_per_um"]
    off = tilt_metrics(sol3, -1.0e-3)
    lever = -1.0e-3 * centre["sensitivity_fF_per_um"] * 1e6 * 1e-3  # fF/um -> fF/m, per mrad
    assert off["tilt_sensitivity_fF_per_mrad"] == pytest.approx(lever, rel=1e-3)

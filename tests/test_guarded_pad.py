"""The guarded rectangular pad family: geometry, parameter rules, metrics, target tilt."""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest

from elopt.physics.bem3d import solve_3d
from elopt.physics.bem3d.checks import check_apart, check_surface
from elopt.physics.electrodes.guarded_pad import (
    GuardedPad,
    GuardedPadOptions,
    GuardedPadParams,
    level_layout,
    spot_radius_m,
)
from elopt.physics.electrodes.registry import get_family
from elopt.physics.electrodes.target_tilt import sense_capacitance_F, tilted_layout
from elopt.physics.errors import ElectrodeError
from elopt.physics.layout import EPS0_F_PER_M

PAD = GuardedPadParams(
    pad_length_mm=3.0,
    pad_width_mm=2.0,
    guard_gap_mm=0.3,
    guard_width_mm=1.0,
    thickness_mm=0.4,
    fillet_mm=0.1,
    standoff_mm=0.6,
    drive_V=10.0,
)
COARSE = GuardedPadOptions(mesh_step_mm=1.6, max_level=1)


def test_registered_and_meshes_are_valid_closed_and_apart():
    fam = get_family("guarded_pad")
    assert isinstance(fam, GuardedPad)
    layout = fam.build(PAD, options=COARSE)
    meshes = [c.shape.mesh(0) for c in layout.conductors]
    for m, c in zip(meshes, layout.conductors, strict=True):
        check_surface(m, c.name)
        assert m.closed and m.volume_m3 > 0
    check_apart(meshes[0], "sensor", meshes[1], "guard")
    # The rounded pad encloses the box volume less the fillet material (exact for a
    # rounded box: a b t - (4 - pi) f^2 (a + b + t - 6 f)... checked loosely, the mesh is
    # a polyhedron inscribed in the rounded surface).
    a, b, t, f = 3e-3, 2e-3, 0.4e-3, 0.1e-3
    edges = (4 - math.pi) * f**2 * ((a - 2 * f) + (b - 2 * f) + (t - 2 * f))
    corners = (8 - 4 * math.pi / 3) * f**3
    assert meshes[0].volume_m3 == pytest.approx(a * b * t - edges - corners, rel=2e-3)
    # Pad face at the standoff, guard face level with it.
    assert meshes[0].vertices_m[:, 2].min() == pytest.approx(0.6e-3, rel=1e-9)
    assert meshes[1].vertices_m[:, 2].min() == pytest.approx(0.6e-3, rel=1e-9)


def test_thin_pad_is_two_open_sheets():
    thin = replace(PAD, thickness_mm=0.0, fillet_mm=0.0)
    layout = GuardedPad().build(thin, options=COARSE)
    for c in layout.conductors:
        assert not c.shape.closed
        assert len(c.shape.mesh(0).boundary_edges) > 0


@pytest.mark.parametrize(
    ("change", "words"),
    [
        ({"pad_length_mm": 0.0}, "pad_length_mm = 0 must be > 0"),
        ({"fillet_mm": 0.3}, "fillet_mm = 0.3 must be <= thickness_mm / 2 = 0.2"),
        ({"thickness_mm": 0.0}, "fillet_mm = 0.1 must be <= thickness_mm / 2 = 0"),
        ({"drive_V": 0.0}, "drive_V = 0 must be nonzero"),
        ({"target_tilt_deg": 12.0}, "target_tilt_deg = 12 must lie in [-10, 10]"),
        ({"target_tilt_deg": 8.0, "tilt_axis_x_mm": -4.0}, "brings the target up to the guard"),
        ({"standoff_mm": float("nan")}, "standoff_mm = nan must be finite"),
    ],
)
def test_bad_parameters_get_one_clear_message(change, words):
    with pytest.raises(ElectrodeError) as err:
        GuardedPad().validate(replace(PAD, **change))
    assert words in str(err.value)
    assert "\n" not in str(err.value)


def test_bad_options_are_refused():
    with pytest.raises(ElectrodeError, match="max_level = 0 must be a whole number in"):
        GuardedPad().validate_options(GuardedPadOptions(max_level=0))
    with pytest.raises(ElectrodeError, match="mesh_step_mm = -1 must be >= 0"):
        GuardedPad().validate_options(GuardedPadOptions(mesh_step_mm=-1.0))


@pytest.fixture(scope="module")
def evaluation():
    return GuardedPad().evaluate(PAD, rel_accuracy=1e-2, options=COARSE)


def test_metrics_are_consistent_with_the_solution(evaluation):
    ev = evaluation
    m = ev.metrics
    assert set(m) == {s.name for s in GuardedPad.metrics}
    c = ev.solution.capacitance_matrix_F
    assert m["sense_capacitance_fF"] == pytest.approx((c[0, 0] + c[0, 1]) * 1e15, rel=1e-12)
    assert m["sensor_guard_coupling_fF"] > 0
    assert m["total_capacitance_fF"] > m["sense_capacitance_fF"] > 0
    # The ideal plate of the same C_sense: eps A / d; a driven guard keeps fringing small,
    # so the effective area lies between the pad's own area and the guard opening's
    # (common practice, no source).
    area = m["effective_area_mm2"]
    assert m["effective_radius_mm"] == pytest.approx(math.sqrt(area / math.pi), rel=1e-12)
    assert 3.0 * 2.0 < area < 3.6 * 2.6
    assert m["sense_capacitance_fF"] == pytest.approx(
        EPS0_F_PER_M * area * 1e-6 / 0.6e-3 * 1e15, rel=1e-9
    )
    # Symmetric design over a level target: the peak sits at a corner region, the first
    # order tilt response about the centre line vanishes.
    assert abs(m["tilt_sensitivity_fF_per_mrad"]) < 1e-3 * m["sensitivity_fF_per_um"] * 1e3
    assert m["sensitivity_fF_per_um"] > 0
    # Most of the sensitivity comes from the target under the pad.
    assert 0.5 * math.hypot(1.5, 1.0) < m["spot_radius_90_mm"] < 3.0
    assert m["outer_size_mm"] == pytest.approx(3.0 + 2 * 1.3)
    assert ev.solution.point_dim == 3


AXIS_X = -2.0e-3


def _solve_level0(params: GuardedPadParams, theta_rad: float = 0.0):
    layout = tilted_layout(level_layout(params, 1.6e-3), theta_rad, AXIS_X)
    return solve_3d(layout, rel_accuracy=1e-2, max_level=0, strict=False)


@pytest.fixture(scope="module")
def level0():
    return _solve_level0(PAD)


def test_standoff_sensitivity_matches_finite_differences(level0):
    # -dC_sense/dd by the Hadamard formula on the plane against a central difference of two
    # solves with the standoff changed by -+1 % (same mesh step, so the same discretisation).
    hadamard = sense_capacitance_F(level0.plane_capacitance_derivative_F_per_m())
    delta = 0.006
    up = _solve_level0(replace(PAD, standoff_mm=0.6 + delta))
    down = _solve_level0(replace(PAD, standoff_mm=0.6 - delta))
    c_up = sense_capacitance_F(up.capacitance_matrix_F)
    c_down = sense_capacitance_F(down.capacitance_matrix_F)
    fd = -(c_up - c_down) / (2 * delta * 1e-3)
    assert hadamard == pytest.approx(fd, rel=0.01)


def test_tilt_sensitivity_matches_finite_differences_of_tilted_targets(level0):
    # dC_sense/dtheta by the Hadamard formula on the plane against a central difference of
    # two solves with the target tilted by -+theta (the pad turned about the same axis).
    d_tilt = sense_capacitance_F(level0.plane_tilt_derivative_F_per_rad(axis_point_m=(AXIS_X, 0.0)))
    theta = math.radians(0.5)
    c_plus = sense_capacitance_F(_solve_level0(PAD, theta).capacitance_matrix_F)
    c_minus = sense_capacitance_F(_solve_level0(PAD, -theta).capacitance_matrix_F)
    fd = (c_plus - c_minus) / (2 * theta)
    # The target rises on the -x side, where the axis is: past the axis it moves away.
    assert fd < 0
    assert d_tilt == pytest.approx(fd, rel=0.01)


def test_spot_radius_of_a_uniform_disk_density():
    # A density uniform on a disk of radius R holds 90 % inside sqrt(0.9) R.
    g = np.linspace(-1.0, 1.0, 401)
    x, y = np.meshgrid(g, g)
    xy = np.stack([x.ravel(), y.ravel()], axis=1)
    dens = (np.hypot(xy[:, 0], xy[:, 1]) < 0.8).astype(float)
    w = np.full(len(xy), (g[1] - g[0]) ** 2)
    assert spot_radius_m(xy, w, dens, 0.9) == pytest.approx(math.sqrt(0.9) * 0.8, rel=0.01)


def test_elopt_solve_reports_a_guarded_pad(tmp_path, capsys):
    from elopt.optimizer.cli.main import main

    cfg = tmp_path / "pad.toml"
    cfg.write_text(
        """
[geometry]
family = "guarded_pad"
pad_length_mm = 3.0
pad_width_mm = 2.0
guard_gap_mm = 0.3
guard_width_mm = 1.0
thickness_mm = 0.4
fillet_mm = 0.1
standoff_mm = 0.6
drive_V = 10.0
target_tilt_deg = 0.3
tilt_axis_x_mm = -1.0
[solver]
rel_accuracy = 1e-2
[evaluation]
mesh_step_mm = 1.6
max_level = 1
""",
        encoding="utf-8",
    )
    assert main(["solve", str(cfg)]) == 0
    out = capsys.readouterr().out
    for words in ("tilt_sensitivity_fF_per_mrad", "Capacitance matrix", "x = ", "y = ", "z = "):
        assert words in out
    assert "Cross-section" not in out

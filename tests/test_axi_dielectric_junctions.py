"""Strength of the singularity where a dielectric interface ends on a conductor, and the
grading and error estimate that follow from it."""

from __future__ import annotations

import math
import tomllib
from pathlib import Path

import numpy as np
import pytest

from elopt.physics.bem_axi.dielectric_geometry import (
    build_dielectric_geometry,
    junction_exponents,
    wedge_exponent,
)
from elopt.physics.bem_axi.dielectric_solve import dielectric_model
from elopt.physics.bem_axi.solve import solve_axisymmetric
from elopt.physics.electrodes.guarded_disk import (
    GuardedDiskParams,
    guard_curve,
    insulators,
    sensor_curve,
)
from elopt.physics.geometry import Curve, Segment
from elopt.physics.layout import Layout, driven
from elopt.physics.media import DielectricRegion

CONFIG = Path(__file__).resolve().parents[1] / "configs" / "spindle_runout_probe.toml"


def _chain(pts) -> Curve:
    return Curve(tuple(Segment(a, b) for a, b in zip(pts[:-1], pts[1:], strict=True)))


def _rect(r0, r1, z0, z1) -> Curve:
    return _chain([(r0, z0), (r1, z0), (r1, z1), (r0, z1), (r0, z0)])


def _conductors(cuts=()):
    """A square-edged sensor r <= 1 and a ring 1.2 <= r <= 1.6 (z in [0.5, 0.8]), their
    facing walls split at heights ``cuts``."""
    up = [(1.0, z) for z in (0.5, *cuts, 0.8)]
    down = [(1.2, z) for z in (0.8, *cuts[::-1], 0.5)]
    sensor = _chain([(0.0, 0.5), *up, (0.0, 0.8)])
    ring = _chain([(1.2, 0.5), (1.6, 0.5), (1.6, 0.8), *down])
    return (driven("sensor", sensor, 1.0), driven("ring", ring, 0.0))


@pytest.mark.parametrize("angle", [math.pi / 2, math.pi, 1.5 * math.pi, 2 * math.pi])
def test_one_medium_wedge_has_the_corner_exponent(angle):
    # Jackson, Classical Electrodynamics, 3rd ed., sec. 2.11 (from memory): between two
    # conductor faces meeting at opening angle beta the potential goes like rho^(pi / beta).
    assert wedge_exponent([(angle, 2.5)]) == pytest.approx(math.pi / angle, rel=1e-10)


def test_splitting_a_wedge_into_equal_media_changes_nothing():
    # common practice, no source: an interface between equal media is no interface.
    beta = 1.5 * math.pi
    nu = wedge_exponent([(0.4, 3.0), (beta - 0.4, 3.0)])
    assert nu == pytest.approx(math.pi / beta, rel=1e-10)


@pytest.mark.parametrize("ratio", [3.0, 10.0, 80.0])
def test_interface_at_right_angles_to_a_flat_wall_is_regular(ratio):
    # Separation of variables (common practice, no source): phi = rho sin(theta) in both
    # quarter planes vanishes on the wall, is continuous across theta = pi/2 and has zero
    # normal derivative there, so D_n is continuous for any permittivities: nu = 1.
    assert wedge_exponent([(math.pi / 2, ratio), (math.pi / 2, 1.0)]) == pytest.approx(1.0)


def test_spacer_junctions_on_a_straight_wall_are_regular_and_at_an_edge_singular():
    # A spacer on the straight walls (corners at mid-wall) against one that spans the full
    # height of a square-edged sensor (its corners at the metal edges, 3 pi / 2 of medium
    # split into a dielectric quarter and air): 1 against < 2/3 < 1 (the air-only edge
    # exponent of Jackson sec. 2.11 is 2/3; the dielectric quarter raises it).
    short = Layout(
        _conductors((0.6, 0.7)), regions=(DielectricRegion("s", _rect(1.0, 1.2, 0.6, 0.7), 3.0),)
    )
    full = Layout(_conductors(), regions=(DielectricRegion("s", _rect(1.0, 1.2, 0.5, 0.8), 3.0),))
    g = build_dielectric_geometry(short)
    np.testing.assert_allclose(junction_exponents(g, g.junctions, 1e-7), 1.0, rtol=1e-9)
    g = build_dielectric_geometry(full)
    nu = junction_exponents(g, g.junctions, 1e-7)
    assert np.all((nu > 2 / 3) & (nu < 1.0))
    assert len(dielectric_model(full, True).singular_junctions) == 4
    assert len(dielectric_model(short, True).singular_junctions) == 0


@pytest.mark.slow
def test_spacer_and_sleeve_probe_estimate_stays_honest_at_the_default_request():
    # The demo probe (configs/spindle_runout_probe.toml) with a spacer and a sleeve on the
    # straight walls, sensor against a grounded guard so that the gap carries field: its
    # regular junctions are graded like blunt corners at 1e-4; the reported estimate must
    # still bound the error against a 1e-7 solve (common practice, no source).
    geom = tomllib.loads(CONFIG.read_text())["geometry"]
    p = GuardedDiskParams(
        **{k: v for k, v in geom.items() if k != "family"},
    )
    p = GuardedDiskParams(**{**p.__dict__, "spacer_eps_r": 3.0, "housing_width_mm": 0.5})
    layout = Layout(
        (driven("sensor", sensor_curve(p), 1.0), driven("guard", guard_curve(p), 0.0)),
        ground_plane=True,
        regions=insulators(p),
    )
    assert len(dielectric_model(layout, True).singular_junctions) == 0
    sol = solve_axisymmetric(layout, rel_accuracy=1e-4)
    ref = solve_axisymmetric(layout, rel_accuracy=1e-7).capacitance_matrix_F
    scale = np.sqrt(np.abs(np.outer(np.diag(ref), np.diag(ref))))
    err = float(np.max(np.abs(sol.capacitance_matrix_F - ref) / scale))
    assert sol.accuracy_met
    assert err <= sol.rel_error_estimate <= 1e-4

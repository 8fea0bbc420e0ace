"""Bad dielectric input in the axisymmetric solver: one-line errors naming the item, the rule
and the values (never a traceback from deep inside, never a silent wrong answer)."""

from __future__ import annotations

import math

import pytest

from elopt.physics import geometry as geo
from elopt.physics.bem_axi.solve import solve_axisymmetric
from elopt.physics.errors import GeometryError
from elopt.physics.geometry import Curve, Segment
from elopt.physics.layout import Layout, driven
from elopt.physics.media import DielectricRegion, PlanarLayer


def _poly(*pts) -> Curve:
    closed = list(pts) + [pts[0]]
    return Curve(tuple(Segment(a, b) for a, b in zip(closed[:-1], closed[1:], strict=True)))


BALL = driven("ball", geo.sphere(0.5, 2.0), 1.0)


def _solve(**kwargs):
    return solve_axisymmetric(Layout((BALL,), **kwargs), rel_accuracy=1e-3)


def _one_line(exc: pytest.ExceptionInfo) -> str:
    msg = str(exc.value)
    assert "\n" not in msg
    return msg


def test_overlapping_regions():
    a = DielectricRegion("left", _poly((0.2, 0.0), (1.0, 0.0), (1.0, 0.5), (0.2, 0.5)), 2.0)
    b = DielectricRegion("right", _poly((0.8, 0.1), (1.5, 0.1), (1.5, 0.4), (0.8, 0.4)), 3.0)
    with pytest.raises(GeometryError) as exc:
        _solve(regions=(a, b))
    msg = _one_line(exc)
    assert "'left'" in msg and "'right'" in msg and "overlap" in msg


def test_self_intersecting_region():
    bow = _poly((0.2, 0.0), (1.0, 0.5), (1.0, 0.0), (0.2, 0.5))
    with pytest.raises(GeometryError) as exc:
        _solve(regions=(DielectricRegion("bow", bow, 2.0),))
    assert "'bow'" in _one_line(exc) and "intersects itself" in str(exc.value)


def test_region_crossing_the_axis():
    square = _poly((-0.2, 0.0), (0.5, 0.0), (0.5, 0.5), (-0.2, 0.5))
    with pytest.raises(GeometryError) as exc:
        _solve(regions=(DielectricRegion("block", square, 2.0),))
    msg = _one_line(exc)
    assert "'block'" in msg and "axis" in msg and "-0.2" in msg


def test_region_crossing_the_ground_plane():
    square = _poly((0.2, -0.1), (0.5, -0.1), (0.5, 0.5), (0.2, 0.5))
    with pytest.raises(GeometryError) as exc:
        _solve(regions=(DielectricRegion("puck", square, 2.0),), ground_plane=True)
    msg = _one_line(exc)
    assert "'puck'" in msg and "ground plane" in msg and "-0.1" in msg


def test_region_cutting_into_a_conductor():
    square = _poly((0.2, 1.0), (1.0, 1.0), (1.0, 1.8), (0.2, 1.8))
    with pytest.raises(GeometryError) as exc:
        _solve(regions=(DielectricRegion("wedge", square, 2.0),))
    msg = _one_line(exc)
    assert "'wedge'" in msg and "'ball'" in msg and "cuts into" in msg


@pytest.mark.parametrize("eps", [0.0, -2.0, math.inf, math.nan])
def test_bad_permittivity(eps):
    with pytest.raises(GeometryError) as exc:
        DielectricRegion("slab", _poly((0.2, 0.0), (1.0, 0.0), (1.0, 0.5)), eps)
    msg = _one_line(exc)
    assert "'slab'" in msg and "eps_r" in msg
    with pytest.raises(GeometryError) as exc:
        PlanarLayer("film", eps, 0.0, 1.0)
    assert "'film'" in _one_line(exc)


def test_layer_thicker_than_the_standoff_buries_the_conductor():
    # the ball reaches down to z = 1.5; a film up to z = 1.7 buries its lower part
    with pytest.raises(GeometryError) as exc:
        _solve(layers=(PlanarLayer("film", 3.0, 0.0, 1.7),), ground_plane=True)
    msg = _one_line(exc)
    assert "'ball'" in msg and "'film'" in msg and "1.7" in msg


def test_region_straddling_a_layer_face():
    square = _poly((0.2, 0.05), (0.5, 0.05), (0.5, 0.5), (0.2, 0.5))
    with pytest.raises(GeometryError) as exc:
        _solve(
            regions=(DielectricRegion("puck", square, 2.0),),
            layers=(PlanarLayer("film", 3.0, 0.0, 0.1),),
            ground_plane=True,
        )
    msg = _one_line(exc)
    assert "'puck'" in msg and "0.1" in msg


def test_region_boundary_partly_along_a_conductor_must_be_split():
    # the block's side is split at z = 0.6 where the spacer ends: accepted; a spacer whose
    # side runs from 0.5 past the block's top edge (0.8) to 0.9 must be split at 0.8
    block = Curve(
        (
            Segment((0.0, 0.3), (1.0, 0.3)),
            Segment((1.0, 0.3), (1.0, 0.6)),
            Segment((1.0, 0.6), (1.0, 0.8)),
            Segment((1.0, 0.8), (0.0, 0.8)),
        )
    )
    spacer = _poly((1.0, 0.3), (1.3, 0.3), (1.3, 0.6), (1.0, 0.6))
    layout = Layout(
        (driven("block", block, 1.0),),
        regions=(DielectricRegion("spacer", spacer, 2.0),),
    )
    ok = solve_axisymmetric(layout, rel_accuracy=1e-3)
    assert ok.capacitance_matrix_F[0, 0] > 0
    bad = _poly((1.0, 0.6), (1.3, 0.6), (1.3, 0.9), (1.0, 0.9))
    with pytest.raises(GeometryError) as exc:
        solve_axisymmetric(
            Layout((driven("block", block, 1.0),), regions=(DielectricRegion("sp", bad, 2.0),)),
            rel_accuracy=1e-3,
        )
    assert "split" in _one_line(exc)

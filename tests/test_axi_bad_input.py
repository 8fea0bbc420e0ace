"""Bad geometry and drive input: one clear GeometryError / SolverError naming what is wrong."""

from __future__ import annotations

import math

import pytest

from elopt.physics import geometry as geo
from elopt.physics.bem_axi.solve import solve_axisymmetric
from elopt.physics.errors import GeometryError, SolverError
from elopt.physics.layout import Conductor, Layout, driven


def _square(r0: float, z0: float, size: float) -> geo.Curve:
    return geo.rounded_polyline(
        [
            (r0 + size / 2, z0),
            (r0 + size, z0),
            (r0 + size, z0 + size),
            (r0, z0 + size),
            (r0, z0),
            (r0 + size / 2, z0),
        ],
        0.0,
    )


def test_self_intersecting_curve_is_refused_with_the_conductor_name():
    bowtie = geo.Curve(
        (
            geo.Segment((0.0, 0.0), (1.0, 1.0)),
            geo.Segment((1.0, 1.0), (1.0, 0.0)),
            geo.Segment((1.0, 0.0), (0.0, 1.0)),
        )
    )
    with pytest.raises(GeometryError, match="'knot'.*intersects itself"):
        Layout((driven("knot", bowtie, 1.0),))


def test_curve_crossing_the_axis_is_refused():
    crossing = geo.Curve((geo.Segment((0.5, 0.0), (-0.5, 1.0)),))
    with pytest.raises(GeometryError, match="'lead'.*crosses the axis"):
        Layout((driven("lead", crossing, 1.0),))


def test_curve_touching_the_axis_between_its_ends_is_refused():
    zigzag = geo.Curve(
        (
            geo.Segment((0.0, 0.0), (1.0, 1.0)),
            geo.Segment((1.0, 1.0), (0.0, 2.0)),
            geo.Segment((0.0, 2.0), (1.0, 3.0)),
        )
    )
    with pytest.raises(GeometryError, match="touches the axis at z = 2"):
        Layout((driven("zig", zigzag, 1.0),))


def test_conductor_crossing_the_ground_plane_is_refused():
    with pytest.raises(GeometryError, match="'ball'.*ground plane"):
        Layout((driven("ball", geo.sphere(1.0, 0.5), 1.0),), ground_plane=True)


def test_touching_conductors_are_refused():
    with pytest.raises(GeometryError, match="'a' and 'b' touch"):
        Layout((driven("a", _square(1.0, 1.0, 1.0), 1.0), driven("b", _square(2.0, 1.0, 1.0), 0.0)))


def test_nested_conductors_are_refused():
    with pytest.raises(GeometryError, match="'inner' lies inside conductor 'outer'"):
        Layout(
            (
                driven("outer", _square(1.0, 1.0, 3.0), 1.0),
                driven("inner", _square(2.0, 2.0, 0.5), 0.0),
            )
        )


def test_zero_length_piece_is_refused():
    with pytest.raises(GeometryError, match=r"segment near \(1, 0\) m is 0 m long"):
        geo.Curve((geo.Segment((0.0, 0.0), (1.0, 0.0)), geo.Segment((1.0, 0.0), (1.0, 0.0))))


def test_pieces_that_do_not_join_are_refused():
    with pytest.raises(GeometryError, match="pieces must join"):
        geo.Curve((geo.Segment((0.0, 0.0), (1.0, 0.0)), geo.Segment((1.1, 0.0), (1.1, 1.0))))


@pytest.mark.parametrize("bad", [math.nan, math.inf])
def test_non_finite_numbers_are_refused(bad):
    with pytest.raises(GeometryError, match="finite"):
        geo.Segment((0.0, 0.0), (bad, 1.0))
    with pytest.raises(GeometryError, match="finite"):
        driven("x", geo.sphere(1.0), bad)
    with pytest.raises(GeometryError, match="eps_r"):
        Layout((driven("x", geo.sphere(1.0), 1.0),), eps_r=bad)


def test_floating_conductor_without_charge_is_refused():
    with pytest.raises(GeometryError, match="'idle'.*exactly one of potential_V"):
        Conductor(name="idle", shape=geo.sphere(1.0))


def test_fillets_that_overlap_are_refused():
    with pytest.raises(GeometryError, match="fillets of radius 0.6 m overlap"):
        geo.rounded_polyline([(0.0, 0.0), (1.0, 0.0), (1.0, 1.0), (0.0, 1.0)], 0.6)


def test_solver_options_out_of_range_are_refused():
    lay = Layout((driven("ball", geo.sphere(1.0), 1.0),))
    with pytest.raises(SolverError, match=r"rel_accuracy must lie in \(0, 1\), got 2"):
        solve_axisymmetric(lay, rel_accuracy=2.0)
    with pytest.raises(SolverError, match="max_level must be a whole number >= 0, got -1"):
        solve_axisymmetric(lay, max_level=-1)
    with pytest.raises(SolverError, match="unknown solve option 'max_panels'"):
        solve_axisymmetric(lay, max_panels=10)


def test_problem_too_large_before_an_estimate_is_refused_with_the_numbers():
    lay = Layout((driven("ball", geo.sphere(1.0), 1.0),))
    with pytest.raises(SolverError, match="needs 16 unknowns, more than max_unknowns = 10"):
        solve_axisymmetric(lay, max_unknowns=10)

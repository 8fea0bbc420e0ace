"""The box test that spares the layout check its outline (geometry.outside_outline_box).

A point the box puts outside must be outside by the even-odd rule (Jordan curve theorem) of
:func:`geometry.point_in_region` against the curve's closed outline, which the layout check
would otherwise run; the box must also be tight enough to spare it for points just beyond
the curve.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from elopt.physics import geometry as geo
from elopt.physics.layout import Layout, driven

CURVES = {
    "sphere": geo.sphere(1.0, 2.0),
    "rounded body": geo.rounded_polyline([(0, 1), (2, 1), (2, 2), (0, 2)], 0.3),
    "sharp ring": geo.rounded_polyline([(1, 1), (2, 1), (2.5, 2), (1, 2), (1, 1)], 0.0),
    "filleted ring": geo.rounded_polyline(
        [(1.5, 1), (3, 1), (3, 1.5), (1, 1.5), (1, 1), (1.5, 1)], 0.1
    ),
    "torus": geo.Curve(
        (
            geo.Arc((2.0, 1.0), 0.5, -math.pi / 2, math.pi / 2),
            geo.Arc((2.0, 1.0), 0.5, math.pi / 2, 1.5 * math.pi),
        )
    ),
}


@pytest.mark.parametrize("name", sorted(CURVES))
def test_a_point_outside_the_box_is_outside_the_outline(name):
    curve = CURVES[name]
    outline = geo.closed_outline(curve)
    pts = curve.sample(64)
    lo, hi = pts.min(axis=0), pts.max(axis=0)
    span = hi - lo
    rng = np.random.default_rng(7)
    points = lo - 0.3 * span + rng.random((4000, 2)) * 1.6 * span
    # points on the sampled curve and just off its extreme points as well
    points = np.concatenate([points, pts, [lo - 1e-5 * span, hi + 1e-5 * span]])
    outside = np.array([geo.outside_outline_box(curve, p) for p in points])
    inside = geo.point_in_region(points, outline)
    assert not np.any(outside & inside)
    assert np.count_nonzero(outside) > 1000  # the box spares most far points
    assert geo.outside_outline_box(curve, hi + 1e-5 * span)
    assert not np.any(outside[4000 : 4000 + len(pts)])  # the curve's own points never


def test_an_ellipse_arc_is_never_boxed():
    curve = geo.spheroid(1.0, 0.5, 2.0)
    assert not geo.outside_outline_box(curve, (10.0, 10.0))


def test_a_conductor_inside_a_ring_is_still_refused():
    ring = CURVES["filleted ring"]
    inner = geo.rounded_polyline([(1.8, 1.2), (2.2, 1.2), (2.2, 1.3), (1.8, 1.3), (1.8, 1.2)], 0.0)
    with pytest.raises(geo.GeometryError, match="'inner' lies inside conductor 'ring'"):
        Layout((driven("ring", ring, 1.0), driven("inner", inner, 0.0)))

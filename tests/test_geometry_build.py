"""The shortcuts of a curve's construction against the formulas they stand for: the batched
dot products (BLAS's rounding), the short-segment test, the stored arc ends and end
tangents, the compiled sampling and bounding box; and plane-geometry facts of a rounded
polyline (arc lengths, tangency, total length)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from test_axi_grading_kernels import _probe as guarded_probe_params

from elopt.physics import geometry as geo
from elopt.physics.electrodes.guarded_disk import guard_curve, sensor_curve


def _probe_curves() -> list[geo.Curve]:
    curves = []
    for fillet_mm in (0.0, 0.001, 0.05, 0.25):
        p = guarded_probe_params(fillet_mm=fillet_mm)
        curves += [sensor_curve(p), guard_curve(p)]
    return curves


def _curves() -> list[geo.Curve]:
    return [*_probe_curves(), geo.sphere(0.3, 1.0), geo.spheroid(0.5, 0.2, 1.0), geo.disk(2.0)]


def test_batched_dots_round_as_numpy_dot_of_each_pair():
    rng = np.random.default_rng(5)
    a = rng.standard_normal((2000, 2)) * rng.uniform(1e-6, 1e3, (2000, 1))
    b = rng.standard_normal((2000, 2))
    got = geo._dots([tuple(x) for x in a], [tuple(x) for x in b])
    want = [float(np.dot(x, y)) for x, y in zip(a, b, strict=True)]
    assert np.array_equal(np.array(got), np.array(want))
    assert geo._dots([], []) == []


def test_dots_of_axis_parallel_vectors_are_numpy_dot_values():
    # One product of each pair zero: the plain sum, whatever BLAS's order of rounding.
    rng = np.random.default_rng(6)
    a = rng.standard_normal((500, 2)) * rng.uniform(1e-6, 1e3, (500, 1))
    b = rng.standard_normal((500, 2))
    a[::2, 0] = 0.0
    b[1::2, 1] = 0.0
    got = geo._dots([tuple(x) for x in a], [tuple(x) for x in b])
    want = [float(np.dot(x, y)) for x, y in zip(a, b, strict=True)]
    assert got == want
    tiny = [(1e-170, 1.0)], [(1e-170, 3.0)]  # a product below the smallest double
    assert geo._dots(*tiny) == [float(np.dot(tiny[0][0], tiny[1][0]))]


@pytest.mark.parametrize("scale", [1e-12, 1e-3, 1.0, 1e6])
def test_short_segment_test_decides_as_the_blas_root(scale):
    rng = np.random.default_rng(8)
    for _ in range(3000):
        step = rng.standard_normal(2) * scale
        exact = math.sqrt(float(np.dot(step, step)))
        # limits far off, near (a few units in the last place) and exactly at the length
        for limit in (exact * 0.5, exact * (1 + 1e-15), exact * (1 - 1e-15), exact, exact * 2):
            want = math.sqrt(float(step.dot(step))) > limit
            assert geo._longer_than(float(step[0]), float(step[1]), limit) == want


def test_stored_arc_ends_are_the_arcs_own_formulas():
    arcs = [p for c in _probe_curves() for p in c.pieces if isinstance(p, geo.Arc)]
    assert len(arcs) == 18  # 2 + 4 fillets at each of the three rounded probes
    for arc in arcs:
        fresh = geo.Arc(arc.center, arc.radius, arc.start_angle, arc.end_angle)
        assert fresh.start == arc.start and fresh.end == arc.end


def test_end_tangents_are_the_pieces_tangents_at_their_ends():
    pieces = [p for c in _curves() for p in c.pieces]
    ends = [(p, at_end) for p in pieces for at_end in (False, True)]
    got = geo._end_tangents(ends)
    for (piece, at_end), tangent in zip(ends, got, strict=True):
        want = piece.tangents(np.array([1.0 if at_end else -1.0]))[0]
        assert tangent == tuple(want.tolist())


@pytest.mark.parametrize("per_piece", [1, 3, 16, 24, 33])
def test_compiled_samples_are_the_pieces_points_bit_for_bit(per_piece):
    t = np.linspace(-1.0, 1.0, per_piece + 1)
    for curve in _curves():
        want = np.concatenate([p.points(t)[:-1] for p in curve.pieces] + [[curve.end]])
        got = curve._sample(per_piece)
        assert got.tobytes() == want.tobytes()


def test_sample_box_and_size_are_numpys_extremes():
    for curve in _curves():
        pts = curve.sample(16)
        box = curve.sample_box
        assert box[:2] == tuple(pts.min(axis=0).tolist())
        assert box[2:] == tuple(pts.max(axis=0).tolist())
        coarse = curve.sample(4)
        r, z = coarse[:, 0], coarse[:, 1]
        assert curve.size == float(max(r.max() - r.min(), z.max() - z.min()))


def test_rounded_rectangle_has_quarter_arcs_tangent_to_its_edges():
    # Plane geometry: a fillet of radius rho at a right-angle corner is a quarter circle
    # tangent to both edges; it shortens the outline by (2 - pi/2) rho per corner.
    a, t, rho = 2.0, 0.5, 0.1
    curve = geo.rounded_polyline([(0.0, 1.0), (a, 1.0), (a, 1.0 + t), (0.0, 1.0 + t)], rho)
    arcs = [p for p in curve.pieces if isinstance(p, geo.Arc)]
    assert len(arcs) == 2
    for arc in arcs:
        assert arc.radius == pytest.approx(rho, rel=1e-12)
        assert arc.length == pytest.approx(0.5 * math.pi * rho, rel=1e-12)
    assert curve.length == pytest.approx(2 * a + t - 2 * (2 - 0.5 * math.pi) * rho, rel=1e-12)
    for before, after in zip(curve.pieces[:-1], curve.pieces[1:], strict=True):
        (tb,), (ta,) = before.tangents(np.array([1.0])), after.tangents(np.array([-1.0]))
        assert np.allclose(tb, ta, atol=1e-12)  # tangent: no break at any joint
    assert curve.corners() == ()  # on the axis at both ends, smooth everywhere else


def test_sharp_rectangle_keeps_right_angle_corners():
    curve = geo.rounded_polyline([(0.0, 1.0), (2.0, 1.0), (2.0, 1.5), (0.0, 1.5)], 0.0)
    assert all(isinstance(p, geo.Segment) for p in curve.pieces)
    assert [c.angle for c in curve.corners()] == pytest.approx([0.5 * math.pi] * 2, rel=1e-12)

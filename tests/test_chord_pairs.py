"""The curves' self-intersection check: the compiled test
(``geometry_kernels.first_touching_chords``, through ``geometry._first_self_intersection``)
against the numpy version it replaced (kept here, with its chord-pair search, a sweep along r,
checked against all pairs compared), on random polylines, polylines that touch themselves and
the sampled curves of the electrode families; and a figure eight (plane geometry)."""

from __future__ import annotations

import numpy as np
import pytest
from test_axi_mesh_rules import _probe as guarded_probe

from elopt.physics import geometry as geo


def chords_cross(p: np.ndarray, q: np.ndarray) -> np.ndarray:
    """Proper-intersection test of chords p (K,2,2) against q (K,2,2), pair by pair -> (K,)."""
    a, b, c, d = p[:, 0], p[:, 1], q[:, 0], q[:, 1]

    def orient(u, v, w):
        return (v[:, 0] - u[:, 0]) * (w[:, 1] - u[:, 1]) - (v[:, 1] - u[:, 1]) * (w[:, 0] - u[:, 0])

    o1, o2 = orient(a, b, c), orient(a, b, d)
    o3, o4 = orient(c, d, a), orient(c, d, b)
    return (o1 * o2 < 0) & (o3 * o4 < 0)


def overlapping_chord_pairs(
    pts: np.ndarray, tol: float, closed: bool
) -> tuple[np.ndarray, np.ndarray]:
    """Chords (i, i + 1) and (j, j + 1) of the polyline ``pts`` (M, 2), i < j and at least two
    apart, whose bounding boxes widened by ``tol`` overlap, in row-major order (i, then j);
    ``closed``: the first and the last chord are neighbours too (more than two chords).
    Returns i and j (K,) int64.

    A sweep along r instead of all m^2 pairs (a 144-chord guard ring: 78 -> 25 us): with the
    chords sorted by their lower r, a chord's r-range meets exactly those later in that order
    whose lower r is at most its upper r (theirs reach past its lower r already)."""
    r, z = pts[:, 0], pts[:, 1]
    lo_r, hi_r = np.minimum(r[:-1], r[1:]) - tol, np.maximum(r[:-1], r[1:]) + tol
    m = len(lo_r)
    by_lo = np.argsort(lo_r, kind="stable")
    ends = np.searchsorted(lo_r[by_lo], hi_r[by_lo], side="right")
    count = np.maximum(ends - np.arange(m) - 1, 0)  # later partners per sorted position
    total = int(count.sum())
    none = np.empty(0, np.int64)
    if total == 0:
        return none, none
    first = np.repeat(np.arange(m), count)
    second = np.arange(total) - np.repeat(np.cumsum(count) - count, count) + first + 1
    a, b = by_lo[first], by_lo[second]
    i, j = np.minimum(a, b), np.maximum(a, b)
    lo_z, hi_z = np.minimum(z[:-1], z[1:]) - tol, np.maximum(z[:-1], z[1:]) + tol
    keep = (j >= i + 2) & (lo_z[i] <= hi_z[j]) & (lo_z[j] <= hi_z[i])
    if closed and m > 2:
        keep &= (i != 0) | (j != m - 1)
    i, j = i[keep].astype(np.int64), j[keep].astype(np.int64)
    row_major = np.lexsort((j, i))
    return i[row_major], j[row_major]


def numpy_first_self_intersection(pts: np.ndarray, closed: bool) -> tuple[float, float] | None:
    """A point where two non-adjacent chords of the polyline cross or touch, else None.

    Only pairs of chords whose bounding boxes (widened by the touching tolerance) overlap can
    cross or touch; the exact tests run on those pairs alone."""
    tol = 1e-9 * float(np.max(pts.max(axis=0) - pts.min(axis=0)))
    i, j = overlapping_chord_pairs(pts, tol, closed)
    if len(i) == 0:
        return None
    chords = np.stack([pts[:-1], pts[1:]], axis=1)
    bad = chords_cross(chords[i], chords[j])
    a, d = chords[:, 0], chords[:, 1] - chords[:, 0]
    length2 = np.maximum(np.einsum("kc,kc->k", d, d), 1e-300)

    def touches(u: np.ndarray, v: np.ndarray) -> np.ndarray:
        # distance of chord u's start to chord v: catches touching without a proper crossing
        t = np.clip(np.einsum("kc,kc->k", a[u] - a[v], d[v]) / length2[v], 0.0, 1.0)
        return np.linalg.norm(a[u] - (a[v] + t[:, None] * d[v]), axis=-1) <= tol

    # Chords joined by a stretch of curve no longer than a few tolerances are neighbours, not a
    # touch: a short piece sampled into many chords has non-adjacent chords closer than tol.
    along = np.concatenate([[0.0], np.cumsum(np.sqrt(length2))])
    stretch = along[j] - along[i + 1]
    if closed:
        stretch = np.minimum(stretch, along[-1] - along[j + 1] + along[i])
    bad = (bad | touches(i, j) | touches(j, i)) & (stretch > 4.0 * tol)
    if not np.any(bad):
        return None
    k = int(np.argmax(bad))
    return tuple(chords[i[k]].mean(axis=0))


def all_pairs(pts: np.ndarray, tol: float, closed: bool) -> tuple[np.ndarray, np.ndarray]:
    lo = np.minimum(pts[:-1], pts[1:]) - tol
    hi = np.maximum(pts[:-1], pts[1:]) + tol
    m = len(lo)
    i, j = np.triu_indices(m, 2)
    keep = np.all(lo[i] <= hi[j], axis=1) & np.all(lo[j] <= hi[i], axis=1)
    if closed and m > 2:
        keep &= (i != 0) | (j != m - 1)
    return i[keep], j[keep]


@pytest.mark.parametrize("seed", range(6))
@pytest.mark.parametrize("closed", [False, True])
@pytest.mark.parametrize("grid", [False, True])
def test_pairs_match_the_all_pairs_comparison(seed, closed, grid):
    rng = np.random.default_rng(seed)
    pts = np.cumsum(rng.standard_normal((40 + 30 * seed, 2)), axis=0)
    if grid:  # vertices on whole r: equal r-ranges, vertical chords
        pts[:, 0] = np.round(pts[:, 0])
    if closed:
        pts[-1] = pts[0]
    tol = 0.05 * seed
    got = overlapping_chord_pairs(pts, tol, closed)
    want = all_pairs(pts, tol, closed)
    assert len(want[0]) > 0
    for g, w in zip(got, want, strict=True):
        assert g.dtype == np.int64
        np.testing.assert_array_equal(g, w)


def test_short_polylines_have_no_pairs():
    for n in (2, 3):
        i, j = overlapping_chord_pairs(np.zeros((n, 2)), 1.0, True)
        assert len(i) == len(j) == 0


def test_a_figure_eight_is_found_crossing_itself():
    # A closed polyline through (0, 0), (1, 1), (1, 0), (0, 1): its chords 0 and 2 cross at
    # (0.5, 0.5) (plane geometry).
    pts = np.array([[0.0, 0.0], [1.0, 1.0], [1.0, 0.0], [0.0, 1.0], [0.0, 0.0]])
    hit = geo._first_self_intersection(pts, closed=True)
    assert hit == (0.5, 0.5)  # the middle of the first crossing chord


def _polylines():
    rng = np.random.default_rng(11)
    for seed in range(40):
        n = 5 + 7 * (seed % 9)
        pts = np.cumsum(rng.standard_normal((n, 2)), axis=0)
        if seed % 3 == 0:  # vertices on whole r: collinear and touching chords
            pts = np.round(pts)
        if seed % 4 == 1:  # one vertex put onto a chord further on: a touch, no crossing
            k = int(rng.integers(0, n - 3))
            pts[k + 2] = pts[0] + rng.uniform(0.0, 1.0) * (pts[1] - pts[0])
        yield pts, False
        closed = pts.copy()
        closed[-1] = closed[0]
        yield closed, True
    # A simple closed curve (no crossing at all) and a sheet folded back onto itself.
    th = np.linspace(0.0, 2 * np.pi, 97)
    yield np.stack([2.0 + np.cos(th), np.sin(th)], axis=1), True
    yield np.array([[1.0, 0.0], [2.0, 0.0], [2.0, 1e-12], [1.0, 1e-12]]), False


def test_compiled_check_answers_as_the_numpy_version():
    found = 0
    for pts, closed in _polylines():
        want = numpy_first_self_intersection(pts, closed)
        got = geo._first_self_intersection(pts, closed)
        assert got == want
        found += want is not None
    assert 0 < found < 82  # both answers occur


def test_compiled_check_on_the_families_curves():
    for fillet_mm in (0.0, 0.001, 0.05, 0.2):
        for conductor in guarded_probe(fillet_mm).conductors:
            curve = conductor.shape
            for count in (4, 16, 64):
                pts = curve.sample(count)
                closed = curve.kind == "ring"
                assert geo._first_self_intersection(pts, closed) is None
                assert numpy_first_self_intersection(pts, closed) is None

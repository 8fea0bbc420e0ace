"""The self-intersection check's chord-pair search (a sweep along r) against all pairs
compared (the boxes' overlap test written out), on random polylines."""

from __future__ import annotations

import numpy as np
import pytest

from elopt.physics import geometry as geo


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
    got = geo._overlapping_chord_pairs(pts, tol, closed)
    want = all_pairs(pts, tol, closed)
    assert len(want[0]) > 0
    for g, w in zip(got, want, strict=True):
        assert g.dtype == np.int64
        np.testing.assert_array_equal(g, w)


def test_short_polylines_have_no_pairs():
    for n in (2, 3):
        i, j = geo._overlapping_chord_pairs(np.zeros((n, 2)), 1.0, True)
        assert len(i) == len(j) == 0


def test_a_figure_eight_is_found_crossing_itself():
    # A closed polyline through (0, 0), (1, 1), (1, 0), (0, 1): its chords 0 and 2 cross at
    # (0.5, 0.5) (plane geometry).
    pts = np.array([[0.0, 0.0], [1.0, 1.0], [1.0, 0.0], [0.0, 1.0], [0.0, 0.0]])
    hit = geo._first_self_intersection(pts, closed=True)
    assert hit == (0.5, 0.5)  # the middle of the first crossing chord

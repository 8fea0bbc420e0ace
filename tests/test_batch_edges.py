"""Batch edges of the vectorised ring sums: the former numpy expression (np.diff with
prepend) gives the same edges; the edges run from 0 to the item count without repeats, and a
batch's items after its first hold fewer than BATCH_PAIRS values (the cuts fall where the
running count passes a multiple of it)."""

from __future__ import annotations

import numpy as np

from elopt.physics.bem_axi.ring_sums import BATCH_PAIRS, batch_edges


def former_edges(counts: np.ndarray) -> np.ndarray:
    cum = np.cumsum(counts)
    total = int(cum[-1]) if len(cum) else 0
    cuts = np.searchsorted(cum, np.arange(BATCH_PAIRS, total, BATCH_PAIRS), side="right")
    edges = np.concatenate(([0], cuts, [len(counts)]))
    return edges[np.diff(edges, prepend=-1) != 0]


def test_edges_as_before_and_batches_bounded():
    rng = np.random.default_rng(3)
    cases = [np.zeros(0, np.int64), np.zeros(4, np.int64), np.array([3 * BATCH_PAIRS, 5, 7])]
    cases += [rng.integers(0, hi, n) for hi in (2, 60, 4000, 20000) for n in (1, 7, 300)]
    for counts in cases:
        got = batch_edges(counts)
        want = former_edges(counts)
        assert got.dtype == want.dtype
        np.testing.assert_array_equal(got, want)
        assert got[0] == 0 and got[-1] == len(counts)
        assert np.all(np.diff(got) > 0)
        for b0, b1 in zip(got[:-1], got[1:], strict=True):
            assert counts[b0 + 1 : b1].sum() < BATCH_PAIRS

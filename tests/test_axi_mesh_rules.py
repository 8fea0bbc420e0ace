"""The axisymmetric mesh keeps its own rules (DEVELOPERS.md, "Mesh"), level by level.

These are the project's rules, not physics: levels of the ratio-2 rule nest (every panel
edge of level L is an edge of level L + 1; the coarser grading ratios re-grade each level's
corner panels from the split level-0 panel, so only their level 0 nests in level 1),
neighbours along a curve differ by at most the rule's balance ratio, level-0 panels are at
most the rule's gap factor times their distance to another conductor or an image, and the
panels flagged ``at_corner`` touch a singular corner. The sampled polyline of a curve lies on
its pieces and is a fresh array at every call.
"""

from __future__ import annotations

import numpy as np
import pytest
from test_axi_grading_kernels import _probe as guarded_probe_params

from elopt.physics import geometry as geo
from elopt.physics.bem_axi.mesh import build_mesh, default_rule, level_zero_unknowns
from elopt.physics.bem_axi.solve import COARSE_RULE, CONDUCTOR_COARSE_RULE
from elopt.physics.electrodes.guarded_disk import GuardedDisk

RULES = {"default": default_rule(4), "coarse": COARSE_RULE, "conductors": CONDUCTOR_COARSE_RULE}


def _probe(fillet_mm: float) -> object:
    return GuardedDisk().build(guarded_probe_params(fillet_mm=fillet_mm))


def _edges(mesh, conductor: int) -> np.ndarray:
    """Arc-length positions of the panel edges of one conductor (m)."""
    return np.concatenate([[0.0], np.cumsum(mesh.length_m[mesh.conductor == conductor])])


@pytest.mark.parametrize("fillet_mm", [0.0, 0.05])
@pytest.mark.parametrize("rule", sorted(RULES))
def test_levels_nest_and_neighbours_stay_balanced(fillet_mm, rule):
    layout = _probe(fillet_mm)
    meshes = [build_mesh(layout, level, 4, RULES[rule]) for level in range(3)]
    nested = meshes if RULES[rule].grade_ratio == 2.0 else meshes[:2]
    for coarse, fine in zip(nested, nested[1:], strict=False):
        for c in range(len(layout.conductors)):
            e0, e1 = _edges(coarse, c), _edges(fine, c)
            tol = 1e-9 * e0[-1]
            assert abs(e0[-1] - e1[-1]) <= tol
            assert np.all(np.min(np.abs(e0[:, None] - e1[None, :]), axis=1) <= tol)
    ratio = RULES[rule].balance_ratio
    for mesh in meshes:
        for c, cond in enumerate(layout.conductors):
            lengths = mesh.length_m[mesh.conductor == c]
            pairs = np.stack([lengths[:-1], lengths[1:]])
            if cond.shape.kind == "ring":
                pairs = np.concatenate([pairs, [[lengths[-1]], [lengths[0]]]], axis=1)
            assert np.all(pairs.max(axis=0) <= ratio * pairs.min(axis=0) * (1 + 1e-9))


@pytest.mark.parametrize("fillet_mm", [0.0, 0.05])
def test_level_zero_panels_respect_the_gap_rule_and_flag_their_corners(fillet_mm):
    layout = _probe(fillet_mm)
    mesh = build_mesh(layout, 0, 4, CONDUCTOR_COARSE_RULE)
    gap_factor = CONDUCTOR_COARSE_RULE.gap_factor
    samples = [c.shape.sample(24) for c in layout.conductors]
    for c in range(len(layout.conductors)):
        others = [s for j, s in enumerate(samples) if j != c]
        others += [s * np.array([1.0, -1.0]) for s in samples]  # images in the plane
        cloud = np.concatenate(others)
        sel = mesh.conductor == c
        dist = np.min(np.linalg.norm(mesh.center_m[sel, None, :] - cloud[None], axis=-1), axis=1)
        assert np.all(mesh.length_m[sel] <= gap_factor * dist * (1 + 1e-12))
    corners = np.array(
        [k.point for cond in layout.conductors for k in cond.shape.corners() if k.singular]
    ).reshape(-1, 2)
    assert (len(corners) > 0) == (fillet_mm == 0.0)
    ends = mesh.points_m.reshape(-1, mesh.order, 2)[mesh.at_corner]
    for panel_points, length in zip(ends, mesh.length_m[mesh.at_corner], strict=True):
        d = np.min(np.linalg.norm(corners[:, None, :] - panel_points[None], axis=-1))
        assert d <= length


def test_curve_samples_lie_on_the_pieces_and_are_fresh_arrays():
    curve = geo.rounded_polyline([(0.0, 1.0), (2.0, 1.0), (2.0, 1.5), (0.0, 1.5)], 0.1)
    # Counts that divide one computed before are taken from it (its size computed 16).
    for per_piece in (1, 7, 16, 2, 4, 8, 48, 24, 12, 6, 3):
        t = np.linspace(-1.0, 1.0, per_piece + 1)
        expected = np.concatenate([p.points(t)[:-1] for p in curve.pieces] + [[curve.end]])
        got = curve.sample(per_piece)
        assert np.array_equal(got, expected)
        got[:] = 0.0
        assert np.array_equal(curve.sample(per_piece), expected)


@pytest.mark.parametrize("rule", list(RULES))
@pytest.mark.parametrize("fillet_mm", [0.0, 0.05])
def test_level_zero_unknowns_count_the_assembled_mesh(fillet_mm, rule):
    layout = _probe(fillet_mm)
    mesh = build_mesh(layout, 0, 4, RULES[rule])
    assert level_zero_unknowns(layout, 4, RULES[rule]) == mesh.n_nodes

"""Mirror-symmetric solves in planar layers and the kept remainder tables of a layer stack."""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
from test_board_pad import RECT, ROUND

from elopt.physics.bem3d import evaluate, solve_3d, sphere
from elopt.physics.bem3d.layer_tables import (
    TABLE_CACHE,
    TABLE_REL_TOL,
    TableCache,
    TableRange,
)
from elopt.physics.bem3d.layered_green import (
    LayeredBackground,
    _Part,
    extra_dense_bytes,
    remainder_matrix,
    source_rules,
)
from elopt.physics.bem3d.operators import dense_matrix
from elopt.physics.bem3d.panels import discretise
from elopt.physics.bem3d.solve import estimate_memory_bytes
from elopt.physics.bem3d.symmetry import ROWS, mirror_symmetry, symmetry_refusal
from elopt.physics.electrodes.board_copper import flat_ring
from elopt.physics.electrodes.board_pad import BoardPad, BoardPadCase, BoardPadParams
from elopt.physics.errors import SolverError
from elopt.physics.layout import Layout, driven
from elopt.physics.media import DielectricRegion, LayerStack, PlanarLayer

#: The small round key of the family's tests on a glass-epoxy board under a glass cover.
KEY = replace(ROUND, board_eps_r=4.4, cover_eps_r=7.0)


def _key(params: BoardPadParams = KEY, *, target: bool = True) -> Layout:
    return BoardPad().build(BoardPadCase(params, target=target))


def _full_and_reduced(layout: Layout):
    kw = {"rel_accuracy": 0.5, "max_level": 0, "method": "dense", "strict": False}
    return solve_3d(layout, symmetry=False, **kw), solve_3d(layout, **kw)


def test_compressed_face_derivatives_are_computed_once_per_orbit(monkeypatch):
    # Self-consistency (common practice, no source): d . grad u at a mirror image along the
    # mirrored direction equals its value at the point, so the compressed path (forced here)
    # evaluates one point per orbit and agrees with the direct sums to its tolerance.
    layout = _key()
    level = solve_3d(layout, rel_accuracy=0.5, max_level=0, strict=False).levels[-1]
    panels, dens = level.panels, level.sigma_unit
    c, n = panels.mesh.centroids_m, panels.mesh.normals
    pts = np.concatenate([c + 1e-4 * n, c - 1e-4 * n])
    dirs = np.concatenate([n, -n])
    direct = evaluate.directional_derivative(panels, dens, pts, dirs)
    asked = []
    compressed = evaluate.compressed_integrals

    def spy(panels_, dens_, pts_, *args):
        asked.append(len(pts_))
        return compressed(panels_, dens_, pts_, *args)

    monkeypatch.setattr(evaluate, "DIRECT_PAIRS", 0)
    monkeypatch.setattr(evaluate, "compressed_integrals", spy)
    folded = evaluate.directional_derivative(panels, dens, pts, dirs)
    assert asked == [mirror_symmetry(panels).n_reduced * 2]
    assert np.allclose(folded, direct, rtol=0, atol=1e-5 * np.max(np.abs(direct)))


@pytest.mark.parametrize(
    ("params", "planes"),
    [(KEY, ("x", "y")), (replace(KEY, target_offset_mm=1.5), ("y",))],
)
def test_layered_symmetric_solve_equals_the_full_solve(params, planes):
    # Self-consistency (common practice, no source): the layered kernel of horizontal layers
    # is unchanged by the mirrors x -> -x, y -> -y, so the reduced system is the full one
    # restricted to symmetric densities and both solves agree to round-off.
    layout = _key(params)
    panels = discretise(layout, 0)
    assert panels.background is not None and panels.background.kind == "stack"
    sym = mirror_symmetry(panels)
    assert sym is not None and sym.planes == planes
    full, half = _full_and_reduced(layout)
    c = full.capacitance_matrix_F
    assert np.allclose(half.capacitance_matrix_F, c, rtol=1e-10, atol=1e-10 * abs(c[0, 0]))
    assert np.allclose(half.sigma_C_per_m2, full.sigma_C_per_m2, rtol=1e-8, atol=0)


def test_symmetric_solve_in_two_half_spaces_equals_the_full_solve():
    # The one-image kernel of two half-spaces (docs/references.md item 15) is mirror
    # symmetric too; self-consistency as above (common practice, no source).
    layers = (PlanarLayer("lower", 4.0, -math.inf, 0.0),)
    disk = flat_ring(0.0, 1.0, 0.3, 0.4)
    ring = flat_ring(1.3, 2.0, 0.3, 0.4)
    layout = Layout((driven("disk", disk, 1.0), driven("ring", ring, 0.0)), layers=layers)
    panels = discretise(layout, 0)
    assert panels.background.kind == "two_half_spaces"
    assert mirror_symmetry(panels).planes == ("x", "y")
    full, half = _full_and_reduced(layout)
    c = full.capacitance_matrix_F
    assert np.allclose(half.capacitance_matrix_F, c, rtol=1e-10, atol=1e-10 * abs(c[0, 0]))


def test_reduced_rows_equal_the_full_matrix_rows():
    # The rows assembled a block at a time are the full matrix's rows bit for bit.
    panels = discretise(_key(), 0)
    rows = np.array([0, 5, panels.n // 2, panels.n - 1])
    assert np.array_equal(panels.background.dense_matrix(panels, rows), dense_matrix(panels)[rows])


def test_dielectric_bodies_in_layers_are_solved_without_symmetry_and_say_why():
    c = (0.0, 0.0, 1.5)
    layout = Layout(
        (driven("ball", sphere(0.5, center_m=c, subdivisions=1), 1.0),),
        layers=(PlanarLayer("substrate", 4.4, 0.0, 0.5),),
        ground_plane=True,
        regions=(DielectricRegion("coat", sphere(0.8, center_m=c, subdivisions=1), 3.0),),
    )
    panels = discretise(layout, 0)
    assert mirror_symmetry(panels) is None
    assert "dielectric bodies" in symmetry_refusal(panels)
    with pytest.raises(SolverError, match="no mirror symmetry with dielectric bodies"):
        solve_3d(layout, max_level=0, memory_limit_bytes=1000, strict=False)


def test_memory_estimate_of_a_symmetric_layered_level_counts_the_reduced_matrix():
    layout = _key()
    panels = discretise(layout, 0)
    r = mirror_symmetry(panels).n_reduced
    full = estimate_memory_bytes(panels, "dense", 4) + extra_dense_bytes(panels.n)
    reduced = estimate_memory_bytes(panels, "dense", 4, r) + extra_dense_bytes(
        panels.n, min(ROWS, r)
    )
    assert reduced < 0.5 * full
    limit = (full + reduced) // 2
    kw = {"rel_accuracy": 0.5, "max_level": 0, "strict": False, "memory_limit_bytes": limit}
    assert solve_3d(layout, **kw).levels[0].panels.n == panels.n
    with pytest.raises(SolverError, match="GB"):
        solve_3d(layout, symmetry=False, **kw)


def test_a_reused_table_gives_identical_matrices():
    TABLE_CACHE.clear()
    first = dense_matrix(discretise(_key(), 0))
    misses = TABLE_CACHE.misses
    assert misses > 0 and TABLE_CACHE.hits == 0
    # a new discretisation (a new background object) of the same level: every table reused
    again = dense_matrix(discretise(_key(), 0))
    assert TABLE_CACHE.misses == misses and TABLE_CACHE.hits > 0
    assert np.array_equal(first, again)
    # the next level and the companion without the finger ask for ranges the kept tables
    # cover on the copper's slab
    hits = TABLE_CACHE.hits
    dense_matrix(discretise(_key(target=False), 1))
    assert TABLE_CACHE.hits > hits


def _film_term():
    """The single remainder term of sources above a grounded film (eps_f = 4, d = 1 mm)."""
    stack = LayerStack((PlanarLayer("film", 4.0, 0.0, 1e-3),), 1.0, True)
    background = LayeredBackground(stack, [(2e-3, 4e-3, "test")], 0.02)
    s = int(background.conductor_slab[0])
    _, (placement,) = background.slab_terms(s, s)
    return placement.term


def test_a_kept_table_serves_covered_requests_only_and_to_the_tolerance():
    term = _film_term()
    cache = TableCache()
    wide = TableRange(0.03, ((2e-3, 6e-3),), 0.02, TABLE_REL_TOL)
    (kept,) = cache.tables("film", [term], wide)
    inside = TableRange(0.02, ((3e-3, 5e-3),), 0.03, TABLE_REL_TOL)
    assert cache.tables("film", [term], inside)[0] is kept
    for outside in (
        replace(inside, rho_max=0.05),
        replace(inside, ranges=((1e-3, 5e-3),)),
        replace(inside, ranges=((3e-3, 7e-3),)),
        replace(inside, rel_tol=1e-9),
    ):
        assert cache.tables("film", [term], outside)[0] is not kept
    assert cache.hits == 1 and cache.misses == 5
    # the kept table on the covered request against the film's image series: the reflection
    # function minus its limit r is -(1 - r^2) sum_n r^n e^{-2 (n+1) k d} (images of
    # docs/references.md item 15 in the film's faces and the grounded plane)
    r, d = (1.0 - 4.0) / (1.0 + 4.0), 1e-3
    rng = np.random.default_rng(3)
    rho = rng.uniform(0.0, 0.02, 2000)
    a = rng.uniform(3e-3, 5e-3, 2000)
    n = np.arange(400)[:, None]
    series = -(1 - r * r) * np.sum(r**n / np.hypot(rho, a + 2 * (n + 1) * d), axis=0)
    value = kept.evaluate(rho, a)[0]
    assert np.max(np.abs(value - series)) <= TABLE_REL_TOL * np.max(np.abs(series))


def test_flat_copper_remainder_equals_the_general_rule():
    # The bicubic table at one exponent is the cubic Hermite patch in u of its values there:
    # copper at one height takes the collapsed 1-D patches, the same matrix to rounding.
    panels = discretise(_key(target=False), 0)
    bg = panels.background
    corners, centroids, areas, diams = panels.kernel_arrays
    (s,) = np.unique(bg.source_slabs(panels))
    part = _Part(corners, centroids, areas, diams)
    _, placements = bg.slab_terms(int(s), int(s))
    tabs, prm = bg._tables(placements, centroids, corners.reshape(-1, 3), int(s), int(s))
    rules = source_rules(part, float(np.min(prm[:, 10])))
    factors = np.array(bg.factors)
    general = remainder_matrix(centroids, rules, factors, tabs, prm)
    flat = remainder_matrix(centroids, rules, factors, tabs, prm, flat=True)
    assert np.allclose(flat, general, rtol=1e-12, atol=1e-13 * np.max(np.abs(general)))


def test_fields_at_mirror_symmetric_points_are_computed_once_per_orbit():
    # Self-consistency (common practice, no source): with symmetric densities the field at a
    # mirror image is the mirrored field, so one point per orbit gives every value.
    layout = _key()
    sol = solve_3d(layout, rel_accuracy=0.5, max_level=0, strict=False)
    level = sol.levels[-1]
    panels, bg = level.panels, level.panels.background
    dens = level.sigma_unit
    c = panels.mesh.centroids_m
    pts = np.concatenate([c + [0, 0, 2e-4], c - [0, 0, 2e-4]])
    folded = bg.potential_and_gradient(panels, dens, pts)
    full = bg._potential_and_gradient(panels, dens, pts)
    for a, b in zip(folded, full, strict=True):
        assert np.allclose(a, b, rtol=1e-10, atol=1e-10 * np.max(np.abs(b)))
    # densities that are not symmetric take the full evaluation
    skew = dens * (1.0 + c[:, :1])
    assert all(
        np.array_equal(a, b)
        for a, b in zip(
            bg.potential_and_gradient(panels, skew, pts),
            bg._potential_and_gradient(panels, skew, pts),
            strict=True,
        )
    )


@pytest.mark.parametrize(
    ("params", "planes"),
    [
        (KEY, ("x", "y")),
        (replace(RECT, target_kind="finger", finger_length_mm=10.0), ("x", "y")),
        (replace(RECT, target_offset_mm=1.0), ("y",)),
    ],
)
def test_board_pad_meshes_are_mirror_symmetric_at_every_level(params, planes):
    # Round copper and fingers are rings mirrored from one quarter; a hatched pour has a
    # node on each axis; a target off the axis along x keeps only the y mirror.
    layout = _key(params)
    for level in (0, 1):
        sym = mirror_symmetry(discretise(layout, level, check=False))
        assert sym is not None and sym.planes == planes

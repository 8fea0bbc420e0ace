"""The board touch pad family: copper and target meshes, layers, parameter rules, the three
solves of one evaluation (in air and on a layered board), and the baseline, touch signal and
water-film shift against the axisymmetric solver on a round pad."""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest

from elopt.physics.bem3d import solve_3d
from elopt.physics.bem3d.checks import check_apart, check_surface
from elopt.physics.bem_axi.solve import solve_axisymmetric
from elopt.physics.electrodes.board_copper import (
    FlatRingSurface,
    HatchedFrameSheetSurface,
    flat_ring,
    hatch_breaks,
)
from elopt.physics.electrodes.board_pad import (
    BASELINE,
    FILM_CASE,
    BoardPad,
    BoardPadCase,
    BoardPadOptions,
    BoardPadParams,
    level_matched_change,
    neutral_layers_removed,
)
from elopt.physics.electrodes.registry import get_family
from elopt.physics.errors import ElectrodeError
from elopt.physics.layout import EPS0_F_PER_M, Conductor, Layout
from elopt.physics.refinement import SolveOptions

#: A small round key in air (every permittivity 1: the homogeneous solve).
ROUND = BoardPadParams(
    pad_shape="round",
    pad_length_mm=6.0,
    clearance_mm=0.8,
    pour_size_mm=12.0,
    board_thickness_mm=1.0,
    board_eps_r=1.0,
    cover_thickness_mm=1.0,
    cover_eps_r=1.0,
    target_distance_mm=1.0,
    drive_V=3.3,
    target_size_mm=6.0,
    finger_length_mm=10.0,
)
RECT = replace(
    ROUND,
    pad_shape="rect",
    pad_length_mm=6.0,
    pad_width_mm=4.0,
    pour_size_mm=14.0,
    hatch_pitch_mm=2.0,
    hatch_line_mm=0.5,
    target_kind="plate",
    target_size_mm=8.0,
)
COARSE = BoardPadOptions(mesh_step_mm=1.5, max_level=1)


def axisymmetric(layout: Layout, keep: int) -> Layout:
    """The first ``keep`` conductors of a round, centred design as generating curves."""
    conductors = tuple(
        replace(c, shape=getattr(c.shape, "curve", None) or c.shape.generating_curve())
        for c in layout.conductors[:keep]
    )
    return replace(layout, conductors=conductors)


def test_registered_and_every_mesh_valid_and_apart():
    fam = get_family("board_pad")
    assert isinstance(fam, BoardPad)
    for params in (ROUND, RECT, replace(ROUND, target_offset_mm=3.0, back_ground=False)):
        layout = fam.build(params, options=COARSE)
        assert layout.names == ("pad", "pour", "target")
        assert layout.ground_plane == params.back_ground
        meshes = [c.shape.mesh(0) for c in layout.conductors]
        for mesh, c in zip(meshes, layout.conductors, strict=True):
            check_surface(mesh, c.name)
        for i in range(3):
            for j in range(i + 1, 3):
                check_apart(meshes[i], layout.names[i], meshes[j], layout.names[j])
        # Copper on the board's top face, normals up; the target above the cover.
        for mesh in meshes[:2]:
            assert np.allclose(mesh.vertices_m[:, 2], 1.0e-3)
            assert np.all(mesh.normals[:, 2] > 0.99)
        assert meshes[2].vertices_m[:, 2].min() == pytest.approx(3.0e-3, rel=1e-9)


def test_round_copper_areas_converge_to_the_disk_and_annulus():
    # Ring radii are set so each polygon has its circle's area (the mesh's own device); the
    # areas are plain geometry: pi R^2 and pi (R2^2 - R1^2).
    pad, pour = flat_ring(0.0, 3e-3, 1e-3, 1.5e-3), flat_ring(3.8e-3, 6e-3, 1e-3, 1.5e-3)
    for level in range(3):
        assert pad.mesh(level).area_m2 == pytest.approx(math.pi * 9e-6, rel=2e-3)
        assert pour.mesh(level).area_m2 == pytest.approx(math.pi * (36e-6 - 3.8e-3**2), rel=2e-3)
        # The panel count the size check uses is the mesh's own.
        assert pad.estimated_panels(level) == pad.mesh(level).n_triangles
        assert pour.estimated_panels(level) == pour.mesh(level).n_triangles


def test_disk_mesh_gives_the_published_disk_capacitance():
    # docs/references.md case 2 (Landau & Lifshitz): an isolated thin disk has C = 8 eps0 R.
    radius = 3e-3
    layout = Layout((Conductor("disk", FlatRingSurface(0.0, radius, 0.0, 1.0e-3), 1.0),))
    sol = solve_3d(layout, rel_accuracy=1e-3, max_level=2)
    exact = 8 * EPS0_F_PER_M * radius
    err = abs(sol.capacitance_matrix_F[0, 0] / exact - 1)
    assert err <= sol.rel_error_estimate
    assert err < 2e-3


def test_hatched_pour_copper_area_is_outline_less_openings():
    # Square outline 14 mm, hole 8 x 6 mm, pitch 2 mm, lines 0.5 mm: the lines sit on x = k p
    # and y = k p. Copper = frame area less the open squares of the hatch, counted here
    # directly from the line positions (independent of the grid the mesh uses).
    surf = HatchedFrameSheetSurface((14e-3, 14e-3), (8e-3, 6e-3), 1e-3, 1.5e-3, 2e-3, 0.5e-3)
    n = 1400
    x = (np.arange(n) + 0.5) / n * 14e-3 - 7e-3
    xx, yy = np.meshgrid(x, x, indexing="ij")
    ax, ay = np.abs(xx), np.abs(yy)
    frame = ~((ax < 4e-3) & (ay < 3e-3))
    border = (ax > 6.5e-3) | (ay > 6.5e-3) | ((ax < 4.5e-3) & (ay < 3.5e-3))
    line_x = np.abs(xx - 2e-3 * np.round(xx / 2e-3)) < 0.25e-3
    line_y = np.abs(yy - 2e-3 * np.round(yy / 2e-3)) < 0.25e-3
    copper = frame & (border | line_x | line_y)
    expected = copper.mean() * (14e-3) ** 2
    for level in (0, 1):
        mesh = surf.mesh(level)
        check_surface(mesh, "pour")
        assert mesh.area_m2 == pytest.approx(expected, rel=2e-3)
        assert surf.estimated_panels(level) == mesh.n_triangles
    # Solid copper fills less than the outline: the hatch opens part of it.
    assert expected < (14e-3**2 - 48e-6) * 0.8


def test_hatch_edges_are_sorted_and_merge_near_duplicates():
    edges = hatch_breaks(7e-3, 4e-3, 2e-3, 0.5e-3)
    assert edges[0] == -7e-3 and edges[-1] == 7e-3
    assert np.all(np.diff(edges) > 0.02 * 0.5e-3)
    # A line edge 1 um from the border track's edge merges into it.
    close = hatch_breaks(7e-3, 4e-3, 2.0e-3 * (6.249 / 6.0), 0.5e-3)
    assert np.all(np.diff(close) > 0.02 * 0.5e-3)


def test_layers_board_cover_and_film():
    fam = BoardPad()
    p = replace(ROUND, cover_gap_mm=0.5, film_thickness_um=100.0, board_eps_r=4.4, cover_eps_r=3)
    touch = fam.build(p, options=COARSE)
    assert [(ly.name, ly.eps_r) for ly in touch.layers] == [("board", 4.4), ("cover", 3.0)]
    board, cover = touch.layers
    assert (board.z_bottom_m, board.z_top_m) == (0.0, 1.0e-3)
    assert cover.z_bottom_m == pytest.approx(1.5e-3) and cover.z_top_m == pytest.approx(2.5e-3)
    film = fam.build(BoardPadCase(p, target=False, film=True), options=COARSE)
    assert film.names == ("pad", "pour")
    water = film.layers[-1]
    assert (water.name, water.eps_r) == ("water film", 80.0)
    assert water.z_bottom_m == pytest.approx(2.5e-3)
    assert water.thickness_m == pytest.approx(100e-6)
    # No cover: no cover layer; the film lies on the board.
    bare = fam.build(
        BoardPadCase(replace(p, cover_thickness_mm=0.0, cover_gap_mm=0.0), False, True)
    )
    assert [ly.name for ly in bare.layers] == ["board", "water film"]
    assert fam.companion_designs(p, COARSE).keys() == {BASELINE, FILM_CASE}
    assert fam.companion_designs(ROUND, COARSE).keys() == {BASELINE}


@pytest.mark.parametrize(
    ("change", "needle"),
    [
        ({"clearance_mm": 0.0}, "clearance_mm = 0 must be > 0"),
        ({"clearance_mm": -1.0}, "clearance_mm = -1 must be > 0"),
        ({"pour_size_mm": 7.0}, "pour_size_mm = 7 must be > the pad's larger side"),
        ({"cover_thickness_mm": -0.5}, "cover_thickness_mm = -0.5 must be >= 0"),
        ({"board_eps_r": 0.0}, "board_eps_r = 0 must be >= 1"),
        ({"cover_eps_r": -2.0}, "cover_eps_r = -2 must be >= 1"),
        ({"film_eps_r": 0.5}, "film_eps_r = 0.5 must be >= 1"),
        ({"target_distance_mm": 0.0}, "target_distance_mm = 0 must be > 0"),
        ({"board_thickness_mm": 0.0}, "board_thickness_mm = 0 must be > 0"),
        ({"pad_shape": "oval"}, "pad_shape = 'oval' must be one of round, rect"),
        ({"target_kind": "hand"}, "target_kind = 'hand' must be one of finger, plate"),
        ({"hatch_pitch_mm": 1.0, "hatch_line_mm": 0.2}, "needs pad_shape = 'rect'"),
        ({"finger_length_mm": 4.0}, "finger_length_mm = 4 must be >= target_size_mm = 6"),
        ({"drive_V": 0.0}, "drive_V = 0"),
        ({"pad_length_mm": math.nan}, "pad_length_mm = nan must be a finite number"),
    ],
)
def test_bad_input_is_one_line_naming_key_value_and_rule(change, needle):
    with pytest.raises(ElectrodeError) as info:
        BoardPad().build(replace(ROUND, **change), options=COARSE)
    text = str(info.value)
    assert "\n" not in text and text.startswith("board_pad: ")
    assert needle in text


@pytest.mark.parametrize(
    ("change", "needle"),
    [
        ({"hatch_line_mm": 2.0}, "hatch_line_mm = 2 must lie in (0, hatch_pitch_mm = 2)"),
        ({"pad_width_mm": 0.0}, "pad_width_mm = 0 must be > 0 for a rect pad"),
        ({"pour_size_mm": 9.0}, "+ 4 hatch_line_mm (two border tracks a side) = 9.6"),
    ],
)
def test_bad_rectangular_pad_input(change, needle):
    with pytest.raises(ElectrodeError, match="board_pad: ") as info:
        BoardPad().validate(replace(RECT, **change))
    assert needle in str(info.value)


@pytest.fixture(scope="module")
def round_evaluation():
    return BoardPad().evaluate(ROUND, rel_accuracy=1e-2, options=COARSE)


def test_evaluation_runs_end_to_end_in_air(round_evaluation):
    ev = round_evaluation
    got = ev.metrics
    assert set(got) == {s.name for s in BoardPad.metric_catalog()}
    signal = got["touch_signal_fF"]
    baseline = got["baseline_capacitance_pF"] * 1e3
    assert 0 < signal < baseline
    assert got["signal_to_baseline_pct"] == pytest.approx(100 * signal / baseline)
    # No film given: no film solve, no margin.
    assert got["film_shift_fF"] == 0.0 and math.isnan(got["false_trigger_margin"])
    assert got["peak_surface_field_V_per_m"] > 0
    # The peak sits on the copper (the pad's rim or the pour's clearance edge).
    r = math.hypot(got["peak_field_x_mm"], got["peak_field_y_mm"])
    assert got["peak_field_z_mm"] == pytest.approx(1.0)
    assert 2.5 < r < 4.0
    extra = ev.extra
    assert extra["sense_capacitance_F"] == pytest.approx(baseline * 1e-15 + signal * 1e-15)
    assert 0 < extra["touch_signal_error_estimate_F"] < 0.5 * signal * 1e-15


def test_signal_agrees_with_the_axisymmetric_solver(round_evaluation):
    # Round pad, round solid pour and a finger on the axis form a body of revolution: the
    # axisymmetric solver (rings of high-order panels, an independent discretisation) solves
    # the same layout from the same generating curves.
    ev = round_evaluation
    layout = ev.solution.layout
    touch = solve_axisymmetric(axisymmetric(layout, 3), rel_accuracy=1e-6)
    base = solve_axisymmetric(axisymmetric(layout, 2), rel_accuracy=1e-6)
    c_touch, c_base = touch.capacitance_matrix_F[0, 0], base.capacitance_matrix_F[0, 0]
    c3 = ev.extra["baseline_capacitance_F"]
    assert abs(c3 - c_base) <= ev.extra["baseline_rel_error_estimate"] * c_base
    signal3 = ev.metrics["touch_signal_fF"] * 1e-15
    assert abs(signal3 - (c_touch - c_base)) <= ev.extra["touch_signal_error_estimate_F"]
    # The touch solve's estimate covers C_pad,pad, the one entry its metrics read: it holds
    # against the same independent solve.
    sol = ev.solution
    assert sol.estimate_covers == ("pad",) and sol.estimate_scope == "C[pad, pad]"
    assert abs(sol.capacitance_matrix_F[0, 0] / c_touch - 1) <= sol.rel_error_estimate


def test_rectangular_hatched_pad_under_a_plate_and_an_offset_finger():
    fam = BoardPad()
    options = BoardPadOptions(mesh_step_mm=2.0, max_level=1)
    plate = fam.evaluate(RECT, rel_accuracy=5e-2, options=options).metrics
    moved = replace(RECT, target_kind="finger", target_size_mm=6.0, finger_length_mm=10.0)
    centred = fam.evaluate(moved, rel_accuracy=5e-2, options=options).metrics
    off = fam.evaluate(replace(moved, target_offset_mm=6.0), rel_accuracy=5e-2, options=options)
    assert plate["touch_signal_fF"] > centred["touch_signal_fF"] > 0
    # The same pad and pour: the same baseline whatever the target.
    assert plate["baseline_capacitance_pF"] == centred["baseline_capacitance_pF"]
    # A finger over the pour, beside the pad, gives less signal than one over the pad.
    assert 0 < off.metrics["touch_signal_fF"] < centred["touch_signal_fF"]


def test_level_matched_change_uses_the_finest_common_level(round_evaluation):
    ev = round_evaluation
    touch = ev.solution
    base = solve_3d(
        neutral_layers_removed(BoardPad().build(BoardPadCase(ROUND, target=False), options=COARSE)),
        rel_accuracy=1e-6,
        max_level=0,
        strict=False,
    )
    value, err = level_matched_change(touch, base, 0)
    expected = touch.levels[0].capacitance_F[0, 0] - base.levels[0].capacitance_F[0, 0]
    assert value == pytest.approx(expected, rel=1e-12)
    assert math.isnan(err)


AIR_KEY = """
[geometry]
family = "board_pad"
pad_shape = "round"
pad_length_mm = 6.0
clearance_mm = 0.8
pour_size_mm = 12.0
board_thickness_mm = 1.0
board_eps_r = 1.0
cover_thickness_mm = 1.0
cover_eps_r = 1.0
target_distance_mm = 1.0
target_size_mm = 6.0
finger_length_mm = 10.0
drive_V = 3.3

[solver]
rel_accuracy = 0.05

[evaluation]
mesh_step_mm = 1.5
max_level = 1
"""


def test_command_line_solve_of_an_air_key_gives_strict_json(tmp_path, capsys):
    import json

    from elopt.optimizer.cli.main import main

    path = tmp_path / "key.toml"
    path.write_text(AIR_KEY)
    assert main(["solve", str(path), "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    text = json.dumps(out)
    assert "touch_signal_fF" in text and "NaN" not in text
    # The record says which entries the estimate covers, and the whole matrix's estimate.
    assert out["relative_error_estimate_covers"] == ["pad"]
    assert out["matrix_relative_error_estimate"] >= 0.0
    assert [c["name"] for c in out["conductors"]] == ["pad", "pour", "target"]


def test_a_study_trial_in_air_takes_text_and_flag_parameters_as_fixed_values():
    import tomllib

    from elopt.optimizer.config import parse_study_config
    from elopt.optimizer.export.trial_config import toml_key, toml_value
    from elopt.optimizer.study import evaluate_task, trial_task

    geometry = tomllib.loads(AIR_KEY)["geometry"]
    fixed = {k: v for k, v in geometry.items() if k not in ("family", "pad_length_mm")}
    fixed["back_ground"] = False
    lines = "".join(f"{toml_key(k)} = {toml_value(v)}\n" for k, v in fixed.items())
    text = (
        '[study]\nname = "air_key"\nfamily = "board_pad"\n\n[solver]\nrel_accuracy = 0.05\n\n'
        "[evaluation]\nmesh_step_mm = 1.5\nmax_level = 1\n\n[fixed]\n"
        + lines
        + "\n[search]\npad_length_mm = { low = 4.0, high = 7.0 }\n"
        + '\n[objectives]\ntouch_signal_fF = "maximize"\n\n[budget]\ntrials = 1\n'
    )
    spec = parse_study_config(tomllib.loads(text), text, source="air_key.toml")
    outcome = evaluate_task(trial_task(spec, 0, {"pad_length_mm": 5.0}))
    assert outcome.ok, outcome.failure
    assert outcome.metrics["touch_signal_fF"] > 0


def test_too_fine_a_mesh_is_refused_before_meshing_naming_its_cause():
    fine = BoardPadOptions(mesh_step_mm=0.01, max_level=1)
    with pytest.raises(ElectrodeError) as info:
        BoardPad().build(RECT, options=fine)
    text = str(info.value)
    assert "mesh_step_mm = 0.01" in text and "panels at refinement level 1" in text
    tiny = replace(ROUND, clearance_mm=0.001, pour_size_mm=7.0)
    with pytest.raises(ElectrodeError, match="clearance_mm = 0.001 sets the panel size"):
        BoardPad().build(tiny)
    absurd = BoardPadOptions(mesh_step_mm=1e-9, max_level=1)
    for params in (ROUND, RECT):
        with pytest.raises(ElectrodeError, match="mesh_step_mm = 1e-09"):
            BoardPad().build(params, options=absurd)


@pytest.mark.slow
def test_baseline_and_water_film_on_a_layered_board_agree_with_the_axisymmetric_solver():
    # Board eps_r 4.4, cover 3 bonded on, a 0.1 mm water film: the copper lies on the
    # board/cover face. The axisymmetric solver takes the same layer stack
    # (physics/bem_axi/layered_kernel.py); an independent discretisation of the same problem.
    fam = BoardPad()
    p = replace(ROUND, board_eps_r=4.4, cover_eps_r=3.0, film_thickness_um=100.0)
    solved = {}
    for key, case in fam.companion_designs(p, COARSE).items():
        layout = fam.build(case, options=COARSE)
        sol3 = fam.solve(layout, solve_options=SolveOptions(rel_accuracy=1e-3), options=COARSE)
        axi = solve_axisymmetric(axisymmetric(layout, 2), rel_accuracy=1e-6)
        c3, ca = sol3.capacitance_matrix_F[0, 0], axi.capacitance_matrix_F[0, 0]
        assert abs(c3 - ca) <= sol3.rel_error_estimate * ca, key
        solved[key] = (sol3, ca)
    (base3, base_axi), (film3, film_axi) = solved[BASELINE], solved[FILM_CASE]
    shift, err = level_matched_change(film3, base3, 0)
    assert shift > 0
    assert abs(shift - (film_axi - base_axi)) <= err


@pytest.mark.slow
def test_a_glass_cover_raises_the_touch_signal_and_a_water_film_the_baseline():
    # Physics of the trade, no published value: the finger couples to the pad through the
    # cover, so a cover of higher permittivity passes more of its field (larger signal); a
    # water film on the cover couples the pad to the pour around it (the baseline rises).
    fam = BoardPad()
    options = BoardPadOptions(mesh_step_mm=2.0, max_level=1)
    plastic = replace(ROUND, board_eps_r=4.4, cover_eps_r=2.0, film_thickness_um=100.0)
    glass = replace(plastic, cover_eps_r=7.0)
    got = {
        name: fam.evaluate(p, rel_accuracy=1e-2, options=options)
        for name, p in (("plastic", plastic), ("glass", glass))
    }
    for ev in got.values():
        assert ev.metrics["film_shift_fF"] > ev.extra["film_shift_error_estimate_F"] * 1e15
        margin = ev.metrics["touch_signal_fF"] / ev.metrics["film_shift_fF"]
        assert ev.metrics["false_trigger_margin"] == pytest.approx(margin)
    s_plastic = got["plastic"].metrics["touch_signal_fF"]
    s_glass = got["glass"].metrics["touch_signal_fF"]
    err = got["plastic"].extra["touch_signal_error_estimate_F"] * 1e15
    err += got["glass"].extra["touch_signal_error_estimate_F"] * 1e15
    assert s_glass - s_plastic > err

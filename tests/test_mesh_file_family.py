"""The mesh_file family through ``elopt solve``: conductors from STL/OBJ/PLY files."""

from __future__ import annotations

import json

import numpy as np
import pytest
import trimesh
from reference_values import sphere_above_plane_capacitance_F

from elopt.optimizer.cli.main import main
from elopt.physics.bem3d.generators import icosphere


def _ball(
    path, radius_mm: float, center_mm: tuple[float, float, float], subdivisions: int = 2
) -> None:
    m = icosphere(subdivisions)
    trimesh.Trimesh(
        m.vertices_m * radius_mm + np.asarray(center_mm), m.triangles, process=False
    ).export(path)


def _config(tmp_path, body: str) -> str:
    cfg = tmp_path / "design.toml"
    cfg.write_text(body, encoding="utf-8")
    return str(cfg)


BALL = """
[geometry]
family = "mesh_file"
ground_plane = true
[[geometry.conductors]]
name = "tip"
file = "ball.stl"
length_unit = "mm"
potential_V = 5.0
[solver]
rel_accuracy = 1e-3
[evaluation]
max_level = 1
"""


def test_solve_json_of_a_ball_over_the_plane(tmp_path, capsys):
    _ball(tmp_path / "ball.stl", 2.0, (0.0, 0.0, 3.0))
    assert main(["solve", _config(tmp_path, BALL), "--json"]) == 0
    rec = json.loads(capsys.readouterr().out)
    for key in (
        "capacitance_matrix_F",
        "charges_C",
        "sense_capacitance_F",
        "peak_surface_field_V_per_m",
        "peak_location_m",
        "relative_error_estimate",
        "accuracy_met",
        "n_unknowns",
        "metric_units",
    ):
        assert key in rec
    # Sphere R = 2 mm, centre 3 mm above a grounded plane: image series (Smythe, Static and
    # Dynamic Electricity, 3rd ed. (1968), ch. 5, from memory; docs/references.md item 6). The
    # file's mesh is a 320-face polyhedron inscribed in the sphere, which has a little less
    # capacitance: compare within 2 %, and below.
    exact = sphere_above_plane_capacitance_F(2e-3, 3e-3)
    c = rec["capacitance_matrix_F"][0][0]
    assert 0.98 * exact < c < exact
    assert rec["sense_capacitance_F"] == pytest.approx(c, rel=1e-12)
    assert rec["sensitivity_fF_per_um"] > 0
    assert len(rec["peak_location_m"]) == 3


def test_text_report_of_a_floating_pair(tmp_path, capsys):
    _ball(tmp_path / "a.obj", 1.0, (0.0, 0.0, 0.0))
    _ball(tmp_path / "b.ply", 1.0, (3.0, 0.0, 0.0))
    body = """
[geometry]
family = "mesh_file"
[[geometry.conductors]]
name = "a"
file = "a.obj"
length_unit = "cm"
potential_V = 1.0
[[geometry.conductors]]
name = "b"
file = "b.ply"
length_unit = "cm"
charge_C = 0.0
[evaluation]
max_level = 1
"""
    assert main(["solve", _config(tmp_path, body)]) == 0
    out = capsys.readouterr().out
    assert "Capacitance matrix" in out and "on " in out and "x = " in out


@pytest.mark.parametrize(
    ("edit", "words"),
    [
        (('length_unit = "mm"', 'length_unit = "furlong"'), "length_unit 'furlong' is not one of"),
        (('file = "ball.stl"', 'file = "nothere.stl"'), "no such mesh file"),
        (("potential_V = 5.0", "potential_V = 5.0\ncharge_C = 0.0"), "exactly one of potential_V"),
        (("potential_V = 5.0", "potental_V = 5.0"), "conductors[0].potental_V: unknown key"),
        (("ground_plane = true", "ground_plane = 1"), "ground_plane: expected true or false"),
        (("max_level = 1", "max_level = 9"), "max_level = 9 must be a whole number in [1, 5]"),
    ],
)
def test_bad_configs_get_one_line_and_exit_2(tmp_path, capsys, edit, words):
    _ball(tmp_path / "ball.stl", 2.0, (0.0, 0.0, 3.0))
    assert main(["solve", _config(tmp_path, BALL.replace(*edit)), "--json"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("elopt: error: ") and words in err
    assert err.count("\n") == 1


def test_mesh_through_the_plane_is_refused(tmp_path, capsys):
    _ball(tmp_path / "ball.stl", 2.0, (0.0, 0.0, 1.0))
    assert main(["solve", _config(tmp_path, BALL)]) == 2
    err = capsys.readouterr().err
    assert "touches or crosses the ground plane" in err and err.count("\n") == 1

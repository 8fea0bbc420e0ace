"""One test per class of bad input found by a careless-user sweep: each cause fixed at its root.

Tracebacks, unbounded work, silent wrong answers, a false refusal, and errors that do not
help. The property-based sweep over the same ground is ``test_bad_input_contract.py``.
"""

from __future__ import annotations

import dataclasses
import json
import math
import os
import time
import warnings
from pathlib import Path

import numpy as np
import pytest
from fuzz_support.cases import base_solve_configs, base_study_config, octahedron_stl, toml_text

from elopt.optimizer.cli import solve as solve_cli
from elopt.optimizer.cli.main import main
from elopt.optimizer.config.solve_config import read_solve_config
from elopt.optimizer.config.study_config import load_study_config
from elopt.optimizer.config.toml_tools import load_toml
from elopt.optimizer.errors import ConfigError
from elopt.physics import geometry as geo
from elopt.physics.bem3d.grading import axis_node_count, axis_nodes
from elopt.physics.bem3d.mesh_io import load_mesh_surface
from elopt.physics.bem3d.surfaces import BoxSurface, FrameSheetSurface, FrameSurface
from elopt.physics.electrodes.guarded_disk import (
    GuardedDisk,
    GuardedDiskOptions,
    GuardedDiskParams,
    guard_curve,
)
from elopt.physics.electrodes.guarded_pad import GuardedPad, GuardedPadOptions, GuardedPadParams
from elopt.physics.electrodes.pipeline import evaluate_design
from elopt.physics.electrodes.registry import FAMILIES, get_family
from elopt.physics.electrodes.target_spot import radial_grid, radial_grid_size
from elopt.physics.errors import ElectrodeError, ElOptError, GeometryError, SolverError

REPO = Path(__file__).resolve().parents[1]
DISK = base_solve_configs()["guarded_disk"]
DISK_PARAMS = GuardedDiskParams(2.0, 0.2, 1.5, 1.0, 0.1, 0.5, 10.0)


def _write(tmp_path: Path, data: bytes | str, name: str = "design.toml") -> Path:
    path = tmp_path / name
    path.write_bytes(data.encode("utf-8") if isinstance(data, str) else data)
    return path


def _cli(capsys, *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def _one_line_refusal(code: int, err: str, *words: str) -> str:
    assert code == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert lines[0].startswith("elopt: error: ")
    for w in words:
        assert w in lines[0], (w, lines[0])
    return lines[0]


# ------------------------------------------------------------------ 1. tracebacks


@pytest.mark.parametrize(
    "data, words",
    [
        ('title = "sonde à garde"\n'.encode("latin-1"), ["not UTF-8", "line 1, column 16"]),
        ('title = "probe"\n'.encode("utf-16"), ["UTF-16"]),
        (b"\x89HDF\r\n\x1a\n" + b"\0" * 64, ["HDF5 study file", "elopt resume"]),
        (b"a = " + b"[" * 100_000 + b"]" * 100_000 + b"\n", ["nested too deeply"]),
        (b"a = " + b"[" * 40 + b"]" * 40 + b"\n", ["more than 32 levels"]),
    ],
)
def test_config_bytes_that_are_no_toml_text_are_one_line_errors(tmp_path, data, words):
    path = _write(tmp_path, data)
    with pytest.raises(ConfigError) as info:
        load_toml(path)
    msg = str(info.value)
    assert msg.startswith(str(path)) and "\n" not in msg
    for w in words:
        assert w in msg


def test_a_study_file_given_to_solve_or_run_is_refused(capsys, tmp_path):
    study = Path(__file__).parent / "data" / "study_v1.h5"
    for verb in (("solve",), ("run", "--out", str(tmp_path / "new.h5"))):
        code, _, err = _cli(capsys, verb[0], str(study), *verb[1:])
        _one_line_refusal(code, err, str(study), "HDF5 study file")
    assert not (tmp_path / "new.h5").exists()


def test_a_byte_order_mark_is_dropped(tmp_path):
    text = toml_text(DISK)
    plain = load_toml(_write(tmp_path, text, "plain.toml"))[0]
    marked = load_toml(_write(tmp_path, b"\xef\xbb\xbf" + text.encode(), "bom.toml"))[0]
    assert marked == plain


@pytest.mark.timeout(30)
def test_a_fifo_or_a_directory_as_config_is_refused_without_blocking(tmp_path):
    fifo = tmp_path / "pipe.toml"
    os.mkfifo(fifo)
    with pytest.raises(ConfigError, match="not a regular file"):
        load_toml(fifo)
    with pytest.raises(ConfigError, match="is a directory"):
        load_toml(tmp_path)


def test_an_oversized_config_is_refused_before_it_is_read(tmp_path):
    path = _write(tmp_path, b"# x\n" * 300_000)
    with pytest.raises(ConfigError, match="at most 1000000 bytes"):
        load_toml(path)


def test_a_nanometre_pad_is_refused_before_meshing():
    p = GuardedPadParams(4e-6, 3.0, 0.2, 1.5, 0.5, 0.0, 0.5, 10.0)
    t0 = time.perf_counter()
    with pytest.raises(ElOptError) as info:
        GuardedPad().evaluate(p, rel_accuracy=1e-2)
    assert time.perf_counter() - t0 < 10.0  # nothing of the size asked was built
    assert "panels" in str(info.value)


def test_a_surface_refuses_to_mesh_beyond_its_limit_with_the_numbers():
    with pytest.raises(SolverError, match=r"about 4.8e\+19 panels; at most 5e\+06"):
        BoxSurface((1.0, 1.0, 1.0), 1e-9).mesh(0)


@pytest.mark.parametrize(
    "surface",
    [
        BoxSurface((4e-3, 3e-3, 5e-4), 7.5e-4, fillet_m=1e-4),
        BoxSurface((4e-3, 3e-3, 5e-4), 7.5e-4),
        FrameSurface((7.4e-3, 6.4e-3), (4.4e-3, 3.4e-3), 5e-4, 5e-4, 7.5e-4, fillet_m=1e-4),
        FrameSheetSurface((7.4e-3, 6.4e-3), (4.4e-3, 3.4e-3), 5e-4, 7.5e-4),
    ],
)
def test_panel_estimates_bound_the_real_count_within_a_factor_of_three(surface):
    for level in (0, 1):
        real = surface.mesh(level).n_triangles
        assert real <= surface.estimated_panels(level) <= 3 * real


def test_node_counts_match_the_nodes_made():
    for breaks, fillet in (([0.0, 1.0], 0.0), ([-1.0, -0.3, 0.3, 1.0], 0.05), ([0, 2.0], 0.4)):
        for level in (0, 2):
            made = len(axis_nodes(breaks, 0.1, level, fillet=fillet, grade=2.0))
            counted = axis_node_count(breaks, 0.1, level, fillet=fillet, grade=2.0)
            assert made <= counted <= made + len(breaks)


@pytest.mark.parametrize(
    "search, words",
    [
        ({"low": 0.2, "high": 3.0, "step": 1e-300}, ["search.guard_width_mm.step", "steps"]),
        ({"low": 0.2, "high": 3.0, "step": 1e-9}, ["at most 1e+06"]),
    ],
)
def test_an_absurd_step_is_refused_and_nothing_is_written(capsys, tmp_path, search, words):
    table = base_study_config()
    table["search"]["guard_width_mm"] = search
    cfg = _write(tmp_path, toml_text(table), "study.toml")
    out = tmp_path / "study.h5"
    code, _, err = _cli(capsys, "run", str(cfg), "--out", str(out), "--trials", "1")
    _one_line_refusal(code, err, str(cfg), *words)
    assert not out.exists()


@pytest.mark.parametrize(
    "ref, words",
    [
        ("elopt.physics.layout:Layout", ["class Layout", "not an ElectrodeFamily"]),
        ("elopt.physics.electrodes.base:ElectrodeFamily", ["cannot be created"]),
        ("elopt.physics.electrodes.registry:FAMILIES", ["is a dict"]),
        (":", ["cannot load"]),
    ],
)
def test_a_study_family_that_is_no_family_is_refused(tmp_path, ref, words):
    table = base_study_config()
    table["study"]["family"] = ref
    cfg = _write(tmp_path, toml_text(table), "study.toml")
    with pytest.raises(ConfigError) as info:
        load_study_config(cfg)
    msg = str(info.value)
    assert msg.startswith(f"{cfg}: study.family")
    for w in words:
        assert w in msg


# ------------------------------------------------------------------ 2. unbounded work


@pytest.mark.parametrize(
    "change", [{"standoff_mm": 1e6}, {"sensor_radius_mm": 2e6}, {"standoff_mm": 1e-5}]
)
def test_a_target_grid_out_of_reach_is_refused_by_the_rules(change):
    p = GuardedDiskParams(**{**DISK_PARAMS.__dict__, **change})
    with pytest.raises(ElectrodeError) as info:
        GuardedDisk().validate(p)
    msg = str(info.value)
    assert "target grid" in msg and "standoff_mm" in msg and "at most 100000" in msg


@pytest.mark.parametrize("args", [(1e-4, 5e-3, 0.25), (2e-5, 0.4, 20.0), (1.0, 0.5, 0.2)])
def test_radial_grid_size_is_the_length_of_the_grid(args):
    assert radial_grid_size(*args) == len(radial_grid(*args))


# ------------------------------------------------------------------ 3. silent wrong answers


def _mesh_file_config(tmp_path: Path, drive: str) -> Path:
    (tmp_path / "tip.stl").write_bytes(octahedron_stl())
    return _write(
        tmp_path,
        f"""
[geometry]
family = "mesh_file"
ground_plane = true
[[geometry.conductors]]
name = "tip"
file = "tip.stl"
length_unit = "mm"
{drive}
[solver]
rel_accuracy = 1e-2
[evaluation]
max_level = 1
""",
    )


@pytest.mark.parametrize(
    "drive, why", [("charge_C = 0.0", "floats"), ("potential_V = 0.0", "is at 0 V")]
)
def test_an_undefined_sense_capacitance_is_null_with_a_reason(capsys, tmp_path, drive, why):
    code, out, _ = _cli(capsys, "solve", str(_mesh_file_config(tmp_path, drive)), "--json")
    assert code == 0

    def refuse(name):
        raise AssertionError(f"non-strict JSON: {name}")

    rec = json.loads(out, parse_constant=refuse)
    assert rec["sense_capacitance_fF"] is None and rec["sense_capacitance_F"] is None
    assert any(
        w.startswith("sense_capacitance_fF is undefined") and why in w and "'tip'" in w
        for w in rec["warnings"]
    ), rec["warnings"]
    for name in rec["metric_units"]:
        assert rec[name] is not None or any(w.startswith(name) for w in rec["warnings"])


def test_a_permittivity_beyond_its_range_is_refused(tmp_path):
    table = {**DISK, "medium": {"eps_r": 1e300}}
    cfg = _write(tmp_path, toml_text(table))
    with pytest.raises(ConfigError, match=r"medium.eps_r: 1e\+300 is outside .*100000"):
        read_solve_config(cfg)


def test_the_largest_permittivity_allowed_gives_finite_metrics_without_warnings(tmp_path):
    table = {**DISK, "medium": {"eps_r": 1e5}}
    spec = read_solve_config(_write(tmp_path, toml_text(table)))
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        ev = GuardedDisk().evaluate(spec.params, rel_accuracy=1e-2, eps_r=spec.eps_r)
    assert all(math.isfinite(v) for v in ev.metrics.values())


# ------------------------------------------------------------------ 4. false refusal


@pytest.mark.parametrize("standoff_mm", [0.375, 0.5, 0.625, 0.75])
def test_a_fillet_exactly_at_its_limit_is_accepted_at_every_standoff(standoff_mm):
    # guard width 1.0, thickness 1.0, fillet 0.5 mm: the guard's faces shrink to nothing
    p = GuardedDiskParams(2.0, 0.2, 1.0, 1.0, 0.5, standoff_mm, 10.0)
    layout = GuardedDisk().build(p)
    assert layout.names == ("sensor", "guard")


def test_a_ring_outline_closes_exactly():
    curve = guard_curve(GuardedDiskParams(2.0, 0.2, 1.0, 1.0, 0.5, 0.625, 10.0))
    outline = geo.closed_outline(curve)
    assert np.array_equal(outline[0], outline[-1])
    # a point level with the seam, left of the ring, is outside it
    seam = outline[0]
    assert not geo.point_in_region(np.array([[0.0, seam[1]]]), outline)[0]


def test_point_in_region_closes_an_open_outline():
    square = np.array([[0.0, 0.0], [1.0, 0.0], [1.0, 1.0], [0.0, 1.0]])
    inside = geo.point_in_region(np.array([[0.5, 0.5], [1.5, 0.5]]), square)
    assert inside.tolist() == [True, False]


# ------------------------------------------------------------------ 5. errors that help


def test_geometry_messages_give_points_not_piece_numbers_or_numpy_reprs():
    with pytest.raises(GeometryError) as info:
        geo.rounded_polyline([(0.0, 0.0), (1.0, 0.0), (1.0, 0.0), (1.0, 1.0)], 0.1, "guard")
    msg = str(info.value)
    assert "np.float64" not in msg and "vertices" not in msg and "(1, 0) m" in msg
    with pytest.raises(GeometryError) as info:
        geo.rounded_polyline([(0.0, 0.0), (0.1, 0.0), (0.1, 1.0)], 0.5, "sensor")
    assert "np.float64" not in str(info.value)


def test_a_garbage_stl_is_reported_as_a_damaged_file(tmp_path):
    path = _write(tmp_path, bytes(range(256)) * 3, "tip.stl")
    with pytest.raises(GeometryError) as info:
        load_mesh_surface(path, length_unit="mm")
    msg = str(info.value)
    assert "is not an STL file" in msg and "768 bytes" in msg and "package" not in msg


def test_stl_read_here_matches_trimesh(tmp_path):
    trimesh = pytest.importorskip("trimesh")
    path = Path(__file__).parent.parent / "configs" / "meshes" / "ball_tip_r2mm.stl"
    ours = load_mesh_surface(path, length_unit="mm").base
    theirs = trimesh.load(str(path), force="mesh", process=True)
    assert ours.n_triangles == len(theirs.faces)
    assert np.isclose(ours.volume_m3, theirs.volume * 1e-9, rtol=1e-6)


def test_study_config_errors_start_with_the_file(tmp_path):
    table = base_study_config()
    table["sampler"]["kind"] = "grid"
    cfg = _write(tmp_path, toml_text(table), "study.toml")
    with pytest.raises(ConfigError, match=rf"^{cfg}: sampler.kind: 'grid'"):
        load_study_config(cfg)


def test_warnings_before_a_refusal_stay_off_the_error_line(capsys, monkeypatch, tmp_path):
    def noisy(args):
        np.log(np.zeros(1))  # a numpy RuntimeWarning, then a refusal
        raise ConfigError(f"{args.config}: refused")

    monkeypatch.setattr(solve_cli, "run", noisy)
    code, _, err = _cli(capsys, "solve", str(tmp_path / "x.toml"))
    assert _one_line_refusal(code, err) == f"elopt: error: {tmp_path / 'x.toml'}: refused"


def test_a_nanometre_guard_gap_is_refused_before_any_solve():
    p = GuardedDiskParams(2.0, 1e-6, 1.5, 1.0, 0.1, 0.5, 10.0)
    t0 = time.perf_counter()
    with pytest.raises(ElectrodeError, match="2368 unknowns, more than 2000"):
        GuardedDisk().evaluate(p, rel_accuracy=1e-3)
    assert time.perf_counter() - t0 < 20.0  # one level-0 mesh, no solve


# ------------------------------------------------------------------ lost checks, restored


@pytest.mark.parametrize(
    "params, options, words",
    [
        (
            GuardedPadParams(4e-6, 3.0, 0.2, 1.5, 0.5, 0.0, 0.5, 10.0),
            GuardedPadOptions(),
            ["pad_length_mm = 4e-06 sets the panel size", "1.25e+06"],
        ),
        (
            GuardedPadParams(4.0, 3.0, 0.2, 1e-4, 0.5, 0.0, 0.5, 10.0),
            GuardedPadOptions(),
            ["guard_width_mm = 0.0001 sets the panel size", "1.25e+06"],
        ),
        (
            GuardedPadParams(4.0, 3.0, 0.2, 1.5, 0.5, 0.0, 0.5, 10.0),
            GuardedPadOptions(mesh_step_mm=0.004),
            ["mesh_step_mm = 0.004", "guard of 7.4 x 6.4 mm", "1.25e+06"],
        ),
    ],
)
def test_a_pad_mesh_beyond_the_solver_names_the_parameter_before_meshing(params, options, words):
    t0 = time.perf_counter()
    with pytest.raises(ElectrodeError) as info:
        evaluate_design(GuardedPad(), params, rel_accuracy=1e-2, options=options)
    assert time.perf_counter() - t0 < 10.0  # counted, not meshed
    line = str(info.value)
    assert "\n" not in line and line.startswith("guarded_pad: ")
    for w in words:
        assert w in line, (w, line)


def _sphere_stl(splits: int) -> bytes:
    """A binary STL of an octahedron split ``splits`` times onto a 2 mm sphere at z = 3 mm
    (8 * 4**splits triangles)."""
    v = np.array([[1, 0, 0], [-1, 0, 0], [0, 1, 0], [0, -1, 0], [0, 0, 1], [0, 0, -1]], float)
    faces = [(0, 2, 4), (2, 1, 4), (1, 3, 4), (3, 0, 4), (2, 0, 5), (1, 2, 5), (3, 1, 5), (0, 3, 5)]
    tris = v[np.array(faces)]
    for _ in range(splits):
        a, b, c = tris[:, 0], tris[:, 1], tris[:, 2]
        ab, bc, ca = (a + b) / 2, (b + c) / 2, (c + a) / 2
        tris = np.concatenate(
            [np.stack(t, axis=1) for t in ((a, ab, ca), (ab, b, bc), (ca, bc, c), (ab, bc, ca))]
        )
    tris = 2.0 * tris / np.linalg.norm(tris, axis=2, keepdims=True) + [0.0, 0.0, 3.0]
    record = np.dtype([("n", "<f4", 3), ("v", "<f4", (3, 3)), ("attr", "<u2")])
    rows = np.zeros(len(tris), dtype=record)
    rows["v"] = tris
    head = b"elopt test sphere".ljust(80, b" ") + np.uint32(len(tris)).tobytes()
    return head + rows.tobytes()


def _dense_mesh_file_config(tmp_path: Path, splits: int, count: int) -> Path:
    (tmp_path / "dense.stl").write_bytes(_sphere_stl(splits))
    conductors = [
        {"name": f"c{k}", "file": "dense.stl", "length_unit": "mm", "potential_V": 5.0}
        for k in range(count)
    ]
    table = {
        "geometry": {"family": "mesh_file", "ground_plane": True, "conductors": conductors},
        "evaluation": {"max_level": 1},
    }
    return _write(tmp_path, toml_text(table))


def test_a_mesh_file_beyond_the_solver_names_the_file_before_checking_it(tmp_path):
    # 8 * 4**8 = 524288 triangles: 2.1e6 panels at level 1, above the solver's 1.25e6.
    spec = read_solve_config(_dense_mesh_file_config(tmp_path, 8, 1))
    t0 = time.perf_counter()
    with pytest.raises(ElectrodeError) as info:
        get_family("mesh_file").build(spec.params)
    assert time.perf_counter() - t0 < 10.0  # refused before the surface checks
    line = str(info.value)
    assert f"the file {tmp_path / 'dense.stl'} has 524288 triangles, more than the 312500" in line


@pytest.mark.slow
def test_mesh_files_beyond_the_solver_together_name_the_largest(tmp_path):
    # Three files of 8 * 4**7 = 131072 triangles each: 1.57e6 panels at level 1.
    spec = read_solve_config(_dense_mesh_file_config(tmp_path, 7, 3))
    with pytest.raises(ElectrodeError) as info:
        get_family("mesh_file").build(spec.params)
    line = str(info.value)
    assert f"the mesh file {tmp_path / 'dense.stl'} of 'c0' has 131072 triangles" in line, line
    assert "about 1.57e+06 panels at refinement level 1, more than the solver's 1.25e+06" in line


DRIVEN = [
    f for f in FAMILIES.values() if "drive_V" in f.parameter_names() and f.name != "mesh_file"
]


@pytest.mark.parametrize("family", DRIVEN, ids=lambda f: f.name)
@pytest.mark.parametrize("drive_V", [5e-324, 1e-7, -1e-7, 0.0, 1.1e7, -2e7])
def test_every_drive_outside_1_uV_to_10_MV_is_refused_by_its_declaration(family, drive_V):
    info = next(s.info for s in family.parameters() if s.name == "drive_V")
    broken = info.broken_rule("drive_V", drive_V)
    assert broken is not None and broken.startswith("drive_V = ")


@pytest.mark.parametrize("family", DRIVEN, ids=lambda f: f.name)
@pytest.mark.parametrize("drive_V", [1e-6, -1e-6, 1e7, -1e7, 10.0])
def test_every_drive_inside_1_uV_to_10_MV_is_accepted(family, drive_V):
    info = next(s.info for s in family.parameters() if s.name == "drive_V")
    assert info.broken_rule("drive_V", drive_V) is None


def test_a_subnormal_drive_is_one_line_from_solve(capsys, tmp_path):
    text = (REPO / "configs" / "hv_test_cell.toml").read_text(encoding="utf-8")
    lines = ["drive_V = 5e-324" if ln.startswith("drive_V") else ln for ln in text.splitlines()]
    cfg = _write(tmp_path, "\n".join(lines) + "\n")
    code, out, err = _cli(capsys, "solve", str(cfg))
    assert out == ""
    _one_line_refusal(code, err, "drive_V = 4.94066e-324", "|drive_V| in [1e-06, 1e+07]")


def test_a_mesh_file_drive_above_10_MV_is_refused(tmp_path):
    cfg = _mesh_file_config(tmp_path, "potential_V = 2e7")
    with pytest.raises(ConfigError, match=r"drive_V = 2e\+07 must have \|drive_V\|"):
        read_solve_config(cfg)


def test_a_rule_broken_at_the_nearest_linearity_standoff_is_refused_before_any_solve():
    # A 0.3 mm layer clears the 0.5 mm standoff but not the sweep's nearest, 0.25 mm.
    p = dataclasses.replace(DISK_PARAMS, target_layer_um=300.0)
    GuardedDisk().validate(p)
    t0 = time.perf_counter()
    with pytest.raises(ElectrodeError) as info:
        evaluate_design(GuardedDisk(), p, rel_accuracy=1e-2, options=GuardedDiskOptions())
    assert time.perf_counter() - t0 < 5.0  # refused before the nominal solve
    line = str(info.value)
    for w in (
        "nearest linearity standoff, standoff_mm = 0.25",
        "linearity_range_fraction = 0.5",
        "target_layer_um = 300",
    ):
        assert w in line, (w, line)
    skip = GuardedDiskOptions(linearity_points=0)
    GuardedDisk().validate_design(p, skip)  # no sweep: nothing nearer to break


def test_a_geometry_error_the_rules_miss_names_the_disk_parameters():
    p = dataclasses.replace(DISK_PARAMS, guard_gap_mm=1e-12)
    GuardedDisk().validate(p)  # the rules let it through; the geometry layer does not
    with pytest.raises(ElectrodeError) as info:
        GuardedDisk().build(p)
    line = str(info.value)
    assert line.startswith("guarded_disk: these parameters give no valid cross-section")
    assert "guard_gap_mm = 1e-12" in line and "sensor_radius_mm = 2" in line

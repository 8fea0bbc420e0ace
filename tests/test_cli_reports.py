"""Take-away commands: a trial as a solve config, CAD geometry, the calibration sweep, the
front at any size, the family listing, overnight budget rules and a quick start-up."""

from __future__ import annotations

import csv
import io
import json
import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from rich.console import Console
from study_support.cli import run_elopt, run_study
from study_support.records import record_for, small_header

from elopt.optimizer.cli.main import main
from elopt.optimizer.report.front_table import FrontView, render_front
from elopt.optimizer.report.study_view import nondominated_two
from elopt.optimizer.store import StudyWriter, read_study
from elopt.optimizer.study.objectives import pareto_front_mask

ROOT = Path(__file__).resolve().parents[1]
SPINDLE = ROOT / "configs" / "spindle_runout_probe.toml"
EPS0 = 8.8541878128e-12  # F/m, CODATA 2018


def _error_line(capsys) -> str:
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1, err
    return err[0]


# ----------------------------------------------------------------------------- start-up


def _modules_after(code: str) -> set[str]:
    probe = code + "\nimport sys\nprint(' '.join(sorted(sys.modules)))\n"
    out = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr
    return set(out.stdout.split("\n")[-2].split())


HEAVY = {"numba", "optuna", "scipy", "matplotlib", "elopt.physics.bem_axi", "elopt.physics.bem3d"}


def test_building_the_parser_loads_no_solver():
    loaded = _modules_after("from elopt.optimizer.cli.main import build_parser\nbuild_parser()")
    assert not HEAVY & loaded, HEAVY & loaded


def test_reading_a_study_loads_no_solver(tmp_path):
    path = tmp_path / "r.h5"
    with StudyWriter.create(path, small_header()) as w:
        for i in range(20):
            w.append(record_for(i))
    code = (
        "import contextlib, io\nfrom elopt.optimizer.cli.main import main\n"
        f"with contextlib.redirect_stdout(io.StringIO()):\n"
        f"    assert main(['front', {str(path)!r}]) == 0\n"
        f"    assert main(['show', {str(path)!r}, '2']) == 0"
    )
    loaded = _modules_after(code)
    assert not HEAVY & loaded, HEAVY & loaded


# ----------------------------------------------------------------------------- the front


def test_two_objective_front_matches_the_general_rule():
    rng = np.random.default_rng(3)
    for directions in (("maximize", "minimize"), ("minimize", "minimize")):
        v = np.round(rng.normal(size=(400, 2)), 1)  # rounding makes ties and equal rows
        assert np.array_equal(nondominated_two(v, directions), pareto_front_mask(v, directions))


def _fixture_study(tmp_path, n=60) -> Path:
    path = tmp_path / "f.h5"
    with StudyWriter.create(path, small_header()) as w:
        for i in range(n):
            rec = record_for(i)
            if rec.feasible:  # objectives (score_fF, size_mm) are their metrics' values
                rec.objectives = np.array([math.sin(i) * 10, math.cos(i) * 5])
                rec.metrics = np.array([rec.objectives[1], rec.objectives[0], rec.metrics[2]])
            w.append(rec)
    return path


def test_front_top_sort_and_narrow_terminal(tmp_path):
    snap = read_study(_fixture_study(tmp_path))
    wide = Console(file=io.StringIO(), record=True, width=160)
    render_front(wide, snap, view=FrontView(top=3, sort="width_mm"))
    text = wide.export_text()
    assert "showing 3 of" in text and "sorted by width_mm" in text
    rows = [
        line.split()
        for line in text.splitlines()
        if line.strip()[:1].isdigit() and len(line.split()) >= 4
    ]
    widths = [float(r[-2]) for r in rows[:3]]
    assert widths == sorted(widths)
    narrow = Console(file=io.StringIO(), record=True, width=40)
    render_front(narrow, snap, view=FrontView(top=0))
    text = narrow.export_text()
    assert "not shown, the terminal is 40 columns wide:" in " ".join(text.split())
    # Headers are never cut: every header line is there whole, units on a line of their own.
    for piece in ("score_fF", "max (fF)", "size_mm", "min (mm)"):
        assert piece in text, piece
    assert "…" not in text


def test_front_exports_together_and_no_overwrite(tmp_path, capsys):
    path = _fixture_study(tmp_path)
    c, j = tmp_path / "f.csv", tmp_path / "f.json"
    assert main(["front", str(path), "--csv", str(c), "--json", str(j), "--top", "2"]) == 0
    n_front = len(json.loads(j.read_text())["front"])
    assert n_front > 2, "exports hold the whole front whatever --top shows"
    assert len(list(csv.DictReader(open(c)))) == n_front
    assert main(["front", str(path), "--csv", str(c)]) == 2
    assert f"--csv {c}: file exists; add --force to replace it" in _error_line(capsys)
    assert main(["front", str(path), "--csv", str(c), "--force"]) == 0
    assert main(["front", str(path), "--sort", "nope"]) == 2
    assert "--sort nope: not in this study" in _error_line(capsys)


def test_text_scatter_marks_limits_and_log_axes(tmp_path):
    from elopt.optimizer.report.front_table import front_scatter

    snap = read_study(_fixture_study(tmp_path))
    lines = front_scatter(snap, "gap_mm", "peak_surface_field_V_per_m")
    text = "\n".join(lines)
    assert "gap_mm [log scale]" in text  # gap_mm is log-sampled in the fixture header
    assert "~ constraint limit" in text  # the 3e6 V/m limit as a horizontal line
    assert any(set(line.split("|", 1)[-1].strip()) == {"~"} for line in lines if "|" in line)


# ----------------------------------------------------------------------------- families


def test_families_lists_every_family_with_units(capsys):
    from elopt.physics.electrodes.registry import FAMILIES

    assert main(["families"]) == 0
    out = capsys.readouterr().out
    for name in FAMILIES:
        assert name in out
    assert "sensor_radius_mm" in out and "[geometry]" in out
    assert main(["families", "nope"]) == 2
    assert "family 'nope': not known" in _error_line(capsys)


# ----------------------------------------------------------------------------- a real study


@pytest.fixture(scope="module")
def study(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("reports")
    cfg, out = run_study(tmp, trials=8)
    return tmp, cfg, out


def test_a_trial_as_solve_config_reproduces_it(study, tmp_path, capsys):
    _, _, path = study
    snap = read_study(path)
    i = int(np.flatnonzero(snap.state_names() == "complete")[-1])
    cfg = tmp_path / "t.toml"
    assert main(["show", str(path), str(i), "--solve-config", str(cfg)]) == 0
    capsys.readouterr()
    assert main(["solve", str(cfg), "--json"]) == 0
    record = json.loads(capsys.readouterr().out)
    h = snap.header
    for k, name in enumerate(h.metric_names):
        stored = float(snap.columns["metrics"][i, k])
        # The same design, options and accuracy: the same deterministic solve.
        assert record[name] == pytest.approx(stored, rel=1e-9, abs=1e-12), name


def test_budget_on_the_command_line_replaces_the_config(study, tmp_path):
    tmp, cfg, _ = study
    out = tmp_path / "h.h5"
    # The config asks for 8 trials; --hours alone replaces that whole budget.
    proc = run_elopt("run", cfg, "--out", out, "--hours", "0.004", cwd=tmp, timeout=300)
    assert proc.returncode == 0, proc.stderr
    assert "time budget used" in proc.stdout
    snap = read_study(out)
    assert int(snap.sessions["target_trials"][0]) == -1  # no trial target in this session
    help_text = run_elopt("run", "--help", cwd=tmp).stdout
    assert "replaces the config's" in " ".join(help_text.split())


# ----------------------------------------------------------------------------- export


def _pappus_volume_mm3(profile_mm: np.ndarray) -> float:
    """Volume swept by a closed (r, z) polygon turned about the z axis, by Pappus's centroid
    theorem V = 2 pi r_c A (any calculus text), r_c and A from the shoelace sums."""
    r, z = profile_mm[:, 0], profile_mm[:, 1]
    r1, z1 = np.roll(r, -1), np.roll(z, -1)
    cross = r * z1 - r1 * z
    area = 0.5 * cross.sum()
    r_c = ((r + r1) * cross).sum() / (6.0 * area)
    return abs(2.0 * math.pi * r_c * area)


def test_geometry_export_dxf_and_stl(tmp_path, capsys):
    ezdxf = pytest.importorskip("ezdxf")
    trimesh = pytest.importorskip("trimesh")
    from elopt.optimizer.config.solve_config import read_solve_config
    from elopt.optimizer.export.geometry_files import write_geometry
    from elopt.physics.electrodes.registry import get_family

    spec = read_solve_config(SPINDLE)
    layout = get_family(spec.family).build(spec.params)
    dxf = tmp_path / "p.dxf"
    write_geometry(layout, dxf)
    doc = ezdxf.readfile(dxf)  # an independent reader of the file
    msp = doc.modelspace()
    arcs = msp.query("ARC")
    assert {e.dxf.layer for e in msp} == {"sensor", "guard", "AXIS"}
    assert len(arcs) == 2 + 4  # sensor: 2 rounded corners off the axis; guard: 4
    assert all(e.dxf.radius == pytest.approx(spec.params.fillet_mm) for e in arcs)
    xs = [x for e in msp.query("LINE") for x in (e.dxf.start.x, e.dxf.end.x)]
    outer = spec.params.sensor_radius_mm + spec.params.guard_gap_mm + spec.params.guard_width_mm
    assert max(xs) == pytest.approx(outer)  # in mm: the guard's outer radius
    stl = tmp_path / "p.stl"
    write_geometry(layout, stl)
    scene = trimesh.load(stl)
    assert len(scene.geometry) == 2
    # Each revolved solid has the volume Pappus's theorem gives for its profile polygon, less
    # the polygon-in-circle loss of 96 steps around the axis: sin(x)/x with x = 2 pi / 96.
    loss = math.sin(2 * math.pi / 96) / (2 * math.pi / 96)
    for c in layout.conductors:
        mesh = next(m for name, m in scene.geometry.items() if name.startswith(c.name))
        prof = c.shape.sample(32) * 1e3
        if c.shape.kind == "body":
            prof = np.vstack([prof, [[0.0, prof[-1, 1]]], [[0.0, prof[0, 1]]]])
        assert abs(mesh.volume) == pytest.approx(_pappus_volume_mm3(prof) * loss, rel=2e-3)
    assert main(["solve", str(SPINDLE), "--geometry", str(tmp_path / "p.iges")]) == 2
    assert "must end in .dxf or .stl" in _error_line(capsys)


# ----------------------------------------------------------------------------- calibration


WIDE_PROBE = """
title = "wide guarded probe"
[geometry]
family = "guarded_disk"
sensor_radius_mm = 4.0
guard_gap_mm = 0.05
guard_width_mm = 3.0
thickness_mm = 0.5
fillet_mm = 0.02
standoff_mm = 0.2
drive_V = 10.0
[solver]
rel_accuracy = 1e-5
"""


def test_calibration_sweep(tmp_path, capsys):
    from elopt.physics.electrodes.linearity import linearity_error_pct_fs

    cfg = tmp_path / "wide.toml"
    cfg.write_text(WIDE_PROBE)
    out = tmp_path / "cal.csv"
    args = ["calibrate", str(cfg), "--from", "0.15", "--to", "0.25", "--points", "5"]
    assert main([*args, "--csv", str(out), "--figure", str(tmp_path / "cal.png")]) == 0
    text = capsys.readouterr().out
    assert "largest deviation of 1/C from its best straight line" in text
    rows = list(csv.DictReader(open(out)))
    d_mm = np.array([float(r["standoff_mm"]) for r in rows])
    c_f = np.array([float(r["capacitance_fF"]) for r in rows]) * 1e-15
    np.testing.assert_allclose(d_mm, np.linspace(0.15, 0.25, 5))
    np.testing.assert_allclose(
        [float(r["inverse_capacitance_per_pF"]) for r in rows], 1e-12 / c_f, rtol=1e-8
    )
    dev = np.array([float(r["deviation_from_line_1_over_C_pct_fs"]) for r in rows])
    # The largest deviation is the family's linearity error over the same standoffs.
    assert np.max(np.abs(dev)) == pytest.approx(linearity_error_pct_fs(d_mm * 1e-3, c_f), rel=1e-6)
    # a/d = 16 to 27: under the sensor the field is nearly that of a parallel-plate
    # capacitor, C = eps0 pi r_eff^2 / d, r_eff = a + g/2 (parallel-plate formula, any
    # electrostatics text; the half-gap from the standards' effective-area rule,
    # docs/references.md item 8). The sensor's unshielded back adds a nearly constant C that
    # the derivative does not see, so the check is on the sensitivity eps0 pi r_eff^2 / d^2.
    r_eff = (4.0 + 0.05 / 2) * 1e-3
    solver = np.array([float(r["solver_sensitivity_fF_per_um"]) for r in rows]) * 1e-9  # F/m
    np.testing.assert_allclose(solver, EPS0 * math.pi * r_eff**2 / (d_mm * 1e-3) ** 2, rtol=0.02)
    # The sweep's central difference at the middle agrees with the solver's shape derivative
    # to its O(h^2) error, (h/d)^2 = 1.6 % for C ~ 1/d.
    mid = 2
    sweep = -float(rows[mid]["dC_d_standoff_mm_fF_per_mm"]) * 1e3  # F/m from fF/mm
    assert sweep * 1e-15 == pytest.approx(solver[mid], rel=0.03)
    assert (tmp_path / "cal.png").stat().st_size > 20_000
    assert main(["calibrate", str(cfg), "--param", "nope"]) == 2
    assert "--param nope: not a number parameter of guarded_disk" in _error_line(capsys)
    assert main(["calibrate", str(cfg), "--points", "2"]) == 2
    assert "--points: 2 is outside" in _error_line(capsys)


def test_what_a_seed_reproduces(tmp_path):
    """As --help and docs/study-config.md say: one worker, the same trials in the same order;
    several workers, at least TPE's random start (startup_trials = 6 here) the same."""
    from study_support.configs import fixture_study

    cfg = fixture_study(tmp_path, trials=10, delay_s=0.02)

    def params(workers: int, name: str) -> np.ndarray:
        out = tmp_path / name
        proc = run_elopt("run", cfg, "--out", out, "--workers", str(workers), cwd=tmp_path)
        assert proc.returncode == 0, proc.stderr
        return read_study(out).columns["params"]

    one_a, one_b = params(1, "a.h5"), params(1, "b.h5")
    np.testing.assert_array_equal(one_a, one_b)
    two_a, two_b = params(2, "c.h5"), params(2, "d.h5")
    common = {tuple(r) for r in two_a} & {tuple(r) for r in two_b}
    assert len(common) >= 6


@pytest.mark.slow
def test_the_3d_demo_meets_its_own_accuracy_request(capsys):
    """configs/pad_wafer_gap_gauge.toml asks for what its refinement levels reach."""
    assert main(["solve", str(ROOT / "configs" / "pad_wafer_gap_gauge.toml"), "--json"]) == 0
    record = json.loads(capsys.readouterr().out)
    assert record["accuracy_met"], record["relative_error_estimate"]
    assert "warnings" in record and not any("stopped at" in w for w in record["warnings"])

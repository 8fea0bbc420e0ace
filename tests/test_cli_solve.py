"""``elopt solve`` and ``elopt check`` as a user runs them: output, exit status, bad input."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from elopt.optimizer.cli.main import main
from elopt.optimizer.config.solve_config import read_solve_config
from elopt.physics.electrodes.registry import FAMILIES, get_family
from elopt.physics.errors import ElectrodeError
from elopt.physics.validation import CheckResult

ROOT = Path(__file__).resolve().parents[1]
SPINDLE = ROOT / "configs" / "spindle_runout_probe.toml"
HV_CELL = ROOT / "configs" / "hv_test_cell.toml"

FAST_PROBE = """
title = "test probe"
[geometry]
family = "guarded_disk"
sensor_radius_mm = 2.0
guard_gap_mm = 0.2
guard_width_mm = 1.5
thickness_mm = 1.0
fillet_mm = 0.1
standoff_mm = 0.5
drive_V = 10.0
[solver]
rel_accuracy = 1e-3
[evaluation]
linearity_points = 3
"""


def _run(capsys, *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def _config(tmp_path: Path, text: str) -> str:
    path = tmp_path / "design.toml"
    path.write_text(text, encoding="utf-8")
    return str(path)


def test_registry_names_and_metric_units():
    assert set(FAMILIES) >= {"guarded_disk", "uniform_field"}
    with pytest.raises(ElectrodeError, match="known families: .*guarded_disk"):
        get_family("guarded_pad_x")
    for family in FAMILIES.values():
        for m in family.metrics:
            assert m.sense in ("maximize", "minimize", "either")
            assert m.unit and m.description


def test_json_has_the_agreed_keys_and_every_metric(capsys, tmp_path):
    code, out, err = _run(capsys, "solve", _config(tmp_path, FAST_PROBE), "--json")
    assert code == 0 and err == ""
    rec = json.loads(out)
    for key in (
        "family",
        "parameters",
        "conductors",
        "capacitance_matrix_F",
        "sense_capacitance_F",
        "peak_surface_field_V_per_m",
        "peak_location_m",
        "relative_error_estimate",
    ):
        assert key in rec
    family = get_family("guarded_disk")
    for m in family.metrics:
        assert m.name in rec and rec["metric_units"][m.name] == m.unit
    assert rec["family"] == "guarded_disk"
    assert rec["parameters"]["recess_mm"] == 0.0
    assert [c["name"] for c in rec["conductors"]] == ["sensor", "guard"]
    c = rec["capacitance_matrix_F"]
    assert rec["sense_capacitance_F"] == pytest.approx(c[0][0] + c[0][1])
    assert rec["sense_capacitance_fF"] == pytest.approx(1e15 * rec["sense_capacitance_F"])
    assert len(rec["peak_location_m"]) == 2
    assert rec["caution"] is None  # 10 V: no high-voltage caution


def _refuse_constants(name: str) -> None:
    raise AssertionError(f"non-strict JSON token {name}")


def test_json_carries_the_design_record_and_is_strict(capsys, tmp_path):
    code, out, _ = _run(capsys, "solve", _config(tmp_path, FAST_PROBE), "--json")
    assert code == 0
    rec = json.loads(out, parse_constant=_refuse_constants)
    for key in ("peak_rel_error_estimate", "accuracy_met", "potentials_V", "extra"):
        assert key in rec
    assert "peak_singular" not in rec and "rel_error_estimate" not in rec
    surface = rec["surface"]
    assert [s["conductor"] for s in surface] == ["sensor", "guard"]
    for s in surface:
        k = len(s["sigma_C_per_m2"])
        assert s["kind"] == "profile" and k > 10
        assert all(len(p) == 2 for p in s["points_m"]) and len(s["arc_length_m"]) == k
        assert set(s["face"]) == {0} and len(s["area_m2"]) == len(s["field_V_per_m"]) == k
        # The field is |sigma| / eps0 in air (Gauss's law at a conductor surface).
        for sigma, field in zip(s["sigma_C_per_m2"], s["field_V_per_m"], strict=True):
            assert field == pytest.approx(abs(sigma) / 8.8541878128e-12, rel=1e-9)
    # The peak search works between the samples, so the two agree to the discretisation only.
    peak = max(max(s["field_V_per_m"]) for s in surface)
    assert rec["peak_surface_field_V_per_m"] == pytest.approx(peak, rel=1e-3)


def test_an_undefined_metric_is_null_with_a_reason(capsys, tmp_path, monkeypatch):
    """Strict JSON: a metric the family could not define is null, and a warning says why."""
    import elopt.physics.electrodes.pipeline as pipeline

    real = pipeline.evaluate_design

    def without_spot(*args, **kwargs):
        ev = real(*args, **kwargs)
        ev.metrics["spot_radius_90_mm"] = float("nan")
        return ev

    monkeypatch.setattr(pipeline, "evaluate_design", without_spot)
    code, out, _ = _run(capsys, "solve", _config(tmp_path, FAST_PROBE), "--json")
    assert code == 0
    rec = json.loads(out, parse_constant=_refuse_constants)
    assert rec["spot_radius_90_mm"] is None
    assert any(w.startswith("spot_radius_90_mm is undefined (nan)") for w in rec["warnings"])


def test_json_agrees_with_a_direct_evaluation(capsys, tmp_path):
    path = _config(tmp_path, FAST_PROBE)
    rec = json.loads(_run(capsys, "solve", path, "--json")[1])
    spec = read_solve_config(path)
    ev = get_family(spec.family).evaluate(
        spec.params, rel_accuracy=spec.rel_accuracy, options=spec.options
    )
    for name, value in ev.metrics.items():
        assert rec[name] == pytest.approx(value, rel=1e-12)


def test_report_shows_tables_picture_and_no_caution_at_low_voltage(capsys, tmp_path):
    code, out, _ = _run(capsys, "solve", _config(tmp_path, FAST_PROBE))
    assert code == 0
    for words in (
        "Metrics",
        "sense_capacitance_fF",
        "Capacitance matrix",
        "Peak surface field",
        "✱",
        "██",
        "▓▓",
    ):
        assert words in out
    assert "Caution" not in out
    # A pure number has no unit column entry (declared "1"): the row is name and value only.
    rows = {
        cells[0]: cells
        for cells in ([c.strip() for c in line.split("│")] for line in out.splitlines())
        if len(cells) == 3
    }
    assert rows["potting_eps_r"] == ["potting_eps_r", "3.5", ""]
    assert rows["fillet_mm"] == ["fillet_mm", "0.1", "mm"]


def test_warning_when_the_peak_exceeds_the_medium_limit(capsys, tmp_path):
    text = FAST_PROBE + "[medium]\neps_r = 1.0\nbreakdown_field_V_per_m = 1000.0\n"
    code, out, _ = _run(capsys, "solve", _config(tmp_path, text))
    assert code == 0
    assert "warning: peak surface field" in out and "exceeds the breakdown field" in out
    rec = json.loads(_run(capsys, "solve", _config(tmp_path, text), "--json")[1])
    assert any("exceeds" in w for w in rec["warnings"])


def test_sharp_corners_are_flagged(capsys, tmp_path):
    text = FAST_PROBE.replace("fillet_mm = 0.1", "fillet_mm = 0.0")
    rec = json.loads(_run(capsys, "solve", _config(tmp_path, text), "--json")[1])
    assert rec["peak_at_sharp_corner"] is True
    assert any("sharp corner" in w for w in rec["warnings"])


@pytest.mark.parametrize("config", [SPINDLE, HV_CELL])
def test_demo_configs_run(capsys, config):
    code, out, err = _run(capsys, "solve", str(config))
    assert code == 0 and err == ""
    assert ("Caution" in out) == (config == HV_CELL)
    if config == HV_CELL:
        assert "licensed practice" in out and "30,000 V" in out
        assert "mid-plane" in out


@pytest.mark.parametrize(
    "text, words",
    [
        (
            FAST_PROBE.replace("fillet_mm", "filet_mm"),
            ["geometry.filet_mm", "did you mean 'fillet_mm'"],
        ),
        (FAST_PROBE.replace("= 0.1", "= 0.9"), ["fillet_mm = 0.9", "thickness_mm / 2 = 0.5"]),
        ("[geometry\nfamily = 1", ["malformed TOML"]),
    ],
)
def test_bad_config_is_one_line_and_exit_2(capsys, tmp_path, text, words):
    code, out, err = _run(capsys, "solve", _config(tmp_path, text))
    assert code == 2 and out == ""
    assert err.count("\n") == 1 and err.startswith("elopt: error: ")
    for w in words:
        assert w in err


def test_missing_file_from_a_real_process_has_no_traceback(tmp_path):
    missing = tmp_path / "nope.toml"
    proc = subprocess.run(
        [sys.executable, "-m", "elopt.optimizer.cli", "solve", str(missing)],
        capture_output=True,
        text=True,
        cwd=ROOT,
        timeout=120,
    )
    assert proc.returncode == 2
    assert proc.stderr == f"elopt: error: {missing}: no such file\n"
    assert "Traceback" not in proc.stderr


def test_check_passes_and_prints_sources(capsys):
    code, out, _ = _run(capsys, "check", "--case", "sphere", "--case", "coaxial_disks")
    assert code == 0
    assert "Love's integral equation" in out and "Jackson" in out
    assert "checks passed" in out and "FAIL" not in out


def test_check_exits_1_when_a_case_fails(capsys, monkeypatch):
    bad = CheckResult("fake", "q", "1", 1.1, 1.0, 1e-3, "nowhere")
    # The verb imports its work when it runs, so the patch goes where the work lives.
    monkeypatch.setattr("elopt.physics.validation.run_cases", lambda names: [bad])
    code, out, _ = _run(capsys, "check")
    assert code == 1 and "FAIL" in out


def test_full_check_runs_in_seconds_and_passes(capsys):
    code, out, _ = _run(capsys, "check")
    assert code == 0, out
    assert "guarded electrode" in out

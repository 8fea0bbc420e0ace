"""The solve-config reader: defaults, types, unknown keys and family rules, one line each."""

from __future__ import annotations

import copy

import pytest

from elopt.optimizer.config.solve_config import AIR_BREAKDOWN_V_PER_M, parse_solve_config
from elopt.optimizer.errors import ConfigError
from elopt.physics.electrodes.guarded_disk import GuardedDiskOptions, GuardedDiskParams

GOOD = {
    "title": "probe",
    "geometry": {
        "family": "guarded_disk",
        "sensor_radius_mm": 2.0,
        "guard_gap_mm": 0.2,
        "guard_width_mm": 1.5,
        "thickness_mm": 1,
        "fillet_mm": 0.1,
        "standoff_mm": 0.5,
        "drive_V": 10,
    },
}


def _with(**sections):
    table = copy.deepcopy(GOOD)
    for name, value in sections.items():
        if isinstance(value, dict) and isinstance(table.get(name), dict):
            table[name].update(value)
        else:
            table[name] = value
    return table


def _error(table) -> str:
    with pytest.raises(ConfigError) as info:
        parse_solve_config(table, "cfg.toml")
    msg = str(info.value)
    assert "\n" not in msg and msg.startswith("cfg.toml: ")
    return msg


def test_defaults_fill_what_is_left_out():
    spec = parse_solve_config(copy.deepcopy(GOOD), "cfg.toml")
    assert spec.family == "guarded_disk"
    assert spec.params == GuardedDiskParams(2.0, 0.2, 1.5, 1.0, 0.1, 0.5, 10.0, recess_mm=0.0)
    assert isinstance(spec.params.thickness_mm, float)
    assert spec.options == GuardedDiskOptions()
    assert spec.rel_accuracy == 1e-4
    assert spec.eps_r == 1.0
    assert spec.breakdown_field_V_per_m == AIR_BREAKDOWN_V_PER_M
    assert spec.title == "probe"


def test_medium_other_than_air_has_no_default_limit():
    spec = parse_solve_config(_with(medium={"eps_r": 2.2}), "cfg.toml")
    assert spec.breakdown_field_V_per_m is None
    spec = parse_solve_config(
        _with(medium={"eps_r": 2.2, "breakdown_field_V_per_m": 1.2e7}), "cfg.toml"
    )
    assert spec.breakdown_field_V_per_m == 1.2e7


def test_evaluation_options_are_read_from_the_family():
    spec = parse_solve_config(_with(evaluation={"linearity_points": 7}), "cfg.toml")
    assert spec.options.linearity_points == 7


@pytest.mark.parametrize(
    "table, words",
    [
        (
            _with(geometry={"filet_mm": 0.1}),
            ["geometry.filet_mm", "unknown key", "did you mean 'fillet_mm'"],
        ),
        (
            _with(solver={"rel_acuracy": 1e-3}),
            ["solver.rel_acuracy", "did you mean 'rel_accuracy'"],
        ),
        (_with(medium={"eps": 2.0}), ["medium.eps", "did you mean 'eps_r'"]),
        (
            _with(evaluation={"linearity_point": 3}),
            ["evaluation.linearity_point", "linearity_points"],
        ),
        (_with(solvr={}), ["solvr", "did you mean 'solver'"]),
        (
            _with(geometry={"family": "guarded_disc"}),
            ["geometry.family", "'guarded_disc'", "did you mean 'guarded_disk'"],
        ),
        ({"geometry": {"sensor_radius_mm": 1.0}}, ["geometry.family", "missing"]),
        ({"title": "x"}, ["geometry", "missing"]),
        (
            _with(geometry={"standoff_mm": "0.5"}),
            ["geometry.standoff_mm", "expected a number", "'0.5'"],
        ),
        (
            _with(evaluation={"linearity_points": 4.5}),
            ["evaluation.linearity_points", "whole number"],
        ),
        (
            _with(solver={"rel_accuracy": 0.5}),
            ["solver.rel_accuracy", "0.5", "outside the allowed range"],
        ),
        (_with(medium={"eps_r": 0.5}), ["medium.eps_r", "0.5", "outside"]),
        (
            _with(medium={"breakdown_field_V_per_m": 0}),
            ["medium.breakdown_field_V_per_m", "outside"],
        ),
        (
            _with(geometry={"fillet_mm": 0.8}),
            ["guarded_disk", "fillet_mm = 0.8", "thickness_mm / 2 = 0.5"],
        ),
        (_with(evaluation={"linearity_range_fraction": 1.5}), ["linearity_range_fraction = 1.5"]),
        (_with(title=3), ["title", "string"]),
    ],
)
def test_bad_input_gets_one_line_naming_key_value_and_rule(table, words):
    msg = _error(table)
    for w in words:
        assert w in msg, msg


def test_required_parameter_missing():
    table = copy.deepcopy(GOOD)
    del table["geometry"]["standoff_mm"]
    assert "geometry.standoff_mm: required key is missing" in _error(table)


def test_peak_accuracy_is_its_own_optional_request():
    assert parse_solve_config(copy.deepcopy(GOOD), "cfg.toml").peak_rel_accuracy is None
    spec = parse_solve_config(_with(solver={"peak_rel_accuracy": 1e-3}), "cfg.toml")
    assert spec.peak_rel_accuracy == 1e-3 and spec.rel_accuracy == 1e-4
    assert "solver.peak_rel_accuracy" in _error(_with(solver={"peak_rel_accuracy": 0.5}))

"""Study config reader: good configs parse; each bad input gets one line naming key and fix."""

from __future__ import annotations

import tomllib

import pytest
from study_support.configs import FIXTURE_STUDY, GUARDED_DISK_STUDY

from elopt.optimizer.config import (
    identity_differences,
    load_study_config,
    parse_study_config,
    study_identity,
)
from elopt.optimizer.errors import ConfigError
from elopt.optimizer.study import study_header
from elopt.physics.electrodes.guarded_disk import GuardedDiskOptions


def _parse(text: str):
    return parse_study_config(tomllib.loads(text), text, source="t.toml")


def _fixture_text(**kw) -> str:
    args = {"trials": 30, "delay_s": 0.0, "sampler": "tpe", "handover": 100000} | kw
    return FIXTURE_STUDY.format(**args)


def test_real_family_config_parses():
    spec = _parse(GUARDED_DISK_STUDY.format(trials=12, workers=2))
    assert spec.family.name == "guarded_disk"
    assert [s.name for s in spec.search] == [
        "sensor_radius_mm",
        "guard_gap_mm",
        "guard_width_mm",
        "fillet_mm",
    ]
    assert spec.fixed["drive_V"] == 10.0
    assert [(o.metric, o.direction) for o in spec.objectives] == [
        ("sensitivity_fF_per_um", "maximize"),
        ("outer_radius_mm", "minimize"),
    ]
    (c,) = spec.constraints
    assert (c.metric, c.kind, c.limit, c.unit) == ("peak_surface_field_V_per_m", "max", 5e4, "V/m")
    assert c.violation(4e4) < 0 < c.violation(6e4)
    assert spec.budget.trials == 12 and spec.workers == 2
    assert spec.sampler.kind == "tpe"


def test_fixture_family_gets_the_derived_peak_field_metric():
    spec = _parse(_fixture_text())
    names = [m.name for m in spec.metrics]
    assert names == ["score_fF", "size_mm", "peak_surface_field_V_per_m"]


def test_sampler_hand_over():
    spec = _parse(_fixture_text(handover=50))
    assert spec.sampler.kind_at(49) == "tpe"
    assert spec.sampler.kind_at(50) == "nsga2"
    assert _parse(_fixture_text(sampler="nsga2")).sampler.kind_at(0) == "nsga2"


BAD = [
    # (replace this, with this, message must match)
    (
        'score_fF = "maximize"',
        'sensitivity = "maximize"',
        r"objectives\.sensitivity: the family has no metric 'sensitivity'",
    ),
    (
        "peak_surface_field_V_per_m = { max",
        "peak_field = { max",
        r"constraints\.peak_field: the family has no metric 'peak_field'; did you mean 'peak_surface_field_V_per_m'",
    ),
    (
        "width_mm = { low = 0.5, high = 8.0 }",
        "width_mm = { low = 8.0, high = 8.0 }",
        r"search\.width_mm: low < high must hold, got low=8, high=8",
    ),
    (
        "width_mm = { low = 0.5, high = 8.0 }",
        "width_mm = { low = -2.0, high = 8.0 }",
        r"search\.width_mm\.low = -2 is outside family analytic_fixture's rules: width_mm must be > 0",
    ),
    (
        "width_mm = { low = 0.5, high = 8.0 }",
        "width_mm = { low = 0.5, high = 20.0 }",
        r"search\.width_mm\.high = 20 is outside family analytic_fixture's rules: width_mm \+ gap_mm <= 9",
    ),
    ('kind = "tpe"', 'kind = "cmaes"', r"sampler\.kind: 'cmaes' is not one of tpe, nsga2"),
    ("trials = 30", "trials = 0", r"budget\.trials: 0 is outside the allowed range \[1, inf\]"),
    ("[budget]\ntrials = 30", "[budget]", r"budget: give trials = N and/or hours = H"),
    (
        "gap_mm = { low = 0.1, high = 3.0, log = true }",
        "gap_mm = { low = 0.0, high = 3.0, log = true }",
        r"search\.gap_mm\.low: a log-scale range needs low > 0",
    ),
    (
        "gap_mm = { low = 0.1, high = 3.0, log = true }",
        "gap = { low = 0.1, high = 3.0 }",
        r"search\.gap: unknown key; did you mean 'gap_mm'",
    ),
    (
        "gap_mm = { low = 0.1, high = 3.0, log = true }",
        "gap_mm = { low = 0.1, high = 3.0, step = 5.0 }",
        r"search\.gap_mm\.step: must lie in \(0, high - low\]",
    ),
    ("[sampler]", "[sampler]\nwarmup = 3", r"sampler\.warmup: unknown key"),
    (
        'score_fF = "maximize"',
        'score_fF = "biggest"',
        r"objectives\.score_fF: 'biggest' is not one of maximize, minimize",
    ),
    (
        "drive_V = 10.0\n",
        "drive_V = 10.0\nwidth_mm = 1.0\n",
        r"search\.width_mm: also given in \[fixed\]",
    ),
    (
        'family = "study_support.analytic_family:FAMILY"',
        'family = "no_such_family"',
        r"study\.family: unknown electrode family 'no_such_family'; known families: .*guarded_disk",
    ),
]


@pytest.mark.parametrize(("old", "new", "message"), BAD)
def test_bad_input_gets_one_clear_line(old, new, message):
    text = _fixture_text()
    assert old in text
    with pytest.raises(ConfigError, match=message) as info:
        _parse(text.replace(old, new, 1))
    assert "\n" not in str(info.value)


def test_missing_parameter_is_named():
    text = GUARDED_DISK_STUDY.format(trials=5, workers=1).replace("thickness_mm = 1.0\n", "")
    with pytest.raises(
        ConfigError, match=r"fixed: parameter thickness_mm of family guarded_disk has no value"
    ):
        _parse(text)


def test_real_family_rule_in_a_range_end_is_named():
    # fillet_mm <= thickness_mm / 2 is a guarded_disk rule: a fillet range up to 0.8 mm with a
    # 1 mm thick probe can never be built at its high end.
    text = GUARDED_DISK_STUDY.format(trials=5, workers=1).replace(
        "fillet_mm = { low = 0.05, high = 0.1 }", "fillet_mm = { low = 0.05, high = 0.8 }"
    )
    with pytest.raises(
        ConfigError,
        match=r"search\.fillet_mm\.high = 0\.8 is outside family guarded_disk's rules: .*fillet_mm",
    ):
        _parse(text)


def test_missing_file_and_bad_toml(tmp_path):
    with pytest.raises(ConfigError, match="no such file"):
        load_study_config(tmp_path / "nope.toml")
    bad = tmp_path / "bad.toml"
    bad.write_text("[study\n")
    with pytest.raises(ConfigError, match="malformed TOML"):
        load_study_config(bad)


def test_identity_ignores_budget_and_workers_and_names_differences():
    a = tomllib.loads(GUARDED_DISK_STUDY.format(trials=12, workers=2))
    b = tomllib.loads(GUARDED_DISK_STUDY.format(trials=500, workers=1))
    assert identity_differences(study_identity(a), study_identity(b)) == []
    c = tomllib.loads(
        GUARDED_DISK_STUDY.format(trials=12, workers=2).replace("high = 2.0 }", "high = 2.5 }")
    )
    assert identity_differences(study_identity(a), study_identity(c)) == [
        "search.sensor_radius_mm.high: stored 2.0, given 2.5"
    ]


def test_parameter_units_come_from_the_family_declarations():
    header = study_header(_parse(GUARDED_DISK_STUDY.format(trials=5, workers=1)))
    units = dict(zip(header.parameter_names, header.parameter_units, strict=True))
    assert units == {
        "sensor_radius_mm": "mm",
        "guard_gap_mm": "mm",
        "guard_width_mm": "mm",
        "thickness_mm": "mm",
        "fillet_mm": "mm",
        "standoff_mm": "mm",
        "drive_V": "V",
        "recess_mm": "mm",
        "spacer_eps_r": "1",
        "housing_width_mm": "mm",
        "housing_eps_r": "1",
        "target_layer_um": "um",
        "target_layer_eps_r": "1",
        "potting_depth_mm": "mm",
        "potting_eps_r": "1",
    }
    # The fixture declares its delay in seconds: a unit no name suffix list knew.
    fixture = study_header(_parse(_fixture_text()))
    assert fixture.parameter_units[fixture.parameter_names.index("delay_s")] == "s"


MEDIUM_AND_EVALUATION = """
[medium]
eps_r = 2.5
breakdown_field_V_per_m = 1.0e7

[evaluation]
linearity_points = 3
linearity_range_fraction = 0.2
"""


def test_medium_and_evaluation_tables_read_as_in_a_solve_config():
    text = GUARDED_DISK_STUDY.format(trials=5, workers=1) + MEDIUM_AND_EVALUATION
    spec = _parse(text)
    assert spec.eps_r == 2.5
    assert spec.medium.breakdown_field_V_per_m == 1.0e7
    assert spec.options == GuardedDiskOptions(linearity_range_fraction=0.2, linearity_points=3)
    default = _parse(GUARDED_DISK_STUDY.format(trials=5, workers=1))
    assert default.options == GuardedDiskOptions() and default.eps_r == 1.0
    assert default.peak_rel_accuracy is None
    peak = text.replace("rel_accuracy = 0.05\n", "rel_accuracy = 0.05\npeak_rel_accuracy = 0.01\n")
    assert _parse(peak).peak_rel_accuracy == 0.01


def test_older_solver_eps_r_still_reads_but_not_twice():
    base = GUARDED_DISK_STUDY.format(trials=5, workers=1)
    old = base.replace("rel_accuracy = 0.05\n", "rel_accuracy = 0.05\neps_r = 2.0\n")
    assert _parse(old).eps_r == 2.0
    with pytest.raises(ConfigError, match=r"solver\.eps_r: also given as medium\.eps_r"):
        _parse(old + MEDIUM_AND_EVALUATION)


@pytest.mark.parametrize(
    ("table", "message"),
    [
        ("[evaluation]\nlinearity_point = 3\n", r"evaluation\.linearity_point: unknown key"),
        (
            "[evaluation]\nlinearity_points = 2\n",
            r"evaluation: guarded_disk: linearity_points = 2 must be 0 \(skip\)",
        ),
        ("[medium]\neps_r = 0.5\n", r"medium\.eps_r: 0\.5 is outside the allowed range"),
    ],
)
def test_bad_medium_or_evaluation_is_one_line(table, message):
    with pytest.raises(ConfigError, match=message) as info:
        _parse(GUARDED_DISK_STUDY.format(trials=5, workers=1) + table)
    assert "\n" not in str(info.value)


def test_config_and_study_packages_import_light():
    # Worker processes import these; the solvers (numba kernels) and optuna load only where
    # a config is read or a search runs, so a worker reports version problems cleanly.
    import subprocess
    import sys

    code = (
        "import sys, elopt.optimizer.config, elopt.optimizer.study; "
        "print(sorted(m for m in ('numba', 'optuna') if m in sys.modules))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"

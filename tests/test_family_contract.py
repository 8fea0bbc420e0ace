"""The family contract: declared parameters, metrics declared once, the one pipeline, and
``elopt solve`` and a study trial evaluating one design identically."""

from __future__ import annotations

import dataclasses
import json
import math
import tomllib
from pathlib import Path

import numpy as np
import pytest

from elopt.optimizer.cli.main import main
from elopt.optimizer.config import parse_study_config
from elopt.optimizer.study import evaluate_task, trial_task
from elopt.physics.electrodes import metrics
from elopt.physics.electrodes.base import ParameterInfo, parameter_specs
from elopt.physics.electrodes.guarded_disk import GuardedDisk, GuardedDiskOptions
from elopt.physics.electrodes.pipeline import design_metrics, evaluate_design
from elopt.physics.electrodes.registry import FAMILIES, family_listing

DESIGN = {
    "sensor_radius_mm": 1.5,
    "guard_gap_mm": 0.2,
    "guard_width_mm": 1.0,
    "thickness_mm": 1.0,
    "fillet_mm": 0.1,
    "standoff_mm": 0.5,
    "drive_V": 10.0,
}
# Shared by the solve config and the study config below: a peak-field request, a medium other
# than air and a linearity sweep other than the default, so that a trial ignoring one differs.
SHARED_TABLES = """
[solver]
rel_accuracy = 0.05
peak_rel_accuracy = 0.05

[medium]
eps_r = 2.0

[evaluation]
linearity_points = 3
linearity_range_fraction = 0.2
"""


def _toml_items(values: dict[str, float]) -> str:
    return "".join(f"{k} = {v!r}\n" for k, v in values.items())


def test_same_design_through_solve_and_through_a_study_trial_gives_identical_metrics(
    tmp_path, capsys
):
    solve_cfg = tmp_path / "design.toml"
    solve_cfg.write_text(
        '[geometry]\nfamily = "guarded_disk"\n' + _toml_items(DESIGN) + SHARED_TABLES
    )
    assert main(["solve", str(solve_cfg), "--json"]) == 0
    solved = json.loads(capsys.readouterr().out)

    fixed = {k: v for k, v in DESIGN.items() if k != "sensor_radius_mm"}
    study_text = (
        '[study]\nname = "same"\nfamily = "guarded_disk"\n'
        + SHARED_TABLES
        + "\n[fixed]\n"
        + _toml_items(fixed)
        + "\n[search]\nsensor_radius_mm = { low = 1.0, high = 2.0 }\n"
        + '\n[objectives]\nsensitivity_fF_per_um = "maximize"\n\n[budget]\ntrials = 1\n'
    )
    spec = parse_study_config(tomllib.loads(study_text), study_text, source="same.toml")
    task = trial_task(spec, 0, {"sensor_radius_mm": DESIGN["sensor_radius_mm"]})
    outcome = evaluate_task(task)
    assert outcome.ok, outcome.failure

    names = [m.name for m in GuardedDisk.metric_catalog()]
    assert set(outcome.metrics) == set(names)
    for name in names:
        assert math.isfinite(outcome.metrics[name]), name
        assert solved[name] == outcome.metrics[name], name

    # The shared tables matter: a trial without them evaluates another design.
    bare = evaluate_task(dataclasses.replace(task, eps_r=1.0, options={}))
    assert bare.metrics["sense_capacitance_fF"] != outcome.metrics["sense_capacitance_fF"]
    assert bare.metrics["linearity_error_pct_fs"] != outcome.metrics["linearity_error_pct_fs"]


class _CountingDisk(GuardedDisk):
    """The guarded disk, counting the solves the pipeline asks of it."""

    def __init__(self) -> None:
        self.solves = 0

    def solve(self, layout, *, solve_options, options):
        self.solves += 1
        return super().solve(layout, solve_options=solve_options, options=options)


@pytest.mark.parametrize(("points", "solves"), [(0, 1), (3, 3), (4, 5)])
def test_the_pipeline_does_every_solve_of_a_sweep(points, solves):
    # An odd standoff count reuses the nominal solve; an even one has no nominal point.
    family = _CountingDisk()
    params = family.Params(**DESIGN)
    ev = evaluate_design(
        family, params, rel_accuracy=0.05, options=GuardedDiskOptions(linearity_points=points)
    )
    assert family.solves == solves
    assert len(ev.extra["linearity_standoff_m"]) == points
    assert math.isnan(ev.metrics["linearity_error_pct_fs"]) == (points == 0)


def test_every_metric_is_declared_once_and_every_parameter_carries_its_unit():
    for family in FAMILIES.values():
        catalog = family.metric_catalog()
        assert len({m.name for m in catalog}) == len(catalog)
        for m in catalog:
            # The very object of the registry, not a copy declared again in the family.
            assert metrics.ALL[m.name] is m, (family.name, m.name)
        assert metrics.PEAK_FIELD in catalog
        for spec in family.parameters() + family.options():
            assert spec.meaning, (family.name, spec.name)
            # Unit-suffixed names at the edges (common practice, no source): the declared unit
            # agrees with the suffix where there is one.
            for suffix, unit in (("_mm", "mm"), ("_V", "V"), ("_deg", "deg"), ("_pct", "%")):
                if spec.name.endswith(suffix):
                    assert spec.unit == unit, (family.name, spec.name)


def test_family_listing_shows_parameters_units_and_ranges():
    listing = {f.name: f for f in family_listing()}
    assert set(listing) == set(FAMILIES)
    disk = listing["guarded_disk"].as_dict()
    json.dumps(disk)  # plain JSON types only
    by_name = {p["name"]: p for p in disk["parameters"]}
    assert by_name["sensor_radius_mm"]["unit"] == "mm"
    assert by_name["sensor_radius_mm"]["allowed"] == "(0, inf)"
    assert by_name["sensor_radius_mm"]["required"] is True
    assert by_name["recess_mm"]["default"] == 0.0 and by_name["recess_mm"]["allowed"] == "[0, inf)"
    assert by_name["drive_V"]["allowed"] == "|value| in [1e-06, 1e+07], != 0"
    options = {p["name"]: p for p in disk["options"]}
    assert options["linearity_points"]["allowed"] == "whole number in [0, 25]"
    pad = {p.name: p for p in listing["guarded_pad"].parameters}
    assert pad["target_tilt_deg"].unit == "deg" and pad["target_tilt_deg"].allowed == "[-10, 10]"
    assert listing["uniform_field"].mirror_pair is True
    assert by_name["standoff_mm"]["mounting"] and not by_name["guard_gap_mm"]["mounting"]
    assert FAMILIES["guarded_pad"].mounting_parameters() == (
        "standoff_mm",
        "target_tilt_deg",
        "tilt_axis_x_mm",
    )
    assert "peak_surface_field_V_per_m" in [m["name"] for m in disk["metrics"]]


@pytest.mark.parametrize(
    ("info", "value", "broken"),
    [
        (ParameterInfo("mm", "x", low=0, low_open=True), 0.0, "x = 0 must be > 0"),
        (ParameterInfo("mm", "x", low=0), -1.0, "x = -1 must be >= 0"),
        (ParameterInfo("mm", "x", low=0), 0.0, None),
        (ParameterInfo("V", "x", nonzero=True), 0.0, "x = 0 must be nonzero"),
        (ParameterInfo("deg", "x", low=-10, high=10), 12.0, "x = 12 must lie in [-10, 10]"),
        (ParameterInfo("", "x", low=1, high=4, whole=True), 2.0, "x = 2.0 must be a whole number"),
        (ParameterInfo("", "x", low=1, high=4, whole=True), 5, "x = 5 must be a whole number in"),
        (ParameterInfo("", "x", low=1, high=4, whole=True), 4, None),
    ],
)
def test_declared_range_checks(info, value, broken):
    got = info.broken_rule("x", value)
    assert (got is None) if broken is None else got.startswith(broken), got


def test_parameter_specs_of_a_dataclass_without_declarations():
    @dataclasses.dataclass(frozen=True)
    class Plain:
        width_mm: float
        count: int = 3

    specs = parameter_specs(Plain)
    assert [(s.name, s.unit, s.allowed, s.required) for s in specs] == [
        ("width_mm", "", "any", True),
        ("count", "", "any", False),
    ]


def test_design_metrics_is_the_pipeline_at_fixed_settings():
    family = FAMILIES["guarded_disk"]
    options = GuardedDiskOptions(linearity_points=0)
    metrics_at = design_metrics(family, rel_accuracy=0.05, eps_r=2.0, options=options)
    direct = evaluate_design(
        family, family.Params(**DESIGN), rel_accuracy=0.05, eps_r=2.0, options=options
    )
    # Bit-identical, NaN (no linearity sweep) included.
    np.testing.assert_equal(metrics_at(DESIGN), direct.metrics)


def test_repository_configs_still_parse():
    from elopt.optimizer.config import load_study_config, read_solve_config

    root = Path(__file__).resolve().parents[1] / "configs"
    for path in sorted(root.glob("*.toml")):
        text = path.read_text()
        if "[study]" in text:
            load_study_config(path)
        else:
            read_solve_config(path)

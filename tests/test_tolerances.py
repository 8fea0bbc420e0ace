"""Tolerance evaluation: worst cases and quantiles against closed forms and brute force."""

from __future__ import annotations

import itertools
import math
from statistics import NormalDist

import pytest

from elopt.optimizer.config.tolerance_config import parse_tolerances
from elopt.optimizer.errors import ConfigError
from elopt.optimizer.study.tolerances import (
    Tolerance,
    ToleranceSpec,
    Treatment,
    evaluate_toleranced,
)


def _linear(params: dict[str, float]) -> dict[str, float]:
    return {"f": 3.0 * params["a"] - 2.0 * params["b"] + 1.0}


def test_linear_worst_case_is_exact_and_names_its_driver():
    """The extreme of a linear function over a box sits at the corner picked by the signs of
    its slopes (common practice, no source: linear programming over a box)."""
    spec = ToleranceSpec(
        (Tolerance("a", 0.1, 0.2), Tolerance("b", 0.05, 0.05)),
        {"f": Treatment("worst", "high")},
        method="first_order",
    )
    res = evaluate_toleranced(spec, {"a": 1.0, "b": 2.0}, _linear)
    expected = 3.0 * 1.2 - 2.0 * 1.95 + 1.0
    assert res.method == "first_order"
    assert res.value["f"] == pytest.approx(expected, rel=1e-12)
    assert res.driver["f"] == "a +0.2"
    assert res.nominal["f"] == pytest.approx(0.0)
    assert res.evaluations == 1 + 4 + 1  # nominal, two ends per range, one corner check


def test_low_side_worst_case_of_a_maximised_metric():
    spec = ToleranceSpec(
        (Tolerance("a", 0.1, 0.2), Tolerance("b", 0.05, 0.05)),
        {"f": Treatment("worst", "low")},
        method="first_order",
    )
    res = evaluate_toleranced(spec, {"a": 1.0, "b": 2.0}, _linear)
    assert res.value["f"] == pytest.approx(3.0 * 0.9 - 2.0 * 2.05 + 1.0, rel=1e-12)


def test_normal_quantile_of_a_linear_sum():
    """A linear combination of independent normals is normal with the summed variance
    (any probability text); the range is +-3 sigma (common practice, no source)."""
    spec = ToleranceSpec(
        (Tolerance("a", 0.3, 0.3), Tolerance("b", 0.6, 0.6)),
        {"f": Treatment("quantile", "high", 0.99, "normal")},
        method="first_order",
    )
    res = evaluate_toleranced(spec, {"a": 0.0, "b": 0.0}, _linear)
    sd = math.hypot(3.0 * 0.1, 2.0 * 0.2)
    assert res.value["f"] == pytest.approx(1.0 + NormalDist().inv_cdf(0.99) * sd, rel=1e-12)


def test_uniform_quantile_matches_the_triangular_distribution():
    """The sum of two independent equal uniforms on [-w, w] is triangular on [-2w, 2w]; its
    upper q-quantile is 2w (1 - sqrt(2 (1 - q))) (Irwin-Hall, n = 2; any probability text).
    The Monte-Carlo quantile's error is about sqrt(q (1 - q) / N) in probability."""
    spec = ToleranceSpec(
        (Tolerance("a", 1.0, 1.0), Tolerance("b", 1.0, 1.0)),
        {"f": Treatment("quantile", "high", 0.95, "uniform")},
        method="first_order",
    )
    res = evaluate_toleranced(spec, {"a": 0.0, "b": 0.0}, lambda p: {"f": p["a"] + p["b"]})
    exact = 2.0 * (1.0 - math.sqrt(2.0 * 0.05))
    # density at that point is (2 - x)/4; a probability error of 5 sqrt(q(1-q)/N) maps to x
    dx = 5 * math.sqrt(0.95 * 0.05 / 200_000) / ((2.0 - exact) / 4.0)
    assert abs(res.value["f"] - exact) < dx


def test_curvature_switches_to_corners_and_corners_find_the_true_extreme():
    """f = (a - 0.5)^2 + b around a = 0.3: the slope of a flips sign inside its range, so
    the curvature test must refuse the linear model; the corner maximum is (-0.7 - 0.5)^2 + 1
    (the extreme of a convex function on an interval sits at an end: common practice)."""
    spec = ToleranceSpec(
        (Tolerance("a", 1.0, 1.0), Tolerance("b", 1.0, 1.0)),
        {"f": Treatment("worst", "high")},
        method="first_order",
    )

    def f(p: dict[str, float]) -> dict[str, float]:
        return {"f": (p["a"] - 0.5) ** 2 + p["b"]}

    res = evaluate_toleranced(spec, {"a": 0.3, "b": 0.0}, f)
    assert res.method == "corners" and "curvature test" in res.reason
    assert res.value["f"] == pytest.approx(1.2**2 + 1.0, rel=1e-12)


def test_interaction_switches_to_corners():
    """f = a b is linear in each parameter alone (passes the curvature test) but its corners
    differ from the additive model: the corner check must catch it."""
    spec = ToleranceSpec(
        (Tolerance("a", 1.0, 1.0), Tolerance("b", 1.0, 1.0)),
        {"f": Treatment("worst", "high")},
        method="first_order",
    )
    res = evaluate_toleranced(spec, {"a": 0.0, "b": 0.0}, lambda p: {"f": p["a"] * p["b"]})
    assert res.method == "corners" and "interaction test" in res.reason
    assert res.value["f"] == pytest.approx(1.0)


def test_config_table_is_parsed_and_refuses_bad_keys():
    table = {
        "parameters": {"guard_gap_mm": 0.01, "fillet_mm": {"minus": 0.01, "plus": 0.005}},
        "mounting": {"standoff_mm": 0.02},
        "apply": {
            "sensitivity_fF_per_um": "worst",
            "peak_surface_field_V_per_m": {"quantile": 0.99},
        },
    }
    names = ("guard_gap_mm", "fillet_mm", "standoff_mm", "sensor_radius_mm")
    directions = {"sensitivity_fF_per_um": "low", "peak_surface_field_V_per_m": "high"}
    mounting = ("standoff_mm",)
    spec = parse_tolerances(
        table, parameter_names=names, mounting_names=mounting, directions=directions
    )
    assert [(t.name, t.minus, t.plus) for t in spec.tolerances] == [
        ("guard_gap_mm", 0.01, 0.01),
        ("fillet_mm", 0.01, 0.005),
        ("standoff_mm", 0.02, 0.02),
    ]
    assert spec.treatments["sensitivity_fF_per_um"] == Treatment("worst", "low")
    assert spec.treatments["peak_surface_field_V_per_m"].quantile == 0.99
    bad = [
        ({"parameters": {"gap_mm": 0.01}}, "tolerance.parameters.gap_mm: the family has no"),
        ({"mounting": {"fillet_mm": 0.01}}, "is not a mounting quantity"),
        ({"parameters": {"fillet_mm": -0.01}}, "tolerance.parameters.fillet_mm: -0.01 is outside"),
        (
            {"parameters": {"fillet_mm": 0.01}, "apply": {"x": "worst"}},
            "tolerance.apply.x: 'x' is not an objective or constraint",
        ),
        (
            {
                "parameters": {"fillet_mm": 0.01},
                "apply": {"sensitivity_fF_per_um": {"quantile": 1.0}},
            },
            "tolerance.apply.sensitivity_fF_per_um.quantile: 1 is outside the allowed range (0.5, 1)",
        ),
    ]
    for t, message in bad:
        with pytest.raises(ConfigError, match=message.replace("(", r"\(").replace(")", r"\)")):
            parse_tolerances(
                t, parameter_names=names, mounting_names=mounting, directions=directions
            )


@pytest.mark.slow
def test_guarded_probe_first_order_worst_case_agrees_with_corners():
    """On the guarded disk probe (gap, fillet and standoff tolerances) the first-order worst
    case agrees with brute-force evaluation of every corner within its stated error (plus the
    solver's own accuracy). The corner set is the reference (common practice, no source: the
    extreme of a function monotone in each variable over a box sits at a corner)."""
    from elopt.physics.electrodes.registry import get_family

    family = get_family("guarded_disk")
    nominal = dict(
        sensor_radius_mm=2.0,
        guard_gap_mm=0.2,
        guard_width_mm=1.5,
        thickness_mm=1.0,
        fillet_mm=0.1,
        standoff_mm=0.5,
        drive_V=10.0,
        recess_mm=0.0,
    )
    rel = 1e-5

    def evaluate(p: dict[str, float]) -> dict[str, float]:
        params = family.Params(**p)
        family.validate(params)
        ev = family.evaluate(params, rel_accuracy=rel)
        return {k: float(v) for k, v in ev.metrics.items()}

    tolerances = (
        Tolerance("guard_gap_mm", 0.01, 0.01),
        Tolerance("fillet_mm", 0.01, 0.01),
        Tolerance("standoff_mm", 0.02, 0.02),
    )
    treatments = {
        "sensitivity_fF_per_um": Treatment("worst", "low"),
        "peak_surface_field_V_per_m": Treatment("worst", "high"),
    }
    first = evaluate_toleranced(
        ToleranceSpec(tolerances, treatments, method="first_order"),
        nominal,
        evaluate,
        rel_floor=rel,
    )
    assert first.method == "first_order", first.reason
    corners = {}
    for signs in itertools.product(*[(-t.minus, t.plus) for t in tolerances]):
        p = dict(nominal)
        for t, dv in zip(tolerances, signs, strict=True):
            p[t.name] += dv
        corners[signs] = evaluate(p)
    for metric, treat in treatments.items():
        pick = min if treat.direction == "low" else max
        brute = pick(v[metric] for v in corners.values())
        allowed = first.error[metric] + 4 * rel * abs(brute)
        assert abs(first.value[metric] - brute) <= allowed, (metric, first.value[metric], brute)
    # standoff drives the sensitivity (it moves 1/d^2), so it must be named as the driver
    assert first.driver["sensitivity_fF_per_um"].startswith("standoff_mm +")


def _tolerant_fixture_spec(limit_mm: float):
    """The fixture study with size_mm <= limit and width_mm known to +-0.5 mm, judged worst."""
    import tomllib

    from study_support.configs import FIXTURE_STUDY

    from elopt.optimizer.config import parse_study_config

    text = FIXTURE_STUDY.format(trials=4, delay_s=0.0, sampler="tpe", handover=100000)
    text = text.replace("[constraints]\n", f"[constraints]\nsize_mm = {{ max = {limit_mm} }}\n") + (
        "\n[tolerance.parameters]\nwidth_mm = 0.5\n"
        '\n[tolerance.apply]\nsize_mm = "worst"\nscore_fF = "worst"\n'
    )
    return parse_study_config(tomllib.loads(text), text, source="tolerant.toml")


def test_a_constraint_that_fails_within_tolerance_makes_the_trial_infeasible():
    """size_mm = width + gap: at nominal 3.0 + 0.6 = 3.6 <= 3.8, but width 3.5 gives 4.1."""
    from elopt.optimizer.study.search import _Pending, _record, trial_task
    from elopt.optimizer.study.trial_eval import evaluate_task

    spec = _tolerant_fixture_spec(3.8)
    searched = {"width_mm": 3.0, "gap_mm": 0.6}
    outcome = evaluate_task(trial_task(spec, 0, searched))
    assert outcome.ok, outcome.failure
    assert outcome.metrics["size_mm"] == pytest.approx(3.6)
    assert outcome.toleranced["size_mm"] == pytest.approx(4.1)
    # score = 10 - (w - 3)^2 - ...: both ends of the width range cost 0.25
    assert outcome.toleranced["score_fF"] == pytest.approx(outcome.metrics["score_fF"] - 0.25)
    pend = _Pending(trial=None, study=None, searched=searched, generation=0, rerun_of=None)
    rec = _record(spec, outcome, pend, session=0)
    assert not rec.feasible
    size = [c.metric for c in spec.constraints].index("size_mm")
    assert rec.constraints[size] == pytest.approx(4.1 - 3.8)
    stored = rec.info["tolerance"]
    assert stored["values"]["size_mm"] == pytest.approx(4.1)
    assert stored["driver"]["size_mm"] == "width_mm +0.5"
    assert stored["evaluations"] >= 2
    # reproducible from the stored parameters alone (common practice: deterministic solves)
    again = evaluate_task(trial_task(spec, 1, searched))
    assert again.toleranced == outcome.toleranced


def test_tolerant_study_stores_both_values_and_front_show_and_figure_show_them(tmp_path, capsys):
    """End to end on the fixture family: the study file keeps nominal and toleranced values,
    `show` lists both with the driving tolerance, `front` says the study is toleranced, and the
    front figure draws the nominal points of the front trials."""
    from study_support.cli import run_elopt
    from study_support.configs import FIXTURE_STUDY

    from elopt.optimizer.cli.main import main
    from elopt.optimizer.store import read_study

    text = FIXTURE_STUDY.format(trials=8, delay_s=0.0, sampler="tpe", handover=100000) + (
        "\n[tolerance.parameters]\nwidth_mm = 0.5\n"
        '\n[tolerance.apply]\nsize_mm = "worst"\nscore_fF = "worst"\n'
    )
    cfg = tmp_path / "tolerant.toml"
    cfg.write_text(text)
    out = tmp_path / "tolerant.h5"
    proc = run_elopt("run", cfg, "--out", out, "--workers", "1", cwd=tmp_path, timeout=300)
    assert proc.returncode == 0, proc.stderr
    snap = read_study(out)
    h = snap.header
    k = next(i for i in range(snap.n_trials) if snap.state_names()[i] == "complete")
    stored = snap.info(k)["tolerance"]
    size = h.metric_names.index("size_mm")
    # size_mm = width + gap is linear: its worst case is exactly nominal + 0.5
    assert stored["values"]["size_mm"] == pytest.approx(snap.columns["metrics"][k, size] + 0.5)
    assert main(["show", str(out), str(k)]) == 0
    shown = capsys.readouterr().out
    assert "across tolerances" in shown and "width_mm +0.5" in shown
    assert main(["front", str(out)]) == 0
    assert "judged across the study's tolerances" in capsys.readouterr().out
    pytest.importorskip("matplotlib")
    from elopt.optimizer.report.study_figures import front_figure

    fig = front_figure(snap)
    labels = [t.get_text() for t in fig.axes[0].get_legend().get_texts()]
    assert any(label.startswith("front trials at nominal") for label in labels), labels


def test_a_design_whose_toleranced_solve_fails_is_a_failed_trial():
    """The fixture's solve fails for 4 < width < 4.2: a nominal width of 4.6 solves, but the
    -0.5 end of its tolerance does not. The trial must fail with that reason, never be stored
    as complete with nominal values only."""
    from elopt.optimizer.study.search import trial_task
    from elopt.optimizer.study.trial_eval import evaluate_task

    spec = _tolerant_fixture_spec(20.0)
    outcome = evaluate_task(trial_task(spec, 0, {"width_mm": 4.6, "gap_mm": 1.0}))
    assert not outcome.ok
    assert "within tolerance (width_mm = 4.1)" in outcome.failure

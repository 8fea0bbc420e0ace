"""Deterministic study headers and trial records for store tests (test fixtures, not physics)."""

from __future__ import annotations

import numpy as np

from elopt.optimizer.record import ConductorRecord, DesignRecord, PeakRecord, SurfaceSamples
from elopt.optimizer.store import StudyHeader, TrialRecord


def small_header(config_toml: str = "[study]\nname = 'fixture'\n") -> StudyHeader:
    return StudyHeader(
        study_name="fixture",
        family="fixture_family",
        config_toml=config_toml,
        parameter_names=("width_mm", "gap_mm", "drive_V"),
        parameter_units=("mm", "mm", "V"),
        parameter_searched=(True, True, False),
        search_low=(1.0, 0.1, np.nan),
        search_high=(5.0, 1.0, np.nan),
        search_log=(False, True, False),
        search_step=(np.nan, np.nan, np.nan),
        metric_names=("size_mm", "score_fF", "peak_surface_field_V_per_m"),
        metric_units=("mm", "fF", "V/m"),
        objective_names=("score_fF", "size_mm"),
        objective_directions=("maximize", "minimize"),
        objective_units=("fF", "mm"),
        constraint_names=("peak_surface_field_V_per_m <= 3e+06",),
        constraint_metrics=("peak_surface_field_V_per_m",),
        constraint_kinds=("max",),
        constraint_limits=(3e6,),
        constraint_units=("V/m",),
    )


def _surface(name: str, index: int, number: int) -> SurfaceSamples:
    """Profiles for most trials, 3-D panels (no arc length) for every fifth."""
    k = float(number)
    n_samples = 25 + (number * 37 + index) % 100
    s = np.arange(n_samples, dtype=float)
    panels = number % 5 == 4
    d = 3 if panels else 2
    points = np.column_stack([s * 1e-4 + k + j for j in range(d)])
    normal = np.zeros((n_samples, d))
    normal[:, -1] = 1.0
    face = np.zeros(n_samples, dtype=np.int8)
    if index == 1 and not panels:  # the second conductor is an open sheet: two faces
        face[: n_samples // 2], face[n_samples // 2 :] = 1, -1
    return SurfaceSamples(
        conductor=name,
        kind="panels" if panels else "profile",
        points_m=points,
        sigma_C_per_m2=(s + k) * 1e-6,
        field_V_per_m=(s + k) * 1e5,
        area_m2=np.full(n_samples, 1e-8 * (1 + index)),
        face=face,
        normal=normal,
        arc_length_m=None if panels else s * 1e-4,
    )


def design_for(number: int) -> DesignRecord:
    k = float(number)
    panels = number % 5 == 4
    return DesignRecord(
        family="fixture_family",
        parameters={"width_mm": 1.0 + k, "gap_mm": 0.5 + k / 10, "drive_V": 100.0},
        parameter_units={"width_mm": "mm", "gap_mm": "mm", "drive_V": "V"},
        conductors=(ConductorRecord("a", 100.0, None), ConductorRecord("b", None, 0.0)),
        ground_plane=True,
        capacitance_matrix_F=np.array([[k, -1.0], [-1.0, k + 1]]),
        charges_C=np.array([k, 0.0]),
        potentials_V=np.array([100.0, 50.0 + k]),
        sense_capacitance_F=k + 0.5,
        sense_capacitance_meaning="fixture",
        peak=PeakRecord("b", 1e6 + k, (k, 1.0, 2.0) if panels else (k, 2.0), number % 2 == 0, 1e-3),
        relative_error_estimate=1e-4 * (1 + k),
        requested_accuracy=1e-3,
        accuracy_met=True,
        n_unknowns=100 + number,
        metrics={"size_mm": k, "score_fF": 2 * k, "peak_surface_field_V_per_m": 1e6 + k},
        metric_units={"size_mm": "mm", "score_fF": "fF", "peak_surface_field_V_per_m": "V/m"},
        surface=(_surface("a", 0, number), _surface("b", 1, number)),
        extra={"note": f"trial {number}"},
        # every third trial's estimate covers conductor "a" only
        relative_error_estimate_covers=("a",) if number % 3 == 1 else (),
        matrix_relative_error_estimate=3e-4 * (1 + k) if number % 3 == 1 else float("nan"),
    )


def record_for(number: int) -> TrialRecord:
    """A record whose every value is a function of ``number`` (so a reader can verify it)."""
    k = float(number)
    failed = number % 7 == 3
    return TrialRecord(
        state="failed" if failed else "complete",
        params=np.array([1.0 + k, 0.5 + k / 10, 100.0]),
        metrics=np.full(3, np.nan) if failed else np.array([k, 2 * k, 1e6 + k]),
        objectives=np.full(2, np.nan) if failed else np.array([2 * k, k]),
        constraints=np.full(1, np.nan) if failed else np.array([1e6 + k - 3e6]),
        feasible=not failed,
        started_unix=1e9 + k,
        finished_unix=1e9 + k + 0.5,
        solve_s=0.25,
        worker=number % 2,
        design=None if failed else design_for(number),
        info={"failure": f"rule broken at trial {number}"} if failed else {},
    )


def assert_same_design(stored: DesignRecord, given: DesignRecord) -> None:
    """Every field of the record survives the file (parameters as floats)."""
    for name in (
        "conductors",
        "ground_plane",
        "sense_capacitance_F",
        "sense_capacitance_meaning",
        "peak",
        "relative_error_estimate",
        "estimate_covers",
        "matrix_estimate",
        "requested_accuracy",
        "accuracy_met",
        "n_unknowns",
        "metrics",
        "metric_units",
        "extra",
        "family",
        "parameters",
        "parameter_units",
    ):
        assert getattr(stored, name) == getattr(given, name), name
    for name in ("capacitance_matrix_F", "charges_C", "potentials_V"):
        np.testing.assert_array_equal(getattr(stored, name), getattr(given, name), err_msg=name)
    assert len(stored.surface) == len(given.surface)
    for a, b in zip(stored.surface, given.surface, strict=True):
        assert (a.conductor, a.kind) == (b.conductor, b.kind)
        for name in ("points_m", "normal", "face", "sigma_C_per_m2", "field_V_per_m", "area_m2"):
            np.testing.assert_array_equal(getattr(a, name), getattr(b, name), err_msg=name)
        if b.arc_length_m is None:
            assert a.arc_length_m is None
        else:
            np.testing.assert_array_equal(a.arc_length_m, b.arc_length_m)


def check_matches(snapshot, arrays_of, number: int) -> None:
    """Assert the stored trial ``number`` equals :func:`record_for` (``arrays_of(i)`` reads arrays)."""
    rec = record_for(number)
    c = snapshot.columns
    assert c["number"][number] == number
    assert snapshot.state_names()[number] == rec.state
    np.testing.assert_array_equal(c["params"][number], rec.params)
    np.testing.assert_array_equal(c["metrics"][number], rec.metrics)
    np.testing.assert_array_equal(c["objectives"][number], rec.objectives)
    info = snapshot.info(number)
    for key, value in rec.info.items():
        assert info[key] == value
    arrays = arrays_of(number)
    if rec.design is None:
        assert arrays.capacitance_F.shape == (0, 0) and arrays.surface == ()
        return
    np.testing.assert_array_equal(arrays.capacitance_F, rec.design.capacitance_matrix_F)
    for a, b in zip(arrays.surface, rec.design.surface, strict=True):
        assert (a.conductor, a.kind) == (b.conductor, b.kind)
        np.testing.assert_array_equal(a.sigma_C_per_m2, b.sigma_C_per_m2)
        np.testing.assert_array_equal(a.points_m, b.points_m)

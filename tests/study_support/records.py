"""Deterministic study headers and trial records for store tests (test fixtures, not physics)."""

from __future__ import annotations

import numpy as np

from elopt.optimizer.store.study_file import PROFILE_FIELDS, StudyHeader, TrialRecord


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


def record_for(number: int) -> TrialRecord:
    """A record whose every value is a function of ``number`` (so a reader can verify it)."""
    k = float(number)
    n_samples = 50 + (number * 37) % 200
    s = np.arange(n_samples, dtype=float)
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
        capacitance_F=np.zeros((0, 0)) if failed else np.array([[k, -1.0], [-1.0, k + 1]]),
        profile=None
        if failed
        else {
            name: (s + k).astype(np.int16 if name == "conductor" else float)
            for name in PROFILE_FIELDS
        },
        info={"failure": f"rule broken at trial {number}"}
        if failed
        else {"conductors": ["a", "b"]},
    )


def check_matches(snapshot, arrays_of, number: int) -> None:
    """Assert the stored trial ``number`` equals :func:`record_for` (``arrays_of(i)`` reads arrays)."""
    rec = record_for(number)
    c = snapshot.columns
    assert c["number"][number] == number
    assert snapshot.state_names()[number] == rec.state
    np.testing.assert_array_equal(c["params"][number], rec.params)
    np.testing.assert_array_equal(c["metrics"][number], rec.metrics)
    np.testing.assert_array_equal(c["objectives"][number], rec.objectives)
    assert snapshot.info(number) == rec.info
    arrays = arrays_of(number)
    np.testing.assert_array_equal(arrays.capacitance_F, rec.capacitance_F)
    if rec.profile is not None:
        for name, values in rec.profile.items():
            np.testing.assert_array_equal(arrays.profile[name], values)
    else:
        assert len(arrays.profile["sigma_C_per_m2"]) == 0

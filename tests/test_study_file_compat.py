"""A study file written by format_version 1 (tests/data/study_v1.h5, six guarded_disk trials
written by `elopt run`) must always open, read, show and take appends (after an upgrade to
format_version 2 that keeps the original beside it)."""

from __future__ import annotations

import dataclasses
import shutil
from pathlib import Path

import h5py
import numpy as np

from elopt.optimizer.cli.main import main
from elopt.optimizer.store import (
    StudyWriter,
    TrialRecord,
    read_design,
    read_study,
    read_trial_arrays,
)

V1 = Path(__file__).parent / "data" / "study_v1.h5"


def test_v1_file_reads():
    snap = read_study(V1)
    h = snap.header
    assert snap.format_version == 1
    assert snap.n_trials == 6
    assert h.family == "guarded_disk" and h.study_name == "probe"
    assert h.objective_names == ("sensitivity_fF_per_um", "outer_radius_mm")
    assert h.config_sha256 == "c09913f5544f566ea09521b4b3489c757885deca7563a32ba39279df32f74569"
    assert list(snap.state_names()) == ["complete"] * 6
    first = snap.columns["params"][0]
    assert first[h.parameter_names.index("sensor_radius_mm")] == 1.2326167831922437
    arrays = read_trial_arrays(V1, 0)
    assert arrays.capacitance_F.shape == (2, 2)
    assert [s.conductor for s in arrays.surface] == ["sensor", "guard"]
    assert sum(len(s.sigma_C_per_m2) for s in arrays.surface) > 50
    assert all(s.kind == "profile" and s.points_m.shape[1] == 2 for s in arrays.surface)


def test_v1_columns_read_under_the_record_names():
    """Version 1 names (rel_error_estimate, peak_field_V_per_m, peak_singular, peak_r_m/z_m)
    read as the record's names."""
    snap = read_study(V1)
    c = snap.columns
    with h5py.File(V1, "r") as f:
        np.testing.assert_array_equal(
            c["relative_error_estimate"], f["trials/rel_error_estimate"][:6]
        )
        np.testing.assert_array_equal(
            c["peak_surface_field_V_per_m"], f["trials/peak_field_V_per_m"][:6]
        )
        np.testing.assert_array_equal(c["peak_at_sharp_corner"], f["trials/peak_singular"][:6])
        np.testing.assert_array_equal(c["peak_location_m"][:, 0], f["trials/peak_r_m"][:6])
        np.testing.assert_array_equal(c["peak_location_m"][:, 1], f["trials/peak_z_m"][:6])
        o, k = f["trials/profile_offset"][2], f["trials/profile_length"][2]
        sigma = f["profiles/sigma_C_per_m2"][o : o + k]
    design = read_design(V1, 2)
    assert design.family == "guarded_disk"
    np.testing.assert_array_equal(np.concatenate([s.sigma_C_per_m2 for s in design.surface]), sigma)
    assert design.peak.field_V_per_m == c["peak_surface_field_V_per_m"][2]
    assert len(design.peak.location_m) == 2


def test_v1_file_front_and_show(capsys):
    assert main(["front", str(V1)]) == 0
    assert "Pareto front:" in capsys.readouterr().out
    for i in range(6):
        assert main(["show", str(V1), str(i)]) == 0
        assert f"trial {i} of study probe" in capsys.readouterr().out


def test_v1_file_takes_appends(tmp_path, capsys):
    path = tmp_path / "v1.h5"
    shutil.copy(V1, path)
    snap = read_study(path)
    c = snap.columns
    before = [read_design(path, i) for i in range(6)]
    with StudyWriter.open(path) as w:
        n = w.append(
            TrialRecord(
                state="failed",
                params=c["params"][0],
                metrics=np.full(len(snap.header.metric_names), np.nan),
                objectives=np.full(2, np.nan),
                constraints=np.full(1, np.nan),
                info={"failure": "appended by the compatibility test"},
            )
        )
    assert n == 6
    assert "upgraded study format 1 to 2 (6 trials)" in capsys.readouterr().out
    kept = list(tmp_path.glob("v1.h5.v1-*"))
    assert len(kept) == 1 and kept[0].read_bytes() == V1.read_bytes()
    after = read_study(path)
    assert after.format_version == 2
    assert after.n_trials == 7 and after.info(6)["failure"] == "appended by the compatibility test"
    np.testing.assert_array_equal(after.columns["objectives"][:6], c["objectives"])
    for i in range(6):
        d = read_design(path, i)
        np.testing.assert_equal(dataclasses.astuple(d.peak), dataclasses.astuple(before[i].peak))
        np.testing.assert_equal(d.metrics, before[i].metrics)
        np.testing.assert_array_equal(d.capacitance_matrix_F, before[i].capacitance_matrix_F)
        for a, b in zip(d.surface, before[i].surface, strict=True):
            np.testing.assert_array_equal(a.sigma_C_per_m2, b.sigma_C_per_m2)
            np.testing.assert_array_equal(a.arc_length_m, b.arc_length_m)

"""A study file written by format_version 1 (tests/data/study_v1.h5, six guarded_disk trials
written by `elopt run`) must always open, read, show and take appends."""

from __future__ import annotations

import shutil
from pathlib import Path

import numpy as np

from elopt.optimizer.cli.main import main
from elopt.optimizer.store.study_file import StudyWriter, TrialRecord, read_study, read_trial_arrays

V1 = Path(__file__).parent / "data" / "study_v1.h5"


def test_v1_file_reads():
    snap = read_study(V1)
    h = snap.header
    assert snap.n_trials == 6
    assert h.family == "guarded_disk" and h.study_name == "probe"
    assert h.objective_names == ("sensitivity_fF_per_um", "outer_radius_mm")
    assert h.config_sha256 == "c09913f5544f566ea09521b4b3489c757885deca7563a32ba39279df32f74569"
    assert list(snap.state_names()) == ["complete"] * 6
    first = snap.columns["params"][0]
    assert first[h.parameter_names.index("sensor_radius_mm")] == 1.2326167831922437
    arrays = read_trial_arrays(V1, 0)
    assert arrays.capacitance_F.shape == (2, 2)
    assert len(arrays.profile["sigma_C_per_m2"]) > 50
    assert set(arrays.profile["conductor"].tolist()) == {0, 1}


def test_v1_file_front_and_show(capsys):
    assert main(["front", str(V1)]) == 0
    assert "Pareto front:" in capsys.readouterr().out
    for i in range(6):
        assert main(["show", str(V1), str(i)]) == 0
        assert f"trial {i} of study probe" in capsys.readouterr().out


def test_v1_file_takes_appends(tmp_path):
    path = tmp_path / "v1.h5"
    shutil.copy(V1, path)
    snap = read_study(path)
    c = snap.columns
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
    after = read_study(path)
    assert after.n_trials == 7 and after.info(6)["failure"] == "appended by the compatibility test"
    np.testing.assert_array_equal(after.columns["objectives"][:6], c["objectives"])

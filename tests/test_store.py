"""The HDF5 study store: round trip, plain-h5py layout, locking, truncation, salvage."""

from __future__ import annotations

import json
import subprocess
import sys
from dataclasses import replace
from pathlib import Path

import h5py
import numpy as np
import pytest
from study_support.records import assert_same_design, check_matches, record_for, small_header

from elopt.optimizer.errors import StudyFileError
from elopt.optimizer.store import (
    STATES,
    StudyWriter,
    check_is_study,
    read_design,
    read_study,
    read_trial_arrays,
    salvage,
)

TESTS_DIR = Path(__file__).parent


def _write(path: Path, n: int) -> None:
    with StudyWriter.create(path, small_header()) as w:
        w.begin_session(target_trials=n, hours=None, workers=1)
        for i in range(n):
            assert w.append(record_for(i)) == i


def test_round_trip_every_column(tmp_path):
    path = tmp_path / "s.h5"
    _write(path, 20)
    snap = read_study(path)
    assert snap.n_trials == 20
    for i in range(20):
        check_matches(snap, lambda k: read_trial_arrays(path, k), i)
    stored, given = snap.header, small_header()
    for name in given.__dataclass_fields__:
        if name != "created_utc":
            np.testing.assert_array_equal(getattr(stored, name), getattr(given, name), err_msg=name)
    assert stored.created_utc
    assert list(snap.sessions["target_trials"]) == [20]


def test_layout_reads_with_plain_h5py(tmp_path):
    """The documented layout (optimizer/STUDY_FILE.md), read with h5py alone."""
    path = tmp_path / "s.h5"
    _write(path, 12)
    with h5py.File(path, "r") as f:
        assert f.attrs["format"] == "elopt study"
        assert int(f.attrs["format_version"]) == 2
        n = int(f["commit"][0])
        assert n == 12
        assert list(f["commit"].attrs["fields"]) == [
            "trials",
            "capacitance",
            "surface",
            "text",
            "sessions",
        ]
        names = list(f.attrs["parameter_names"])
        width = f["trials/params"][:n, names.index("width_mm")]
        np.testing.assert_array_equal(width, 1.0 + np.arange(12))
        states = np.asarray(f.attrs["state_names"])[f["trials/state"][:n]]
        assert states[3] == "failed" and states[4] == "complete"
        i = 5
        design = record_for(i).design
        o, k = f["trials/surface_offset"][i], f["trials/surface_length"][i]
        sigma = f["surface/sigma_C_per_m2"][o : o + k]
        given = np.concatenate([s.sigma_C_per_m2 for s in design.surface])
        np.testing.assert_array_equal(sigma, given)
        kind = f.attrs["surface_kind_names"][f["trials/surface_kind"][i]]
        assert kind == "profile"
        points = f["surface/points_m"][o : o + k]
        np.testing.assert_array_equal(
            points[:, :2], np.concatenate([s.points_m for s in design.surface])
        )
        assert np.isnan(points[:, 2]).all()
        nc, co = f["trials/n_conductors"][i], f["trials/capacitance_offset"][i]
        cap = f["capacitance_F"][co : co + nc * nc].reshape(nc, nc)
        np.testing.assert_array_equal(cap, design.capacitance_matrix_F)
        # trial 4 holds 3-D panels: three coordinates, no arc length
        o, k = f["trials/surface_offset"][4], f["trials/surface_length"][4]
        assert f.attrs["surface_kind_names"][f["trials/surface_kind"][4]] == "panels"
        assert np.isfinite(f["surface/points_m"][o : o + k]).all()
        assert np.isnan(f["surface/arc_length_m"][o : o + k]).all()
        o, k = f["trials/text_offset"][3], f["trials/text_length"][3]
        info = json.loads(f["text"][o : o + k].tobytes().decode())
        assert info["failure"] == "rule broken at trial 3"
        assert f.attrs["config_sha256"] == small_header().config_sha256


def test_nothing_is_pickled_or_vlen_in_datasets(tmp_path):
    path = tmp_path / "s.h5"
    _write(path, 3)
    kinds = []
    with h5py.File(path, "r") as f:
        f.visititems(
            lambda name, obj: (
                kinds.append((name, obj.dtype.kind)) if isinstance(obj, h5py.Dataset) else None
            )
        )
    assert kinds and all(kind in "iuf" for _, kind in kinds), kinds


def test_second_writer_refused_with_clear_message(tmp_path):
    path = tmp_path / "s.h5"
    _write(path, 2)
    first = StudyWriter.open(path)
    try:
        code = (
            "import sys; from elopt.optimizer.store import StudyWriter\n"
            "from elopt.optimizer.errors import StudyFileError\n"
            f"try:\n    StudyWriter.open({str(path)!r})\n"
            "except StudyFileError as e:\n    print(e); sys.exit(3)\n"
        )
        proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
        assert proc.returncode == 3
        assert "another elopt process is writing this study" in proc.stdout
        assert "one writer at a time" in proc.stdout
    finally:
        first.close()
    StudyWriter.open(path).close()


def test_lock_dies_with_its_holder(tmp_path):
    path = tmp_path / "s.h5"
    _write(path, 1)
    code = (
        "import time; from elopt.optimizer.store import StudyWriter\n"
        f"w = StudyWriter.open({str(path)!r}); print('locked', flush=True); time.sleep(60)\n"
    )
    proc = subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.PIPE, text=True)
    assert proc.stdout.readline().strip() == "locked"
    with pytest.raises(StudyFileError, match="another elopt process"):
        StudyWriter.open(path)
    proc.kill()
    proc.wait()
    StudyWriter.open(path).close()


def test_reopen_truncates_uncommitted_rows(tmp_path):
    path = tmp_path / "s.h5"
    _write(path, 5)
    # Rows past the commit counter, as a kill between the data flush and the commit leaves.
    with h5py.File(path, "r+") as f:
        for name in ("number", "state"):
            ds = f[f"trials/{name}"]
            ds.resize(300, axis=0)
            ds[5:300] = 1
        f["surface/points_m"].resize(100_000, axis=0)
    with StudyWriter.open(path) as w:
        assert w.n_trials == 5
        assert w.append(record_for(5)) == 5
    snap = read_study(path)
    assert snap.n_trials == 6
    for i in range(6):
        check_matches(snap, lambda k: read_trial_arrays(path, k), i)


def test_create_refuses_existing_study_and_non_study(tmp_path):
    path = tmp_path / "s.h5"
    _write(path, 4)
    with pytest.raises(StudyFileError, match=r"already holds a study \(4 trials\).*--overwrite"):
        StudyWriter.create(path, small_header())
    assert read_study(path).n_trials == 4
    other = tmp_path / "notes.h5"
    other.write_text("hello")
    with pytest.raises(StudyFileError, match="not an elopt study.*--overwrite"):
        StudyWriter.create(other, small_header())
    assert other.read_text() == "hello"
    with StudyWriter.create(path, small_header(), overwrite=True) as w:
        assert w.n_trials == 0


def test_not_a_study_is_named(tmp_path):
    text = tmp_path / "a.h5"
    text.write_text("not hdf5")
    with pytest.raises(StudyFileError, match="not an HDF5 file"):
        check_is_study(text)
    plain = tmp_path / "b.h5"
    with h5py.File(plain, "w") as f:
        f["x"] = 1
    with pytest.raises(StudyFileError, match="format = 'elopt study'"):
        read_study(plain)
    with pytest.raises(StudyFileError, match="no such file"):
        read_study(tmp_path / "missing.h5")


def test_unknown_trial_number_is_named(tmp_path):
    path = tmp_path / "s.h5"
    _write(path, 3)
    with pytest.raises(StudyFileError, match=r"trial 7 does not exist; trials are 0..2"):
        read_trial_arrays(path, 7)


def test_salvage_copies_committed_trials_and_keeps_original(tmp_path):
    path = tmp_path / "s.h5"
    _write(path, 9)
    backup = salvage(path, reason="test")
    assert backup.exists()
    snap = read_study(path)
    assert snap.n_trials == 9
    for i in range(9):
        check_matches(snap, lambda k: read_trial_arrays(path, k), i)
    assert read_study(backup).n_trials == 9


def test_states_are_documented_codes():
    assert STATES == ("complete", "failed", "interrupted")


def test_writer_snapshot_matches_reader(tmp_path):
    path = tmp_path / "s.h5"
    with StudyWriter.create(path, small_header()) as w:
        for i in range(4):
            w.append(record_for(i))
        own = w.snapshot()
        live = read_study(path)
    assert own.n_trials == live.n_trials == 4
    for key in own.columns:
        np.testing.assert_array_equal(own.columns[key], live.columns[key])


def test_open_salvages_a_file_that_refuses_writes(tmp_path, monkeypatch, capsys):
    import elopt.optimizer.store.writer as store

    path = tmp_path / "s.h5"
    _write(path, 6)
    real = store.truncate_to_commit
    calls = []

    def first_fails(h5):
        calls.append(1)
        if len(calls) == 1:
            raise OSError("simulated: cannot write metadata")
        return real(h5)

    monkeypatch.setattr(store, "truncate_to_commit", first_fails)
    with StudyWriter.open(path) as w:
        assert w.n_trials == 6
        w.append(record_for(6))
    assert "salvaged 6 committed trials" in capsys.readouterr().out
    assert len(list(tmp_path.glob("s.h5.damaged-*"))) == 1
    snap = read_study(path)
    for i in range(7):
        check_matches(snap, lambda k: read_trial_arrays(path, k), i)


def test_design_record_round_trips_through_the_file(tmp_path):
    """The one design record goes in and comes out whole, profiles and 3-D panels alike."""
    path = tmp_path / "s.h5"
    _write(path, 10)
    for i in range(10):
        given = record_for(i).design
        stored = read_design(path, i)
        if given is None:
            assert stored is None
        else:
            assert_same_design(stored, given)
    assert read_design(path, 4).surface_kind == "panels"
    assert read_design(path, 4).surface[0].arc_length_m is None
    faces = read_design(path, 0).surface[1].face
    assert set(faces.tolist()) == {1, -1}


def test_show_draws_3d_samples_along_their_height(tmp_path, capsys):
    """3-D panels have no arc length: `show` plots them against z, not all at one point."""
    from elopt.optimizer.cli.main import main

    path = tmp_path / "s.h5"
    _write(path, 5)
    assert main(["show", str(path), "4"]) == 0
    out = " ".join(capsys.readouterr().out.split())  # the console wraps long lines
    assert "height z of the panel [mm]" in out
    assert "x = 4000 mm, y = 1000 mm, z = 2000 mm" in out
    assert main(["show", str(path), "0"]) == 0
    out = capsys.readouterr().out
    assert "arc length along the electrode [mm]" in out and "b (+ face)" in out


def test_study_without_constraints_round_trips(tmp_path):
    # A study may have objectives only; its constraint columns are zero wide.
    path = tmp_path / "s.h5"
    header = replace(
        small_header(),
        constraint_names=(),
        constraint_metrics=(),
        constraint_kinds=(),
        constraint_limits=(),
        constraint_units=(),
    )
    with StudyWriter.create(path, header) as w:
        w.begin_session(target_trials=3, hours=None, workers=1)
        for i in range(3):
            w.append(replace(record_for(i), constraints=np.zeros(0)))
    snap = read_study(path)
    assert snap.n_trials == 3
    assert snap.header.constraint_names == ()
    assert snap.columns["constraints"].shape == (3, 0)

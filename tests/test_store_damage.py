"""Damaged and tampered study files: every reader refuses with one line naming the damage
(exit 2), a writer leaves a file that does not validate untouched, and `elopt salvage`
recovers the committed trials that still read into a new file."""

from __future__ import annotations

import hashlib
import shutil
from pathlib import Path

import h5py
import numpy as np
import pytest
from study_support.configs import fixture_study
from study_support.records import check_matches, record_for, small_header

from elopt.optimizer.cli.main import main
from elopt.optimizer.errors import StudyFileError
from elopt.optimizer.store import StudyWriter, read_study, read_trial_arrays, salvage_to

N_TRIALS = 10


@pytest.fixture(autouse=True)
def _fast_retries(monkeypatch):
    """A broken rule is retried in case a writer is mid-append; damage need not wait 2 s."""
    monkeypatch.setattr("elopt.optimizer.store.reader.READ_RETRY_SLEEP_S", 0.001)


@pytest.fixture(scope="module")
def study(tmp_path_factory) -> Path:
    """A real study of the fixture family, written by `elopt run`."""
    tmp = tmp_path_factory.mktemp("damage")
    out = tmp / "fixture.h5"
    cfg = fixture_study(tmp, trials=N_TRIALS)
    assert main(["run", str(cfg), "--out", str(out), "--workers", "1"]) == 0
    return out


def _copy(study: Path, tmp_path: Path) -> Path:
    path = tmp_path / "s.h5"
    shutil.copy(study, path)
    return path


def _digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _one_error_line(capsys) -> str:
    err = capsys.readouterr().err.strip()
    assert "\n" not in err and "Traceback" not in err, err
    assert err.startswith("elopt: error: "), err
    return err


def _first_complete(path: Path) -> int:
    return int(np.flatnonzero(read_study(path).state_names() == "complete")[0])


def _set_attr(name, value):
    def tamper(f):
        f.attrs[name] = value

    return tamper


def _del_attr(name):
    def tamper(f):
        del f.attrs[name]

    return tamper


def _set(dataset, index, value):
    def tamper(f):
        f[dataset][index] = value

    return tamper


def _set_metric(name, value):
    def tamper(f):
        f["trials/metrics"][(-1, list(f.attrs["metric_names"]).index(name))] = value

    return tamper


def _delete(dataset):
    def tamper(f):
        del f[dataset]

    return tamper


# (tamper, words the one line must hold); a complete trial's row is found at run time (-1).
CASES = {
    "format_version is text": (
        _set_attr("format_version", "two"),
        ["format_version is 'two' (str); it must be an integer, one of 1, 2"],
    ),
    "unknown state code": (_set("trials/state", 2, 9), ["trial 2: state code 9 is unknown"]),
    "deleted dataset": (_delete("trials/metrics"), ["dataset /trials/metrics is missing"]),
    "deleted bookkeeping dataset": (
        _delete("trials/worker_pid"),
        ["dataset /trials/worker_pid is missing"],
    ),
    "missing attribute": (
        _del_attr("metric_units"),
        ["the study header lacks the attribute metric_units"],
    ),
    "NaN objective metric": (
        _set_metric("size_mm", np.nan),
        ["objective size_mm differs from the metric of that name"],
    ),
    "NaN constraint metric": (
        _set_metric("peak_surface_field_V_per_m", np.nan),
        ["but metric peak_surface_field_V_per_m gives nan"],
    ),
    "infinite objective": (
        _set("trials/objectives", (-1, 0), np.inf),
        ["objectives score_fF is inf; stored numbers are finite or NaN"],
    ),
    "negative count": (_set("commit", 2, -5), ["the commit counter surface is -5"]),
    "negative offset": (_set("trials/text_offset", -1, -40), ["text_offset is -40"]),
    "negative length": (_set("trials/surface_length", -1, -1), ["surface_length is -1"]),
}


def _tampered(study: Path, tmp_path: Path, case: str) -> tuple[Path, list[str]]:
    path = _copy(study, tmp_path)
    tamper, words = CASES[case]
    row = _first_complete(path)
    with h5py.File(path, "r+") as f:
        tamper(_RowFile(f, row))
    return path, [w.replace("trial -1", f"trial {row}") for w in words]


class _RowFile:
    """An h5py file whose index -1 (alone or first of a pair) means the chosen trial's row."""

    def __init__(self, f: h5py.File, row: int) -> None:
        self._f, self._row = f, row
        self.attrs = f.attrs

    def __getitem__(self, name):
        return _RowDataset(self._f[name], self._row)

    def __delitem__(self, name):
        del self._f[name]


class _RowDataset:
    def __init__(self, ds, row):
        self._ds, self._row = ds, row

    def __setitem__(self, index, value):
        if index == -1:
            index = self._row
        elif isinstance(index, tuple) and index[0] == -1:
            index = (self._row, *index[1:])
        self._ds[index] = value


@pytest.mark.parametrize("case", list(CASES))
def test_readers_refuse_with_one_line_and_writers_change_nothing(study, tmp_path, capsys, case):
    path, words = _tampered(study, tmp_path, case)
    before = _digest(path)
    for argv in (["front", str(path)], ["show", str(path), "0"], ["resume", str(path)]):
        assert main(argv) == 2, argv
        err = _one_error_line(capsys)
        for w in words:
            assert w in err, (argv, err)
        assert "consistent read" not in err and "Can't" not in err
    with pytest.raises(StudyFileError):
        StudyWriter.open(path)
    assert _digest(path) == before, "a refused file must not change"
    assert not list(tmp_path.glob("s.h5.*-*")), "nothing written beside it either"


@pytest.mark.parametrize("case", list(CASES))
def test_salvage_recovers_the_committed_trials_that_read(study, tmp_path, capsys, case):
    path, _ = _tampered(study, tmp_path, case)
    before = _digest(path)
    new = tmp_path / "new.h5"
    if case == "missing attribute":  # no header, nothing to name the columns by
        assert main(["salvage", str(path), "--out", str(new)]) == 2
        assert "lacks the attribute metric_units" in _one_error_line(capsys)
        return
    assert main(["salvage", str(path), "--out", str(new)]) == 0
    out = capsys.readouterr().out
    assert _digest(path) == before, "salvage only reads its source"
    snap = read_study(new)
    kept = [i for i in range(N_TRIALS) if i not in _skipped(case, study)]
    expected = len(kept)
    assert snap.n_trials == expected
    assert f"recovered {expected} of {N_TRIALS} committed trials" in out
    original = read_study(study)
    if expected:
        np.testing.assert_array_equal(snap.columns["params"], original.columns["params"][kept])
    if case == "deleted bookkeeping dataset":  # recovered with its default
        assert set(snap.columns["worker_pid"].tolist()) == {-1}
    assert main(["front", str(new)]) == 0
    capsys.readouterr()


def _skipped(case: str, study: Path) -> set[int]:
    if case == "unknown state code":
        return {2}
    if case in (
        "NaN objective metric",
        "NaN constraint metric",
        "infinite objective",
        "negative offset",
        "negative length",
    ):
        return {_first_complete(study)}
    if case == "deleted dataset":  # every trial needs its metrics
        return set(range(N_TRIALS))
    return set()


def test_corrupted_middle_is_refused_and_left_byte_identical(study, tmp_path, capsys):
    """Garbage over a dataset's object header: HDF5 cannot read it. `resume` refuses without
    changing a byte; salvage says what it could not recover."""
    path = _copy(study, tmp_path)
    with h5py.File(path, "r") as f:
        addr = h5py.h5o.get_info(f["trials/objectives"].id).addr
    with open(path, "r+b") as fh:
        fh.seek(addr)
        fh.write(b"\xa5" * 64)
    before = _digest(path)
    assert main(["resume", str(path)]) == 2
    err = _one_error_line(capsys)
    assert "elopt salvage" in err and "consistent read" not in err
    assert _digest(path) == before
    assert main(["salvage", str(path), "--out", str(tmp_path / "new.h5")]) == 0
    assert f"recovered 0 of {N_TRIALS} committed trials" in capsys.readouterr().out
    assert _digest(path) == before


def test_salvaged_study_resumes(study, tmp_path, capsys):
    path, _ = _tampered(study, tmp_path, "unknown state code")
    new = tmp_path / "new.h5"
    assert main(["salvage", str(path), "--out", str(new)]) == 0
    assert "recovered 9 of 10" in capsys.readouterr().out
    assert main(["resume", str(new), "--trials", "2", "--workers", "1"]) == 0
    snap = read_study(new)
    assert snap.n_trials == 11
    assert snap.info(2).get("salvaged_from_trial") == 3


def test_salvage_refuses_to_overwrite(study, tmp_path, capsys):
    path = _copy(study, tmp_path)
    other = tmp_path / "other.h5"
    other.write_text("keep me")
    assert main(["salvage", str(path), "--out", str(other)]) == 2
    assert "exists" in _one_error_line(capsys)
    assert other.read_text() == "keep me"


def test_salvage_of_a_whole_file_copies_every_trial_and_array(tmp_path):
    path = tmp_path / "s.h5"
    with StudyWriter.create(path, small_header()) as w:
        w.begin_session(target_trials=12, hours=None, workers=1)
        for i in range(12):
            w.append(record_for(i))
    report = salvage_to(path, tmp_path / "copy.h5")
    assert (report.recovered, report.committed, report.skipped) == (12, 12, [])
    snap = read_study(tmp_path / "copy.h5")
    for i in range(12):
        check_matches(snap, lambda k: read_trial_arrays(tmp_path / "copy.h5", k), i)


def test_writer_refuses_a_record_a_reader_would_refuse(tmp_path):
    path = tmp_path / "s.h5"
    bad = record_for(0)
    bad.objectives = np.array([np.inf, 0.0])
    with StudyWriter.create(path, small_header()) as w:
        with pytest.raises(ValueError, match="objectives score_fF is inf"):
            w.append(bad)
        assert w.n_trials == 0
        w.append(record_for(0))
    assert read_study(path).n_trials == 1


def test_damage_in_the_arrays_refuses_show_and_resume_but_not_front(study, tmp_path, capsys):
    """`front` needs no per-trial arrays; `show` of that trial and every writer do."""
    path = _copy(study, tmp_path)
    row = _first_complete(path)
    with h5py.File(path, "r+") as f:
        o = int(f["trials/surface_offset"][row])
        f["surface/sigma_C_per_m2"][o + 3] = np.inf
    before = _digest(path)
    assert main(["front", str(path)]) == 0
    capsys.readouterr()
    assert main(["show", str(path), str(row)]) == 2
    assert f"trial {row}: surface sigma_C_per_m2 holds an infinite value" in _one_error_line(capsys)
    assert main(["resume", str(path), "--trials", "1"]) == 2
    err = _one_error_line(capsys)
    assert "infinite value" in err and "nothing was changed" in err
    assert _digest(path) == before


def test_infinite_values_of_a_design_are_stored_as_undefined(tmp_path):
    """The writer never writes a value its readers would refuse: infinities become NaN."""
    import dataclasses

    path = tmp_path / "s.h5"
    rec = record_for(0)
    d = rec.design
    rec.design = dataclasses.replace(
        d,
        relative_error_estimate=np.inf,
        peak=dataclasses.replace(d.peak, rel_error_estimate=np.inf),
        capacitance_matrix_F=np.array([[np.inf, -1.0], [-1.0, 1.0]]),
    )
    rec.design.surface[0].sigma_C_per_m2[2] = -np.inf
    with StudyWriter.create(path, small_header()) as w:
        w.append(rec)
    snap = read_study(path)
    assert np.isnan(snap.columns["relative_error_estimate"][0])
    assert np.isnan(snap.columns["peak_rel_error_estimate"][0])
    arrays = read_trial_arrays(path, 0)
    assert np.isnan(arrays.capacitance_F[0, 0]) and arrays.capacitance_F[1, 1] == 1.0
    assert np.isnan(arrays.surface[0].sigma_C_per_m2[2])


def test_a_toleranced_study_validates_and_its_judged_values_are_checked(tmp_path, capsys):
    """Where a study judges designs across tolerances, the objectives are the toleranced
    values kept in each trial's text: the reader checks them against those, not the nominal."""
    cfg = fixture_study(tmp_path, trials=6)
    text = cfg.read_text().replace("[constraints]\n", "[constraints]\nsize_mm = { max = 6.0 }\n")
    text += '\n[tolerance.parameters]\nwidth_mm = 0.5\n\n[tolerance.apply]\nscore_fF = "worst"\n'
    cfg.write_text(text)
    out = tmp_path / "tol.h5"
    assert main(["run", str(cfg), "--out", str(out), "--workers", "1"]) == 0
    capsys.readouterr()
    snap = read_study(out)
    row = next(i for i in range(snap.n_trials) if "tolerance" in snap.info(i))
    h = snap.header
    judged = snap.info(row)["tolerance"]["values"]["score_fF"]
    nominal = snap.columns["metrics"][row, h.metric_names.index("score_fF")]
    assert snap.columns["objectives"][row, h.objective_names.index("score_fF")] == judged
    assert judged < nominal
    assert main(["front", str(out)]) == 0
    capsys.readouterr()
    with h5py.File(out, "r+") as f:  # the judged value no longer matches its objective
        k = list(f.attrs["objective_names"]).index("score_fF")
        f["trials/objectives"][row, k] = nominal
    assert main(["front", str(out)]) == 2
    assert f"trial {row}: objective score_fF differs" in _one_error_line(capsys)

"""Recover the committed trials of a study file into a new file.

:func:`salvage_to` reads what it can of a damaged file (column by column, row by row where a
column will not read whole), keeps each trial that passes every reader check and writes them,
renumbered in order, into a new version-2 file; it never writes the source. :func:`salvage`
and :func:`upgrade` do the same in place for the writer (the original is kept beside it).
"""

from __future__ import annotations

import datetime as _dt
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import h5py
import numpy as np

from elopt.optimizer.errors import StudyFileError
from elopt.optimizer.store import compat_v1
from elopt.optimizer.store.layout import (
    FORMAT_NAME,
    MATRIX_COLUMNS,
    POINT_COLUMNS,
    SCALAR_COLUMNS,
    SESSION_FIELDS,
    STATES,
    write_layout,
)
from elopt.optimizer.store.lock import WriterLock
from elopt.optimizer.store.model import StudySnapshot, TrialRecord
from elopt.optimizer.store.reader import design_of, read_header, trial_arrays
from elopt.optimizer.store.validate import (
    Damaged,
    check_columns,
    check_judged,
    format_version_of,
    judged_metrics,
)
from elopt.optimizer.store.writer import StudyWriter

#: Trial columns without which a trial cannot be recovered (either format's names).
_NEEDED = frozenset(
    (
        "number",
        "state",
        "feasible",
        "params",
        "metrics",
        "objectives",
        "constraints",
        "n_conductors",
        "capacitance_offset",
        "surface_offset",
        "surface_length",
        "surface_kind",
        "profile_offset",
        "profile_length",
        "text_offset",
        "text_length",
    )
)
#: Fill values of the other columns when they do not read (either format's names).
_FILL: dict[str, float] = {
    **{name: fill for name, _, fill in SCALAR_COLUMNS},
    "rel_error_estimate": np.nan,
    "peak_field_V_per_m": np.nan,
    "peak_singular": 0,
    "peak_r_m": np.nan,
    "peak_z_m": np.nan,
}

#: Keys of a trial's text that the writer derives from its design (re-derived on the copy).
_DESIGN_TEXT = (
    "conductors",
    "conductor_drive",
    "potentials_V",
    "charges_C",
    "ground_plane",
    "relative_error_estimate_covers",
    "matrix_relative_error_estimate",
)


@dataclass
class SalvageReport:
    """``recovered`` of ``committed`` trials were copied; ``skipped`` says why the rest were not."""

    committed: int
    recovered: int = 0
    skipped: list[str] = field(default_factory=list)

    def summary(self) -> str:
        text = f"recovered {self.recovered} of {self.committed} committed trials"
        if self.skipped:
            shown = "; ".join(self.skipped[:3])
            more = f"; and {len(self.skipped) - 3} more" if len(self.skipped) > 3 else ""
            text += f" (skipped {len(self.skipped)}: {shown}{more})"
        return text


def salvage_to(source: str | Path, target: str | Path) -> SalvageReport:
    """Copy every committed trial of ``source`` that still reads and passes the reader's checks
    into the new file ``target`` (which must not exist). ``source`` is only read."""
    source, target = Path(source), Path(target)
    if not source.exists():
        raise StudyFileError(f"{source}: no such file")
    if target.exists():
        raise StudyFileError(f"{target}: exists; salvage writes a new file, choose another --out")
    if not target.parent.is_dir():
        raise StudyFileError(f"{target}: directory {target.parent} does not exist; create it")
    if not h5py.is_hdf5(source):
        raise StudyFileError(f"{source}: not an HDF5 file, so there is nothing to salvage")
    try:
        with h5py.File(source, "r", locking=False) as h5:
            header, sessions, records, report = _recover(h5, source)
    except OSError as exc:
        raise StudyFileError(f"{source}: HDF5 cannot open it ({exc}); nothing to salvage") from None
    tmp = target.with_name(f".{target.name}.salvage-{os.getpid()}")
    try:
        with h5py.File(tmp, "w", locking=False) as h5:
            write_layout(h5, header)
        writer = StudyWriter(tmp, WriterLock(tmp), h5py.File(tmp, "r+", locking=False), True)
        try:
            for row in sessions:
                writer.append_session(*row)
            for rec in records:
                writer.append(rec)
        finally:
            writer.close()
        os.replace(tmp, target)
    finally:
        if tmp.exists():
            tmp.unlink()
    return report


def salvage(path: str | Path, *, reason: str = "") -> Path:
    """Replace ``path`` by a salvaged copy; the original stays as ``<name>.damaged-<UTC>``.
    The caller holds the writer lock. Returns the kept original."""
    path = Path(path)
    backup, report = _replace_by_copy(path, "damaged")
    print(f"elopt: {path}: salvaged {report.recovered} committed trials ({reason}); kept {backup}")
    return backup


def upgrade(path: str | Path) -> Path:
    """Rewrite a (validated) older-format study as format_version 2 in place; the original
    stays as ``<name>.v<N>-<UTC>``. The caller holds the writer lock."""
    path = Path(path)
    with h5py.File(path, "r", locking=False) as h5:
        old = int(h5.attrs["format_version"])
    backup, report = _replace_by_copy(path, f"v{old}")
    if report.skipped:  # cannot happen for a file that validated; never lose a trial silently
        raise StudyFileError(f"{path}: upgrade would lose trials ({report.summary()}); kept as is")
    print(
        f"elopt: {path}: upgraded study format {old} to 2 ({report.recovered} trials); "
        f"kept the original as {backup}"
    )
    return backup


def _replace_by_copy(path: Path, tag: str) -> tuple[Path, SalvageReport]:
    stamp = _dt.datetime.now(_dt.UTC).strftime("%Y%m%dT%H%M%SZ")
    backup = path.with_name(f"{path.name}.{tag}-{stamp}")
    fresh = path.with_name(f".{path.name}.copy-{os.getpid()}")
    try:
        report = salvage_to(path, fresh)
        if report.skipped and tag != "damaged":
            return backup, report
        os.link(path, backup)
        os.replace(fresh, path)
    finally:
        if fresh.exists():
            fresh.unlink()
    return backup, report


# ----------------------------------------------------------------------------- reading


def _version(h5: h5py.File, path: Path) -> int:
    if h5.attrs.get("format") not in (FORMAT_NAME, FORMAT_NAME.encode()):
        raise StudyFileError(f"{path}: not an elopt study (no attribute format = '{FORMAT_NAME}')")
    try:
        return format_version_of(h5.attrs.get("format_version"))
    except Damaged:  # the layout itself says which version wrote it
        return 2 if "surface" in h5 else 1


def _column(h5: h5py.File, name: str, n: int) -> tuple[np.ndarray | None, np.ndarray]:
    """Rows 0..n-1 of a dataset and a mask of the rows that read (row by row if need be)."""
    ds = h5.get(name)
    ok = np.zeros(n, dtype=bool)
    if not isinstance(ds, h5py.Dataset):
        return None, ok
    m = min(n, ds.shape[0])
    try:
        values = ds[:m]
        ok[:m] = True
    except (OSError, ValueError, RuntimeError):
        values = np.zeros((m, *ds.shape[1:]), dtype=ds.dtype)
        for i in range(m):
            try:
                values[i] = ds[i]
                ok[i] = True
            except (OSError, ValueError, RuntimeError):
                pass
    full = np.zeros((n, *ds.shape[1:]), dtype=ds.dtype)
    full[:m] = values
    return full, ok


def _counts(h5: h5py.File, version: int) -> list[int]:
    """The commit counter; an entry that is unreadable or negative is replaced by what the
    datasets show (for trials: the leading rows whose number equals their row)."""
    try:
        counts = [int(v) for v in h5["commit"][...]]
    except (KeyError, OSError, ValueError, TypeError):
        counts = []
    if len(counts) != 5:
        counts = [-1] * 5
    surface = "surface/sigma_C_per_m2" if version == 2 else "profiles/sigma_C_per_m2"
    names = ("trials/number", "capacitance_F", surface, "text", "sessions/start_unix")
    for k, name in enumerate(names):
        if counts[k] >= 0:
            continue
        ds = h5.get(name)
        if not isinstance(ds, h5py.Dataset):
            counts[k] = 0
            continue
        values, ok = _column(h5, name, ds.shape[0])
        if k == 0:
            good = ok & (values == np.arange(len(values)))
            counts[k] = int(np.argmin(good)) if not good.all() else len(values)
        else:
            counts[k] = ds.shape[0]
    return counts


def _recover(
    h5: h5py.File, path: Path
) -> tuple[Any, list[tuple], list[TrialRecord], SalvageReport]:
    version = _version(h5, path)
    try:
        header = read_header(h5)
    except Damaged as exc:
        raise StudyFileError(
            f"{path}: {exc}; without its header no trial can be salvaged"
        ) from None
    counts = _counts(h5, version)
    sessions = _sessions(h5, counts[4])
    counts[4] = len(sessions)
    n = counts[0]
    if version == 1:
        names = compat_v1.V1_SCALARS + compat_v1.V1_MATRICES
    else:
        names = tuple(c[0] for c in SCALAR_COLUMNS) + MATRIX_COLUMNS
    raw = {k: _column(h5, f"trials/{k}", n) for k in names}
    text_all, text_ok = _column(h5, "text", counts[3])
    report = SalvageReport(committed=n)
    records: list[TrialRecord] = []
    new_number: dict[int, int] = {}
    for i in range(n):
        broken = [k for k, (v, ok) in raw.items() if v is None or not ok[i]]
        needed = [k for k in broken if k in _NEEDED]
        if needed:
            report.skipped.append(f"trial {i}: /trials/{needed[0]} does not read")
            continue
        row = {k: v[i : i + 1] for k, (v, _) in raw.items() if k not in broken}
        row.update({k: _fill_row(k) for k in broken})  # bookkeeping only: defaults
        if version == 1:
            row = compat_v1.v2_columns(row)
        try:
            rec = _trial(h5, header, row, counts, text_all, text_ok, i, version)
        except (Damaged, StudyFileError) as exc:
            report.skipped.append(str(exc).replace("trial 0", f"trial {i}", 1))
            continue
        except (OSError, ValueError, RuntimeError, KeyError) as exc:
            report.skipped.append(f"trial {i}: its arrays do not read ({exc})")
            continue
        new_number[i] = len(records)
        if new_number[i] != i:
            rec.info["salvaged_from_trial"] = i
        records.append(rec)
    for rec in records:
        old = rec.info.get("rerun_of")
        if isinstance(old, int):
            if old in new_number:
                rec.info["rerun_of"] = new_number[old]
            else:
                rec.info.pop("rerun_of")
    report.recovered = len(records)
    return header, sessions, records, report


def _fill_row(name: str) -> np.ndarray:
    if name == "peak_location_m":
        return np.full((1, POINT_COLUMNS), np.nan)
    return np.array([_FILL[name]])


def _sessions(h5: h5py.File, n: int) -> list[tuple]:
    cols = {k: _column(h5, f"sessions/{k}", n) for k in SESSION_FIELDS}
    out = []
    for i in range(n):
        if any(v is None or not ok[i] for v, ok in cols.values()):
            break  # sessions are referred to by row: keep the leading run that reads
        start, target, hours, workers = (cols[k][0][i] for k in SESSION_FIELDS)
        if (
            not np.isfinite(start)
            or target < -1
            or workers < 0
            or not (np.isnan(hours) or 0 < hours < np.inf)
        ):
            break
        out.append(
            (
                float(start),
                None if target == -1 else int(target),
                None if np.isnan(hours) else float(hours),
                int(workers),
            )
        )
    return out


def _trial(
    h5: h5py.File,
    header: Any,
    row: dict[str, np.ndarray],
    counts: list[int],
    text_all: np.ndarray | None,
    text_ok: np.ndarray,
    number: int,
    version: int,
) -> TrialRecord:
    if int(row["number"][0]) != number:
        raise Damaged(f"trial {number}: number holds {int(row['number'][0])}")
    row = dict(row)
    row["number"] = np.zeros(1, dtype=np.int64)
    if not -1 <= int(row["session"][0]) < counts[4]:
        row["session"] = np.array([-1])
    check_columns(row, header, [1, *counts[1:]])
    o, k = int(row["text_offset"][0]), int(row["text_length"][0])
    if k and (text_all is None or not text_ok[o : o + k].all()):
        raise Damaged(f"trial {number}: its text does not read")
    text = text_all[o : o + k].tobytes().decode("utf-8") if k else ""
    snap = StudySnapshot(
        path=Path(h5.filename),
        header=header,
        columns=row,
        sessions={},
        texts=(text,),
        format_version=version,
    )
    info = snap.info(0)
    check_judged(row, header, judged_metrics(row["metrics"], header, [info]))
    design = design_of(snap, trial_arrays(h5, snap, 0), 0)
    for key in _DESIGN_TEXT if design is not None else ():
        info.pop(key, None)
    if design is not None:
        info.pop("extra", None)
        info.pop("sense_capacitance_meaning", None)
    c = {name: v[0] for name, v in row.items()}
    return TrialRecord(
        state=STATES[int(c["state"])],
        params=c["params"],
        metrics=c["metrics"],
        objectives=c["objectives"],
        constraints=c["constraints"],
        feasible=bool(c["feasible"]),
        session=int(c["session"]),
        started_unix=float(c["started_unix"]),
        finished_unix=float(c["finished_unix"]),
        solve_s=float(c["solve_s"]),
        worker=int(c["worker"]),
        worker_pid=int(c["worker_pid"]),
        sampler_generation=int(c["sampler_generation"]),
        design=design,
        info=info,
    )

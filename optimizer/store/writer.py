"""The one process that appends committed trials to a study file.

Crash safety rests on one rule: a trial exists once the commit counter ``/commit`` says so.
Appending a trial writes its rows past the committed length of every dataset, flushes and
fsyncs, and only then bumps ``/commit`` (flush + fsync again). Reopening for writing truncates
every dataset back to ``/commit``, so a kill at any moment loses at most the trial being
written. Per-trial arrays live in flat datasets indexed by offset/length columns (variable-
length HDF5 types left killed files unable to take the next write; flat ones did not).

A writer opens only a file that passes every reader check (:func:`.reader.validate_file`):
a damaged file is refused with nothing changed, and a version-1 file is first copied into a
version-2 file (the original is kept beside it).
"""

from __future__ import annotations

import os
import time
from pathlib import Path
from typing import Any

import h5py
import numpy as np

from elopt.optimizer.errors import StudyFileError
from elopt.optimizer.record import DesignRecord, json_safe, strict_dumps
from elopt.optimizer.store.layout import (
    FORMAT_VERSION,
    MATRIX_COLUMNS,
    POINT_COLUMNS,
    SCALAR_COLUMNS,
    SESSION_FIELDS,
    STATES,
    SURFACE_FIELDS,
    SURFACE_KIND_CODES,
    dataset_paths,
    write_layout,
)
from elopt.optimizer.store.lock import WriterLock
from elopt.optimizer.store.model import StudySnapshot, TrialRecord
from elopt.optimizer.store.reader import read_header, read_snapshot, read_study, validate_file
from elopt.optimizer.store.validate import Damaged, check_columns, check_judged, judged_metrics


class StudyWriter:
    """The one process that appends to a study file. Use :meth:`create` or :meth:`open`."""

    def __init__(self, path: Path, lock: WriterLock, h5: h5py.File, fsync: bool) -> None:
        self.path = path
        self._lock = lock
        self._h5 = h5
        self._fsync = fsync
        self.header = read_header(h5)
        self._counts = [int(v) for v in h5["commit"][...]]
        # Dataset handles are looked up once: a lookup per write costs more than the write.
        self._ds = {name: h5[name] for name, _ in dataset_paths(FORMAT_VERSION)}
        self._commit_ds = h5["commit"]

    # -- opening

    @classmethod
    def create(
        cls, path: str | Path, header: Any, *, overwrite: bool = False, fsync: bool = True
    ) -> StudyWriter:
        """Create a new study file (atomically: built aside, then moved into place)."""
        path = Path(path)
        if not path.parent.is_dir():
            raise StudyFileError(f"{path}: directory {path.parent} does not exist; create it")
        lock = WriterLock(path)
        lock.acquire(path)
        try:
            if path.exists() and not overwrite:
                raise StudyFileError(_exists_message(path))
            tmp = path.with_name(f".{path.name}.creating-{os.getpid()}")
            try:
                with h5py.File(tmp, "w", locking=False) as h5:
                    write_layout(h5, header)
                os.replace(tmp, path)
            finally:
                if tmp.exists():
                    tmp.unlink()
            h5 = h5py.File(path, "r+", locking=False)
            return cls(path, lock, h5, fsync)
        except BaseException:
            lock.release()
            raise

    @classmethod
    def open(cls, path: str | Path, *, fsync: bool = True) -> StudyWriter:
        """Open an existing study to append: only a file that validates; a version-1 file is
        upgraded first; truncates it to its last commit (salvage if it refuses writes)."""
        from elopt.optimizer.store.salvage import salvage, upgrade

        path = Path(path)
        if not path.exists():
            raise StudyFileError(f"{path}: no such study file")
        lock = WriterLock(path)
        lock.acquire(path)
        try:
            try:
                snap = validate_file(path)
            except StudyFileError as exc:
                raise StudyFileError(
                    f"{exc} (not opened for writing: nothing was changed)"
                ) from None
            if snap.format_version != FORMAT_VERSION:
                upgrade(path)
            try:
                h5 = _open_truncated(path)
            except (OSError, KeyError, ValueError, RuntimeError) as exc:
                salvage(path, reason=str(exc))
                h5 = _open_truncated(path)
            return cls(path, lock, h5, fsync)
        except BaseException:
            lock.release()
            raise

    # -- appending

    @property
    def n_trials(self) -> int:
        return self._counts[0]

    @property
    def n_sessions(self) -> int:
        return self._counts[4]

    def begin_session(self, *, target_trials: int | None, hours: float | None, workers: int) -> int:
        """Record the start of a run or resume; returns the session index."""
        return self.append_session(time.time(), target_trials, hours, workers)

    def append_session(
        self, start_unix: float, target_trials: int | None, hours: float | None, workers: int
    ) -> int:
        n = self._counts[4]
        values = (
            start_unix,
            -1 if target_trials is None else target_trials,
            np.nan if hours is None else hours,
            workers,
        )
        for name, value in zip(SESSION_FIELDS, values, strict=True):
            _put(self._ds[f"sessions/{name}"], n, value)
        counts = list(self._counts)
        counts[4] = n + 1
        self._commit(counts)
        return n

    def append(self, record: TrialRecord) -> int:
        """Write one trial and commit it; returns its number (= its row)."""
        rows = self._rows_of(record)  # a record that breaks the layout's rules is refused here
        try:
            return self._append(*rows)
        except (OSError, RuntimeError) as exc:
            raise StudyFileError(
                f"{self.path}: writing trial {self._counts[0]} failed ({exc}); the "
                f"{self._counts[0]} trials committed before it are safe — fix the cause (disk "
                f"space?) and `elopt resume {self.path}`"
            ) from None

    def _rows_of(self, record: TrialRecord) -> tuple[dict, dict, np.ndarray, dict, bytes]:
        if record.state not in STATES:
            raise ValueError(f"state must be one of {STATES}, got {record.state!r}")
        n, n_cap, n_surf, n_text, _ = self._counts
        d = record.design if record.state == "complete" else None
        info = dict(record.info)
        cap = np.zeros((0, 0)) if d is None else np.asarray(d.capacitance_matrix_F, dtype=float)
        surface = _surface_rows(d)
        if d is not None:
            info.update(_design_text(d))
        text = strict_dumps(json_safe(info)).encode("utf-8") if info else b""
        length = len(surface["sigma_C_per_m2"])
        metrics = np.asarray(record.metrics, dtype=float).reshape(-1)
        location = np.full(POINT_COLUMNS, np.nan)
        if d is not None:
            location[: len(d.peak.location_m)] = d.peak.location_m
        scalars: dict[str, Any] = {
            "number": n,
            "state": STATES.index(record.state),
            "feasible": int(record.feasible),
            "session": record.session,
            "started_unix": record.started_unix,
            "finished_unix": record.finished_unix,
            "solve_s": record.solve_s,
            "worker": record.worker,
            "worker_pid": record.worker_pid,
            "sampler_generation": record.sampler_generation,
            "n_conductors": cap.shape[0],
            "capacitance_offset": n_cap,
            "surface_offset": n_surf,
            "surface_length": length,
            "text_offset": n_text,
            "text_length": len(text),
            "surface_kind": SURFACE_KIND_CODES.index(d.surface_kind or "none") if d else 0,
        }
        if d is not None:
            scalars.update(
                relative_error_estimate=d.relative_error_estimate,
                requested_accuracy=d.requested_accuracy,
                accuracy_met=int(d.accuracy_met),
                n_unknowns=d.n_unknowns,
                sense_capacitance_F=d.sense_capacitance_F,
                peak_surface_field_V_per_m=d.peak.field_V_per_m,
                peak_conductor=d.conductor_names.index(d.peak.conductor)
                if d.peak.conductor in d.conductor_names
                else -1,
                peak_at_sharp_corner=int(d.peak.at_sharp_corner),
                peak_rel_error_estimate=d.peak.rel_error_estimate,
            )
        for name, dtype, fill in SCALAR_COLUMNS:
            scalars.setdefault(name, fill)
            if dtype == "f8" and np.isinf(scalars[name]):
                scalars[name] = np.nan  # undefined: a reader refuses infinities
        cap = _undefined_as_nan(cap)
        surface = {
            k: _undefined_as_nan(v) if v.dtype.kind == "f" else v for k, v in surface.items()
        }
        matrices = {
            "params": record.params,
            "metrics": _undefined_as_nan(metrics),
            "objectives": record.objectives,
            "constraints": record.constraints,
            "peak_location_m": location,
        }
        widths = self.header.matrix_widths()
        for name in MATRIX_COLUMNS:
            row = np.asarray(matrices[name], dtype=float).reshape(-1)
            if row.shape != (widths[name],):
                raise ValueError(f"{name}: expected {widths[name]} values, got {row.shape}")
            matrices[name] = row
        columns = {k: np.asarray([v]) for k, v in scalars.items()}
        columns.update({k: v[None, :] for k, v in matrices.items()})
        columns["number"] = np.zeros(1, dtype=np.int64)
        for name in ("capacitance_offset", "surface_offset", "text_offset"):
            columns[name] = np.zeros(1, dtype=np.int64)
        try:
            check_columns(columns, self.header, [1, cap.size, length, len(text), self._counts[4]])
            judged = judged_metrics(columns["metrics"], self.header, [json_safe(info)])
            check_judged(columns, self.header, judged)
        except Damaged as exc:
            raise ValueError(f"trial {n} breaks the study file's rules: {exc}") from None
        return scalars, matrices, cap.reshape(-1), surface, text

    def _append(
        self, scalars: dict, matrices: dict, cap: np.ndarray, surface: dict, text: bytes
    ) -> int:
        n, n_cap, n_surf, n_text, n_sess = self._counts
        for name, value in scalars.items():
            _put(self._ds[f"trials/{name}"], n, value)
        for name, row in matrices.items():
            _put(self._ds[f"trials/{name}"], n, row)
        _extend(self._ds["capacitance_F"], n_cap, cap)
        for name in SURFACE_FIELDS:
            _extend(self._ds[f"surface/{name}"], n_surf, surface[name])
        _extend(self._ds["text"], n_text, np.frombuffer(text, dtype=np.uint8))
        self._sync()
        length = len(surface["sigma_C_per_m2"])
        self._commit([n + 1, n_cap + cap.size, n_surf + length, n_text + len(text), n_sess])
        return n

    def snapshot(self) -> StudySnapshot:
        """The committed trials, read through this writer's own handle."""
        try:
            return read_snapshot(self._h5, self.path, FORMAT_VERSION)
        except Damaged as exc:
            raise StudyFileError(f"{self.path}: {exc}") from None

    def close(self) -> None:
        if self._h5.id.valid:
            self._h5.close()
        self._lock.release()

    def __enter__(self) -> StudyWriter:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def _commit(self, counts: list[int]) -> None:
        self._commit_ds[...] = np.asarray(counts, dtype=np.int64)
        self._sync()
        self._counts = counts

    def _sync(self) -> None:
        # HDF5's flush writes the superblock's end of file before it extends the file to it; a
        # kill in between leaves a file HDF5 refuses as truncated (seen in the kill test).
        # Extending the file to the allocated size first closes that window.
        allocated = self._h5.id.get_filesize()
        if os.path.getsize(self.path) < allocated:
            os.truncate(self.path, allocated)
        self._h5.flush()
        if self._fsync:
            os.fsync(self._h5.id.get_vfd_handle())


def _undefined_as_nan(values: np.ndarray) -> np.ndarray:
    """Not finite = undefined: stored as NaN (a reader refuses infinities)."""
    return np.where(np.isinf(values), np.nan, values)


def _design_text(d: DesignRecord) -> dict[str, Any]:
    """The design's small per-conductor facts, kept in the trial's JSON text."""
    return {
        "conductors": list(d.conductor_names),
        "conductor_drive": [
            {"potential_V": c.potential_V, "charge_C": c.charge_C} for c in d.conductors
        ],
        "potentials_V": [float(v) for v in d.potentials_V],
        "charges_C": [float(v) for v in d.charges_C],
        "ground_plane": bool(d.ground_plane),
        "sense_capacitance_meaning": d.sense_capacitance_meaning,
        "relative_error_estimate_covers": list(d.estimate_covers),
        "matrix_relative_error_estimate": float(d.matrix_estimate),
        **({"extra": dict(d.extra)} if d.extra else {}),
    }


def _surface_rows(d: DesignRecord | None) -> dict[str, np.ndarray]:
    """The design's surface samples as the flat columns of ``/surface`` (empty without)."""
    if d is None or not d.surface:
        return {
            name: np.zeros((0, POINT_COLUMNS) if name in ("points_m", "normal") else 0)
            for name in SURFACE_FIELDS
        }
    names = d.conductor_names
    parts: dict[str, list[np.ndarray]] = {name: [] for name in SURFACE_FIELDS}
    for s in d.surface:
        k = len(s.sigma_C_per_m2)
        parts["conductor"].append(np.full(k, names.index(s.conductor), dtype=np.int16))
        parts["face"].append(np.asarray(s.face, dtype=np.int8))
        for name in ("points_m", "normal"):
            block = np.full((k, POINT_COLUMNS), np.nan)
            v = np.asarray(getattr(s, name), dtype=float)
            block[:, : v.shape[1]] = v
            parts[name].append(block)
        parts["arc_length_m"].append(
            np.full(k, np.nan) if s.arc_length_m is None else np.asarray(s.arc_length_m, float)
        )
        for name in ("sigma_C_per_m2", "field_V_per_m", "area_m2"):
            parts[name].append(np.asarray(getattr(s, name), dtype=float))
    return {name: np.concatenate(v) for name, v in parts.items()}


def _open_truncated(path: Path) -> h5py.File:
    h5 = h5py.File(path, "r+", locking=False)
    try:
        truncate_to_commit(h5)
    except BaseException:
        h5.close()
        raise
    return h5


def truncate_to_commit(h5: h5py.File) -> None:
    """Cut every dataset back to its committed length (rows past it are a killed append)."""
    counts = [int(v) for v in h5["commit"][...]]
    changed = False
    for name, which in dataset_paths(FORMAT_VERSION):
        ds = h5[name]
        if ds.shape[0] < counts[which]:
            raise StudyFileError(
                f"{h5.filename}: dataset {ds.name} has {ds.shape[0]} rows but the commit "
                f"counter says {counts[which]}"
            )
        if ds.shape[0] > counts[which]:
            ds.resize(counts[which], axis=0)
            changed = True
    if changed:
        h5.flush()


def _put(ds: h5py.Dataset, row: int, value: Any) -> None:
    _reserve(ds, row + 1)
    ds[row] = value


def _extend(ds: h5py.Dataset, start: int, values: np.ndarray) -> None:
    if len(values) == 0:
        return
    _reserve(ds, start + len(values))
    ds[start : start + len(values)] = values


def _reserve(ds: h5py.Dataset, length: int) -> None:
    """Grow ``ds`` to hold ``length`` rows, a chunk-multiple at a time (rows past the commit
    counter are not part of the study, so growing ahead is safe and saves a resize per row)."""
    if ds.shape[0] < length:
        chunk = ds.chunks[0]
        ds.resize(-(-max(length, 2 * ds.shape[0]) // chunk) * chunk, axis=0)


def _exists_message(path: Path) -> str:
    try:
        snap = read_study(path)
    except StudyFileError:
        return (
            f"{path}: file exists and is not an elopt study; choose another --out or pass "
            "--overwrite to replace it"
        )
    return (
        f"{path}: already holds a study ({snap.n_trials} trials); continue it with "
        f"`elopt resume {path}`, choose another --out, or pass --overwrite to replace it"
    )

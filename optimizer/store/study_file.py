"""The HDF5 study file: one writer that appends committed trials, readers that never block it.

The layout is documented for readers without elopt in ``optimizer/STUDY_FILE.md``.

Crash safety rests on one rule: a trial exists once the commit counter ``/commit`` says so.
Appending a trial writes its rows past the committed length of every dataset, flushes and
fsyncs, and only then bumps ``/commit`` (flush + fsync again). Reopening for writing truncates
every dataset back to ``/commit``, so a kill at any moment loses at most the trial being
written. Per-trial arrays live in flat datasets indexed by offset/length columns (variable-
length HDF5 types left killed files unable to take the next write; flat ones did not).

Locking: HDF5's own OS lock would make a reader's open fail while a non-SWMR writer runs, so
the writer opens the file with HDF5 locking disabled and holds an exclusive ``flock`` on a
sidecar ``<file>.lock`` instead; a second writer is refused there. Readers open without HDF5
locking, read only the committed prefix, check it for consistency and retry on a transient
inconsistency (the writer may be half-way through an append while a reader opens).
"""

from __future__ import annotations

import datetime as _dt
import fcntl
import hashlib
import json
import os
import socket
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import h5py
import numpy as np

from elopt.optimizer import __version__
from elopt.optimizer.errors import StudyFileError

FORMAT_NAME = "elopt study"
FORMAT_VERSION = 1
STATES = ("complete", "failed", "interrupted")
"""Trial state codes stored in ``/trials/state`` (the index is the code)."""

PROFILE_FIELDS = ("conductor", "arc_length_m", "r_m", "z_m", "sigma_C_per_m2")
"""Flat datasets under ``/profiles``: one row per surface sample of one trial."""

SESSION_FIELDS = ("start_unix", "target_trials", "hours", "workers")
COMMIT_FIELDS = ("trials", "capacitance", "profiles", "text", "sessions")

# (name, dtype, fill) of the one-value-per-trial columns under /trials.
_SCALAR_COLUMNS: tuple[tuple[str, str, float], ...] = (
    ("number", "i8", -1),
    ("state", "i1", -1),
    ("feasible", "i1", 0),
    ("session", "i4", -1),
    ("started_unix", "f8", np.nan),
    ("finished_unix", "f8", np.nan),
    ("solve_s", "f8", np.nan),
    ("rel_error_estimate", "f8", np.nan),
    ("accuracy_met", "i1", 0),
    ("peak_field_V_per_m", "f8", np.nan),
    ("peak_conductor", "i2", -1),
    ("peak_r_m", "f8", np.nan),
    ("peak_z_m", "f8", np.nan),
    ("peak_singular", "i1", 0),
    ("worker", "i2", -1),
    ("worker_pid", "i8", -1),
    ("sampler_generation", "i4", -1),
    ("n_conductors", "i2", 0),
    ("capacitance_offset", "i8", 0),
    ("profile_offset", "i8", 0),
    ("profile_length", "i8", 0),
    ("text_offset", "i8", 0),
    ("text_length", "i8", 0),
)
_MATRIX_COLUMNS = ("params", "metrics", "objectives", "constraints")
_ROW_CHUNK = 64
_FLAT_CHUNK = 2048
_READ_RETRIES = 40
_READ_RETRY_SLEEP_S = 0.05
_HEADER_LIST_ATTRS = (
    "parameter_names",
    "parameter_units",
    "parameter_searched",
    "search_low",
    "search_high",
    "search_log",
    "search_step",
    "metric_names",
    "metric_units",
    "objective_names",
    "objective_directions",
    "objective_units",
    "constraint_names",
    "constraint_metrics",
    "constraint_kinds",
    "constraint_limits",
    "constraint_units",
)


@dataclass(frozen=True)
class StudyHeader:
    """What a study file says about itself, written once at creation (root attributes).

    Parameter columns hold every parameter of the family (fixed ones too); ``parameter_searched``
    says which were sampled. Constraint values are stored as violations in the metric's unit:
    ``value - limit`` for kind "max", ``limit - value`` for kind "min"; <= 0 is satisfied.
    """

    study_name: str
    family: str
    config_toml: str
    parameter_names: tuple[str, ...]
    parameter_units: tuple[str, ...]
    parameter_searched: tuple[bool, ...]
    search_low: tuple[float, ...]
    search_high: tuple[float, ...]
    search_log: tuple[bool, ...]
    search_step: tuple[float, ...]
    metric_names: tuple[str, ...]
    metric_units: tuple[str, ...]
    objective_names: tuple[str, ...]
    objective_directions: tuple[str, ...]
    objective_units: tuple[str, ...]
    constraint_names: tuple[str, ...]
    constraint_metrics: tuple[str, ...]
    constraint_kinds: tuple[str, ...]
    constraint_limits: tuple[float, ...]
    constraint_units: tuple[str, ...]
    elopt_version: str = __version__
    created_utc: str = ""

    @property
    def config_sha256(self) -> str:
        return hashlib.sha256(self.config_toml.encode("utf-8")).hexdigest()


@dataclass
class TrialRecord:
    """One finished (or interrupted) trial as it goes into the file; SI units.

    ``params`` (P,), ``metrics`` (M,), ``objectives`` (K,), ``constraints`` (L,) follow the
    header's name lists (NaN where a failed trial has no value). ``capacitance_F`` is (n, n)
    in the layout's conductor order (empty for a failed trial); ``profile`` maps each of
    :data:`PROFILE_FIELDS` to a (S,) array; ``info`` is a small JSON-able dict (failure reason,
    conductor names, family extras).
    """

    state: str
    params: np.ndarray
    metrics: np.ndarray
    objectives: np.ndarray
    constraints: np.ndarray
    feasible: bool = False
    session: int = -1
    started_unix: float = float("nan")
    finished_unix: float = float("nan")
    solve_s: float = float("nan")
    rel_error_estimate: float = float("nan")
    accuracy_met: bool = False
    peak_field_V_per_m: float = float("nan")
    peak_conductor: int = -1
    peak_r_m: float = float("nan")
    peak_z_m: float = float("nan")
    peak_singular: bool = False
    worker: int = -1
    worker_pid: int = -1
    sampler_generation: int = -1
    capacitance_F: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)))
    profile: dict[str, np.ndarray] | None = None
    info: dict[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class StudySnapshot:
    """The committed trials of a study read into memory: ``columns[name]`` is (N,) or (N, X)."""

    path: Path
    header: StudyHeader
    columns: dict[str, np.ndarray]
    sessions: dict[str, np.ndarray]
    texts: tuple[str, ...]

    @property
    def n_trials(self) -> int:
        return len(self.columns["number"])

    def state_names(self) -> np.ndarray:
        return np.asarray(STATES, dtype=object)[self.columns["state"]]

    def info(self, number: int) -> dict[str, Any]:
        text = self.texts[number]
        return json.loads(text) if text else {}


@dataclass(frozen=True)
class TrialArrays:
    """Per-trial arrays: capacitance (n, n) F and the surface-charge profile (S,) columns."""

    capacitance_F: np.ndarray
    profile: dict[str, np.ndarray]


# ----------------------------------------------------------------------------- locking


class WriterLock:
    """Exclusive ``flock`` on ``<study>.lock``; the OS drops it when the holder dies."""

    def __init__(self, study_path: Path) -> None:
        self.path = Path(str(study_path) + ".lock")
        self._fd: int | None = None

    def acquire(self, study_path: Path) -> None:
        while True:
            fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o644)
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except BlockingIOError:
                holder = _read_fd_text(fd)
                os.close(fd)
                raise StudyFileError(
                    f"{study_path}: another elopt process is writing this study ({holder}); "
                    "one writer at a time — wait for it to end (read it meanwhile with "
                    f"`elopt front {study_path}`)"
                ) from None
            # A holder that removed the lock file between our open and flock leaves us a lock
            # on an unlinked inode: only a lock on the inode the path names counts.
            try:
                same = os.fstat(fd).st_ino == os.stat(self.path).st_ino
            except FileNotFoundError:
                same = False
            if same:
                break
            os.close(fd)
        started = _dt.datetime.now().astimezone().isoformat(timespec="seconds")
        os.ftruncate(fd, 0)
        os.write(fd, f"pid {os.getpid()} on {socket.gethostname()} since {started}\n".encode())
        self._fd = fd

    def release(self) -> None:
        if self._fd is None:
            return
        try:
            os.unlink(self.path)
        except FileNotFoundError:
            pass
        os.close(self._fd)
        self._fd = None


def _read_fd_text(fd: int) -> str:
    try:
        os.lseek(fd, 0, os.SEEK_SET)
        text = os.read(fd, 300).decode("utf-8", "replace").strip()
    except OSError:
        text = ""
    return text or "holder unknown"


# ----------------------------------------------------------------------------- writer


class StudyWriter:
    """The one process that appends to a study file. Use :meth:`create` or :meth:`open`."""

    def __init__(self, path: Path, lock: WriterLock, h5: h5py.File, fsync: bool) -> None:
        self.path = path
        self._lock = lock
        self._h5 = h5
        self._fsync = fsync
        self.header = _read_header(h5, path)
        self._counts = [int(v) for v in h5["commit"][...]]
        # Dataset handles are looked up once: a lookup per write costs more than the write.
        self._ds = {ds.name.lstrip("/"): ds for ds, _ in _datasets_by_count(h5)}
        self._commit_ds = h5["commit"]

    # -- opening

    @classmethod
    def create(
        cls, path: str | Path, header: StudyHeader, *, overwrite: bool = False, fsync: bool = True
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
                    _write_layout(h5, header)
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
        """Open an existing study to append; truncates it to its last commit (salvage if needed)."""
        path = Path(path)
        if not path.exists():
            raise StudyFileError(f"{path}: no such study file")
        lock = WriterLock(path)
        lock.acquire(path)
        try:
            check_is_study(path)
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
        n = self._counts[4]
        values = (
            time.time(),
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
        try:
            return self._append(record)
        except (OSError, RuntimeError) as exc:
            raise StudyFileError(
                f"{self.path}: writing trial {self._counts[0]} failed ({exc}); the "
                f"{self._counts[0]} trials committed before it are safe — fix the cause (disk "
                f"space?) and `elopt resume {self.path}`"
            ) from None

    def _append(self, record: TrialRecord) -> int:
        if record.state not in STATES:
            raise ValueError(f"state must be one of {STATES}, got {record.state!r}")
        h = self.header
        n, n_cap, n_prof, n_text, n_sess = self._counts
        cap = np.asarray(record.capacitance_F, dtype=float)
        profile = record.profile or {k: np.zeros(0) for k in PROFILE_FIELDS}
        length = len(profile["sigma_C_per_m2"])
        text = json.dumps(record.info, allow_nan=True).encode("utf-8") if record.info else b""
        scalars = {
            "number": n,
            "state": STATES.index(record.state),
            "feasible": int(record.feasible),
            "n_conductors": cap.shape[0],
            "capacitance_offset": n_cap,
            "profile_offset": n_prof,
            "profile_length": length,
            "text_offset": n_text,
            "text_length": len(text),
        }
        for name, _, _ in _SCALAR_COLUMNS:
            value = scalars[name] if name in scalars else getattr(record, name)
            _put(self._ds[f"trials/{name}"], n, value)
        widths = {
            "params": len(h.parameter_names),
            "metrics": len(h.metric_names),
            "objectives": len(h.objective_names),
            "constraints": len(h.constraint_names),
        }
        for name in _MATRIX_COLUMNS:
            row = np.asarray(getattr(record, name), dtype=float).reshape(-1)
            if row.shape != (widths[name],):
                raise ValueError(f"{name}: expected {widths[name]} values, got {row.shape}")
            _put(self._ds[f"trials/{name}"], n, row)
        _extend(self._ds["capacitance_F"], n_cap, cap.reshape(-1))
        for name in PROFILE_FIELDS:
            _extend(self._ds[f"profiles/{name}"], n_prof, np.asarray(profile[name]))
        _extend(self._ds["text"], n_text, np.frombuffer(text, dtype=np.uint8))
        self._sync()
        self._commit([n + 1, n_cap + cap.size, n_prof + length, n_text + len(text), n_sess])
        return n

    def snapshot(self) -> StudySnapshot:
        """The committed trials, read through this writer's own handle."""
        return _read_snapshot(self._h5, self.path)

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
        self._h5.flush()
        if self._fsync:
            os.fsync(self._h5.id.get_vfd_handle())


def _open_truncated(path: Path) -> h5py.File:
    h5 = h5py.File(path, "r+", locking=False)
    try:
        _truncate_to_commit(h5)
    except BaseException:
        h5.close()
        raise
    return h5


def _put(ds: h5py.Dataset, row: int, value: Any) -> None:
    _reserve(ds, row + 1)
    ds[row] = value


def _extend(ds: h5py.Dataset, start: int, values: np.ndarray) -> None:
    if values.size == 0:
        return
    _reserve(ds, start + values.size)
    ds[start : start + values.size] = values


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


def _write_layout(h5: h5py.File, header: StudyHeader) -> None:
    if len(header.config_toml.encode()) > 60_000:
        raise StudyFileError("study config is longer than 60 kB; shorten it")
    a = h5.attrs
    a["format"] = FORMAT_NAME
    a["format_version"] = FORMAT_VERSION
    a["elopt_version"] = header.elopt_version
    a["created_utc"] = header.created_utc or _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds")
    a["study_name"] = header.study_name
    a["family"] = header.family
    a["config_toml"] = header.config_toml
    a["config_sha256"] = header.config_sha256
    a["state_names"] = list(STATES)
    a["layout_doc"] = "optimizer/STUDY_FILE.md in the elopt sources"
    for name in _HEADER_LIST_ATTRS:
        values = getattr(header, name)
        if values and isinstance(values[0], str):
            a[name] = list(values)
        elif name in ("parameter_searched", "search_log"):
            a[name] = np.asarray(values, dtype=np.int8)
        else:
            a[name] = np.asarray(values, dtype=float)
    widths = {
        "params": len(header.parameter_names),
        "metrics": len(header.metric_names),
        "objectives": len(header.objective_names),
        "constraints": len(header.constraint_names),
    }
    trials = h5.create_group("trials")
    for name, dtype, fill in _SCALAR_COLUMNS:
        trials.create_dataset(
            name, shape=(0,), maxshape=(None,), dtype=dtype, chunks=(_ROW_CHUNK,), fillvalue=fill
        )
    for name in _MATRIX_COLUMNS:
        w = widths[name]
        trials.create_dataset(
            name,
            shape=(0, w),
            maxshape=(None, w),
            dtype="f8",
            chunks=(_ROW_CHUNK, max(w, 1)),
            fillvalue=np.nan,
        )
    trials["metrics"].attrs["names"] = list(header.metric_names) or [""]
    trials["params"].attrs["names"] = list(header.parameter_names) or [""]
    h5.create_dataset("capacitance_F", shape=(0,), maxshape=(None,), dtype="f8", chunks=(512,))
    prof = h5.create_group("profiles")
    for name in PROFILE_FIELDS:
        dtype = "i2" if name == "conductor" else "f8"
        prof.create_dataset(name, shape=(0,), maxshape=(None,), dtype=dtype, chunks=(_FLAT_CHUNK,))
    h5.create_dataset("text", shape=(0,), maxshape=(None,), dtype="u1", chunks=(_FLAT_CHUNK,))
    sess = h5.create_group("sessions")
    for name in SESSION_FIELDS:
        dtype = "f8" if name in ("start_unix", "hours") else "i8"
        sess.create_dataset(name, shape=(0,), maxshape=(None,), dtype=dtype, chunks=(64,))
    commit = h5.create_dataset("commit", data=np.zeros(len(COMMIT_FIELDS), dtype=np.int64))
    commit.attrs["fields"] = list(COMMIT_FIELDS)


def _datasets_by_count(h5: h5py.File) -> list[tuple[h5py.Dataset, int]]:
    """Every extendable dataset with the index of the commit counter that bounds it."""
    out: list[tuple[h5py.Dataset, int]] = []
    for name, _, _ in _SCALAR_COLUMNS:
        out.append((h5[f"trials/{name}"], 0))
    for name in _MATRIX_COLUMNS:
        out.append((h5[f"trials/{name}"], 0))
    out.append((h5["capacitance_F"], 1))
    for name in PROFILE_FIELDS:
        out.append((h5[f"profiles/{name}"], 2))
    out.append((h5["text"], 3))
    for name in SESSION_FIELDS:
        out.append((h5[f"sessions/{name}"], 4))
    return out


def _truncate_to_commit(h5: h5py.File) -> None:
    counts = [int(v) for v in h5["commit"][...]]
    changed = False
    for ds, which in _datasets_by_count(h5):
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


# ----------------------------------------------------------------------------- readers


#: Opens of a study file tried before giving up (a live read may meet a write in progress).
_OPEN_RETRIES = 40


def check_is_study(path: str | Path) -> None:
    """Raise StudyFileError unless ``path`` is an elopt study file of a known format version."""
    path = Path(path)
    if not path.exists():
        raise StudyFileError(f"{path}: no such file")
    if not h5py.is_hdf5(path):
        raise StudyFileError(
            f"{path}: not an HDF5 file, so not an elopt study (studies are written by `elopt run`)"
        )
    # An HDF5 file that will not open may be caught mid-write by a running study: retry.
    for attempt in range(_OPEN_RETRIES):
        try:
            with h5py.File(path, "r", locking=False) as h5:
                fmt = h5.attrs.get("format")
                version = h5.attrs.get("format_version")
            break
        except OSError as exc:
            if attempt == _OPEN_RETRIES - 1:
                raise StudyFileError(f"{path}: HDF5 file cannot be opened ({exc})") from None
            time.sleep(0.05)
    if fmt != FORMAT_NAME:
        raise StudyFileError(
            f"{path}: HDF5 file without the attribute format = '{FORMAT_NAME}', so not an elopt "
            "study (studies are written by `elopt run`)"
        )
    if version is None or int(version) > FORMAT_VERSION:
        raise StudyFileError(
            f"{path}: study format_version {version} is newer than this elopt reads "
            f"({FORMAT_VERSION}); update elopt"
        )


def read_study(path: str | Path) -> StudySnapshot:
    """Read the committed trials; safe while a writer appends (retries a torn read)."""
    path = Path(path)
    check_is_study(path)
    return _with_retries(path, lambda h5: _read_snapshot(h5, path))


def read_trial_arrays(path: str | Path, number: int) -> TrialArrays:
    """Capacitance matrix and sigma profile of one committed trial."""
    path = Path(path)
    check_is_study(path)
    return _with_retries(path, lambda h5: _read_arrays(h5, number))


def _with_retries(path: Path, read: Any) -> Any:
    last: Exception | None = None
    for _ in range(_READ_RETRIES):
        try:
            with h5py.File(path, "r", locking=False) as h5:
                return read(h5)
        except StudyFileError:
            raise  # a definite answer (no such trial ...), not a torn read
        except _TornRead as exc:
            last = exc
        except (OSError, KeyError, ValueError, RuntimeError) as exc:
            last = exc
        time.sleep(_READ_RETRY_SLEEP_S)
    raise StudyFileError(
        f"{path}: could not get a consistent read after {_READ_RETRIES} tries ({last})"
    )


class _TornRead(Exception):
    """The committed prefix read does not hang together (a writer was mid-append)."""


def _read_header(h5: h5py.File, path: Path) -> StudyHeader:
    a = h5.attrs
    try:
        values: dict[str, Any] = {}
        for name in _HEADER_LIST_ATTRS:
            raw = a[name]
            if name in ("parameter_searched", "search_log"):
                values[name] = tuple(bool(v) for v in raw)
            elif name in ("search_low", "search_high", "search_step", "constraint_limits"):
                values[name] = tuple(float(v) for v in raw)
            else:
                values[name] = tuple(_as_str(v) for v in raw)
        return StudyHeader(
            study_name=_as_str(a["study_name"]),
            family=_as_str(a["family"]),
            config_toml=_as_str(a["config_toml"]),
            elopt_version=_as_str(a["elopt_version"]),
            created_utc=_as_str(a["created_utc"]),
            **values,
        )
    except KeyError as exc:
        raise StudyFileError(f"{path}: study header lacks attribute {exc}") from None


def _as_str(v: Any) -> str:
    return v.decode() if isinstance(v, bytes) else str(v)


def _read_snapshot(h5: h5py.File, path: Path) -> StudySnapshot:
    header = _read_header(h5, path)
    counts = [int(v) for v in h5["commit"][...]]
    n = counts[0]
    columns: dict[str, np.ndarray] = {}
    for name in [c[0] for c in _SCALAR_COLUMNS] + list(_MATRIX_COLUMNS):
        ds = h5[f"trials/{name}"]
        if ds.shape[0] < n:
            raise _TornRead(f"{name} has {ds.shape[0]} rows < committed {n}")
        columns[name] = ds[:n]
    if not np.array_equal(columns["number"], np.arange(n)):
        raise _TornRead("trial numbers are not 0..n-1")
    text_ds = h5["text"]
    if text_ds.shape[0] < counts[3]:
        raise _TornRead("text shorter than committed")
    raw = text_ds[: counts[3]].tobytes()
    ends = columns["text_offset"] + columns["text_length"]
    if n and (ends.max() > counts[3] or np.any(columns["text_offset"] < 0)):
        raise _TornRead("text offsets beyond committed text")
    texts = tuple(
        raw[o : o + k].decode("utf-8")
        for o, k in zip(columns["text_offset"], columns["text_length"], strict=True)
    )
    if n and (columns["profile_offset"] + columns["profile_length"]).max() > counts[2]:
        raise _TornRead("profile offsets beyond committed profile rows")
    sessions = {}
    for name in SESSION_FIELDS:
        ds = h5[f"sessions/{name}"]
        if ds.shape[0] < counts[4]:
            raise _TornRead("sessions shorter than committed")
        sessions[name] = ds[: counts[4]]
    return StudySnapshot(path=path, header=header, columns=columns, sessions=sessions, texts=texts)


def _read_arrays(h5: h5py.File, number: int) -> TrialArrays:
    counts = [int(v) for v in h5["commit"][...]]
    if not 0 <= number < counts[0]:
        raise StudyFileError(
            f"{h5.filename}: trial {number} does not exist; trials are 0..{counts[0] - 1}"
        )
    t = h5["trials"]
    if int(t["number"][number]) != number:
        raise _TornRead("trial row not yet consistent")
    nc = int(t["n_conductors"][number])
    co = int(t["capacitance_offset"][number])
    po = int(t["profile_offset"][number])
    pl = int(t["profile_length"][number])
    if co + nc * nc > counts[1] or po + pl > counts[2]:
        raise _TornRead("array offsets beyond committed rows")
    cap = h5["capacitance_F"][co : co + nc * nc].reshape(nc, nc)
    profile = {name: h5[f"profiles/{name}"][po : po + pl] for name in PROFILE_FIELDS}
    return TrialArrays(capacitance_F=cap, profile=profile)


# ----------------------------------------------------------------------------- salvage


def salvage(path: str | Path, *, reason: str = "") -> Path:
    """Copy the committed trials into a fresh file that replaces ``path``; returns the backup.

    The damaged original is kept beside it as ``<name>.damaged-<UTC time>``. The caller holds
    the writer lock.
    """
    path = Path(path)
    snap = read_study(path)
    records = [_record_from_file(path, snap, i) for i in range(snap.n_trials)]
    stamp = _dt.datetime.now(_dt.UTC).strftime("%Y%m%dT%H%M%SZ")
    backup = path.with_name(f"{path.name}.damaged-{stamp}")
    tmp = path.with_name(f".{path.name}.salvage-{os.getpid()}")
    try:
        with h5py.File(tmp, "w", locking=False) as h5:
            _write_layout(h5, snap.header)
        writer = StudyWriter(tmp, WriterLock(tmp), h5py.File(tmp, "r+", locking=False), True)
        for i in range(len(snap.sessions["start_unix"])):
            writer.begin_session(
                target_trials=_none_if(int(snap.sessions["target_trials"][i]), -1),
                hours=_none_if_nan(float(snap.sessions["hours"][i])),
                workers=int(snap.sessions["workers"][i]),
            )
        for rec in records:
            writer.append(rec)
        writer._h5.close()
        os.link(path, backup)
        os.replace(tmp, path)
    finally:
        if tmp.exists():
            tmp.unlink()
    print(f"elopt: {path}: salvaged {len(records)} committed trials ({reason}); kept {backup}")
    return backup


def _none_if(v: int, sentinel: int) -> int | None:
    return None if v == sentinel else v


def _none_if_nan(v: float) -> float | None:
    return None if np.isnan(v) else v


def _record_from_file(path: Path, snap: StudySnapshot, i: int) -> TrialRecord:
    c = snap.columns
    arrays = read_trial_arrays(path, i)
    rec = TrialRecord(
        state=STATES[int(c["state"][i])],
        params=c["params"][i],
        metrics=c["metrics"][i],
        objectives=c["objectives"][i],
        constraints=c["constraints"][i],
        capacitance_F=arrays.capacitance_F,
        profile=arrays.profile,
        info=snap.info(i),
    )
    for name, _, _ in _SCALAR_COLUMNS:
        if hasattr(rec, name) and name not in ("state",):
            value = c[name][i]
            default = getattr(rec, name)
            setattr(
                rec, name, type(default)(value) if not isinstance(default, bool) else bool(value)
            )
    return rec

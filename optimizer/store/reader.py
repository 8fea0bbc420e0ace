"""Reading a study file: only the committed prefix, checked before it is trusted.

Readers never write and never block the writer: they open without HDF5 locking, read the
commit counter, read the rows it covers and check them (:mod:`.validate`). A live writer may
be half-way through an append when a reader opens, so a read that breaks a rule is retried;
a rule still broken after the retries is damage, reported as one line that names it.
"""

from __future__ import annotations

import json
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any, TypeVar

import h5py
import numpy as np

from elopt.optimizer.errors import StudyFileError
from elopt.optimizer.record import (
    POINT_DIM,
    ConductorRecord,
    DesignRecord,
    PeakRecord,
    SurfaceSamples,
)
from elopt.optimizer.store import compat_v1
from elopt.optimizer.store.layout import (
    FORMAT_NAME,
    HEADER_LIST_ATTRS,
    HEADER_TEXT_ATTRS,
    MATRIX_COLUMNS,
    SCALAR_COLUMNS,
    SESSION_FIELDS,
    SURFACE_FIELDS,
    SURFACE_KIND_CODES,
    StudyHeader,
    dataset_paths,
)
from elopt.optimizer.store.model import StudySnapshot, TrialArrays
from elopt.optimizer.store.validate import (
    Damaged,
    check_arrays,
    check_columns,
    check_counts,
    check_header,
    check_judged,
    check_sessions,
    format_version_of,
    judged_metrics,
)

T = TypeVar("T")

#: Reads (and opens) tried before a broken rule counts as damage: a live read may meet a write.
READ_RETRIES = 40
READ_RETRY_SLEEP_S = 0.05


class Definite(Damaged):
    """Damage no writer can be in the middle of (the header and the datasets are written once,
    before the file is moved into place): reported at once, without retries."""


def salvage_hint(path: Path) -> str:
    return (
        f"the file is damaged or was changed outside elopt; `elopt salvage {path} --out NEW.h5` "
        "copies the committed trials that still read into a new file"
    )


def damage_error(path: Path, what: str) -> StudyFileError:
    return StudyFileError(f"{path}: {what}; {salvage_hint(path)}")


def check_is_study(path: str | Path) -> int:
    """The file's format_version, or StudyFileError unless ``path`` is an elopt study file of a
    version this elopt reads."""
    path = Path(path)
    if not path.exists():
        raise StudyFileError(f"{path}: no such file")
    if not h5py.is_hdf5(path):
        raise StudyFileError(
            f"{path}: not an HDF5 file, so not an elopt study (studies are written by `elopt run`)"
        )
    # An HDF5 file that will not open may be caught mid-write by a running study: retry.
    for attempt in range(READ_RETRIES):
        try:
            with h5py.File(path, "r", locking=False) as h5:
                fmt = h5.attrs.get("format")
                version = h5.attrs.get("format_version")
            break
        except OSError as exc:
            if attempt == READ_RETRIES - 1:
                raise damage_error(path, f"HDF5 cannot open it ({exc})") from None
            time.sleep(READ_RETRY_SLEEP_S)
    if fmt is None or _as_str(fmt) != FORMAT_NAME:
        raise StudyFileError(
            f"{path}: HDF5 file without the attribute format = '{FORMAT_NAME}', so not an elopt "
            "study (studies are written by `elopt run`)"
        )
    try:
        return format_version_of(version)
    except Damaged as exc:
        raise StudyFileError(f"{path}: {exc}") from None


def read_study(path: str | Path) -> StudySnapshot:
    """Read the committed trials; safe while a writer appends (retries a torn read)."""
    path = Path(path)
    version = check_is_study(path)
    return with_retries(path, lambda h5: read_snapshot(h5, path, version))


def read_trial_arrays(path: str | Path, number: int) -> TrialArrays:
    """Capacitance matrix and surface samples of one committed trial."""
    path = Path(path)
    version = check_is_study(path)

    def read(h5: h5py.File) -> TrialArrays:
        snap = read_snapshot(h5, path, version)
        return trial_arrays(h5, snap, number)

    return with_retries(path, read)


def read_design(path: str | Path, number: int) -> DesignRecord | None:
    """The design record of one committed trial (None unless it completed)."""
    path = Path(path)
    version = check_is_study(path)

    def read(h5: h5py.File) -> DesignRecord | None:
        snap = read_snapshot(h5, path, version)
        return design_of(snap, trial_arrays(h5, snap, number), number)

    return with_retries(path, read)


def validate_file(path: str | Path) -> StudySnapshot:
    """Read and check the whole committed study, every trial's arrays included, in one go (the
    caller holds the writer lock, so nothing is mid-write). StudyFileError names the damage."""
    path = Path(path)
    version = check_is_study(path)
    try:
        with h5py.File(path, "r", locking=False) as h5:
            snap = read_snapshot(h5, path, version)
            _check_all_arrays(h5, snap)
            return snap
    except Damaged as exc:
        raise damage_error(path, str(exc)) from None
    except (OSError, KeyError, ValueError, RuntimeError) as exc:
        raise damage_error(path, f"HDF5 cannot read it ({exc})") from None


def _check_all_arrays(h5: h5py.File, snap: StudySnapshot) -> None:
    """Every committed capacitance and surface row at once (vectorised; one read each)."""
    counts = read_counts(h5)
    c = snap.columns
    cap = _rows(h5, "capacitance_F", counts[1])
    group, fields = (
        ("profiles", compat_v1.V1_PROFILE_FIELDS)
        if snap.format_version == 1
        else ("surface", SURFACE_FIELDS)
    )
    rows = {k: _rows(h5, f"{group}/{k}", counts[2]) for k in fields}
    owner = np.full(counts[2], -1)
    limit = np.full(counts[2], np.iinfo(np.int16).max)  # rows of no trial: no conductor limit
    cap_owner = np.full(counts[1], -1)
    nc = c["n_conductors"].astype(np.int64)
    for i in range(snap.n_trials):
        o, k = int(c["surface_offset"][i]), int(c["surface_length"][i])
        owner[o : o + k], limit[o : o + k] = i, nc[i]
        co = int(c["capacitance_offset"][i])
        cap_owner[co : co + nc[i] * nc[i]] = i
    check_arrays(owner, limit, cap_owner, cap, rows)
    if snap.format_version != 1:
        bad = (c["surface_length"] > 0) & (c["surface_kind"] == 0)
        if bad.any():
            raise Damaged(
                f"trial {int(np.flatnonzero(bad)[0])}: surface rows but surface_kind 0 (none)"
            )


def with_retries(path: Path, read: Callable[[h5py.File], T]) -> T:
    """Run ``read`` on the open file until it passes; after :data:`READ_RETRIES` the last
    broken rule is reported as damage."""
    last = ""
    for _ in range(READ_RETRIES):
        try:
            with h5py.File(path, "r", locking=False) as h5:
                return read(h5)
        except StudyFileError:
            raise  # a definite answer (no such trial ...), not a torn read
        except Definite as exc:
            raise damage_error(path, str(exc)) from None
        except Damaged as exc:
            last = str(exc)
        except (OSError, KeyError, ValueError, RuntimeError) as exc:
            last = f"HDF5 cannot read it ({exc})"
        time.sleep(READ_RETRY_SLEEP_S)
    raise damage_error(path, last)


def _as_str(v: Any) -> str:
    return v.decode() if isinstance(v, bytes) else str(v)


def read_header(h5: h5py.File) -> StudyHeader:
    a = h5.attrs
    missing = [n for n in HEADER_TEXT_ATTRS + HEADER_LIST_ATTRS if n not in a]
    if missing:
        raise Definite(f"the study header lacks the attribute {missing[0]}")
    values: dict[str, Any] = {}
    for name in HEADER_LIST_ATTRS:
        raw = np.atleast_1d(a[name])
        try:
            if name in ("parameter_searched", "search_log"):
                values[name] = tuple(bool(v) for v in raw)
            elif name in ("search_low", "search_high", "search_step", "constraint_limits"):
                values[name] = tuple(float(v) for v in raw)
            else:
                values[name] = tuple(_as_str(v) for v in raw)
        except (TypeError, ValueError):
            raise Definite(f"the attribute {name} holds {raw!r}, not a list of its type") from None
    for name in HEADER_TEXT_ATTRS:
        values[name] = _as_str(a[name])
    header = StudyHeader(**values)
    try:
        check_header(header)
    except Damaged as exc:
        raise Definite(str(exc)) from None
    return header


def _dataset(h5: h5py.File, name: str) -> h5py.Dataset:
    obj = h5.get(name)
    if not isinstance(obj, h5py.Dataset):
        raise Definite(f"dataset /{name} is missing")
    return obj


def _rows(h5: h5py.File, name: str, stop: int, start: int = 0) -> np.ndarray:
    ds = _dataset(h5, name)
    if ds.shape[0] < stop:
        raise Damaged(f"dataset /{name} has {ds.shape[0]} rows; the commit counter says {stop}")
    try:
        return ds[start:stop]
    except (OSError, ValueError) as exc:
        raise Damaged(f"dataset /{name} cannot be read (HDF5: {exc})") from None


def read_counts(h5: h5py.File) -> list[int]:
    return check_counts(_dataset(h5, "commit")[...])


def read_snapshot(h5: h5py.File, path: Path, version: int) -> StudySnapshot:
    """The committed trials of an open file, checked (:class:`Damaged` on a broken rule)."""
    header = read_header(h5)
    for name, _ in dataset_paths(version):
        _dataset(h5, name)
    counts = read_counts(h5)
    n = counts[0]
    if version == 1:
        names = compat_v1.V1_SCALARS + compat_v1.V1_MATRICES
        columns = compat_v1.v2_columns({k: _rows(h5, f"trials/{k}", n) for k in names})
    else:
        names = tuple(c[0] for c in SCALAR_COLUMNS) + MATRIX_COLUMNS
        columns = {k: _rows(h5, f"trials/{k}", n) for k in names}
    widths = header.matrix_widths()
    for name, w in widths.items():
        if columns[name].shape[1:] != (w,):
            raise Definite(f"dataset /trials/{name} has {columns[name].shape[1:]} columns, not {w}")
    check_columns(columns, header, counts)
    raw = _rows(h5, "text", counts[3]).tobytes()
    texts, infos = [], []
    for i, (o, k) in enumerate(zip(columns["text_offset"], columns["text_length"], strict=True)):
        try:
            text = raw[o : o + k].decode("utf-8")
            info = json.loads(text) if k else {}
        except ValueError:  # UnicodeDecodeError is one
            raise Damaged(f"trial {i}: its text is not UTF-8 JSON") from None
        if not isinstance(info, dict):
            raise Damaged(f"trial {i}: its text is not a JSON object")
        texts.append(text)
        infos.append(info)
    check_judged(columns, header, judged_metrics(columns["metrics"], header, infos))
    sessions = {k: _rows(h5, f"sessions/{k}", counts[4]) for k in SESSION_FIELDS}
    check_sessions(sessions)
    return StudySnapshot(
        path=path,
        header=header,
        columns=columns,
        sessions=sessions,
        texts=tuple(texts),
        format_version=version,
    )


def trial_arrays(h5: h5py.File, snap: StudySnapshot, number: int) -> TrialArrays:
    """One committed trial's capacitance matrix and surface samples, checked."""
    if not 0 <= number < snap.n_trials:
        raise StudyFileError(
            f"{snap.path}: trial {number} does not exist; trials are 0..{snap.n_trials - 1}"
        )
    c = snap.columns
    nc = int(c["n_conductors"][number])
    co = int(c["capacitance_offset"][number])
    so, sl = int(c["surface_offset"][number]), int(c["surface_length"][number])
    cap = _rows(h5, "capacitance_F", co + nc * nc, co)
    if snap.format_version == 1:
        rows = {k: _rows(h5, f"profiles/{k}", so + sl, so) for k in compat_v1.V1_PROFILE_FIELDS}
        rows = compat_v1.v2_surface(rows)
        kind = rows.pop("kind")
    else:
        rows = {k: _rows(h5, f"surface/{k}", so + sl, so) for k in SURFACE_FIELDS}
        kind = SURFACE_KIND_CODES[int(c["surface_kind"][number])]
    check_arrays(np.full(sl, number), np.full(sl, nc), np.full(len(cap), number), cap, rows)
    if sl and kind == "none":
        raise Damaged(f"trial {number}: {sl} surface rows but surface_kind 0 (none)")
    names = snap.conductor_names(number)
    surface = []
    for i, name in enumerate(names):
        sel = rows["conductor"] == i
        if not sel.any():
            continue
        d = POINT_DIM[kind]
        surface.append(
            SurfaceSamples(
                conductor=name,
                kind=kind,
                points_m=rows["points_m"][sel, :d],
                normal=rows["normal"][sel, :d],
                face=rows["face"][sel].astype(np.int8),
                arc_length_m=rows["arc_length_m"][sel] if kind == "profile" else None,
                sigma_C_per_m2=rows["sigma_C_per_m2"][sel],
                field_V_per_m=rows["field_V_per_m"][sel],
                area_m2=rows["area_m2"][sel],
            )
        )
    return TrialArrays(capacitance_F=cap.reshape(nc, nc), surface=tuple(surface))


def design_of(snap: StudySnapshot, arrays: TrialArrays, number: int) -> DesignRecord | None:
    """The design record of a committed trial from its columns, text and arrays."""
    c = snap.columns
    if int(c["state"][number]) != 0:
        return None
    h = snap.header
    info = snap.info(number)
    names = snap.conductor_names(number)
    n = len(names)
    drive = info.get("conductor_drive") or [{"potential_V": None, "charge_C": None}] * n
    extra = dict(info.get("extra", {}))
    sense = float(c["sense_capacitance_F"][number])
    if not np.isfinite(sense) and isinstance(extra.get("sense_capacitance_F"), (int, float)):
        sense = float(extra["sense_capacitance_F"])  # version 1 kept it among the extras
    meaning = str(info.get("sense_capacitance_meaning", extra.get("sense_capacitance_meaning", "")))
    for own in (
        "sense_capacitance_F",
        "sense_capacitance_meaning",
        "peak_conductor",
        "peak_singular",
    ):
        extra.pop(own, None)
    pc = int(c["peak_conductor"][number])
    location = c["peak_location_m"][number]
    d = POINT_DIM[arrays.surface[0].kind] if arrays.surface else int(np.isfinite(location).sum())
    return DesignRecord(
        family=h.family,
        parameters={
            k: float(v) for k, v in zip(h.parameter_names, c["params"][number], strict=True)
        },
        parameter_units=dict(zip(h.parameter_names, h.parameter_units, strict=True)),
        conductors=tuple(
            ConductorRecord(name, d_["potential_V"], d_["charge_C"])
            for name, d_ in zip(names, drive, strict=True)
        ),
        ground_plane=bool(info.get("ground_plane", False)),
        capacitance_matrix_F=arrays.capacitance_F,
        charges_C=_float_list(info.get("charges_C"), n),
        potentials_V=_float_list(info.get("potentials_V"), n),
        sense_capacitance_F=sense,
        sense_capacitance_meaning=meaning,
        peak=PeakRecord(
            conductor=names[pc] if 0 <= pc < n else "",
            field_V_per_m=float(c["peak_surface_field_V_per_m"][number]),
            location_m=tuple(float(x) for x in location[:d]),
            at_sharp_corner=bool(c["peak_at_sharp_corner"][number]),
            rel_error_estimate=float(c["peak_rel_error_estimate"][number]),
        ),
        relative_error_estimate=float(c["relative_error_estimate"][number]),
        requested_accuracy=float(c["requested_accuracy"][number]),
        accuracy_met=bool(c["accuracy_met"][number]),
        n_unknowns=int(c["n_unknowns"][number]),
        metrics={k: float(v) for k, v in zip(h.metric_names, c["metrics"][number], strict=True)},
        metric_units=dict(zip(h.metric_names, h.metric_units, strict=True)),
        surface=arrays.surface,
        extra=extra,
        relative_error_estimate_covers=tuple(info.get("relative_error_estimate_covers", ())),
        matrix_relative_error_estimate=_float_list([info.get("matrix_relative_error_estimate")], 1)[
            0
        ],
    )


def _float_list(values: list | None, n: int) -> np.ndarray:
    if not values or len(values) != n:
        return np.full(n, np.nan)
    return np.array([np.nan if v is None else v for v in values], dtype=float)

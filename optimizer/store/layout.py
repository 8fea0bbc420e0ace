"""What a study file holds (format_version 2): names, dtypes, the commit counter, the header.

Readers without elopt: ``optimizer/store/STUDY_FILE.md``. Every extendable dataset is bounded
by one entry of the commit counter ``/commit``; :func:`datasets_by_count` lists them.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
from dataclasses import dataclass

import h5py
import numpy as np

from elopt.optimizer import __version__
from elopt.optimizer.errors import StudyFileError

FORMAT_NAME = "elopt study"
FORMAT_VERSION = 2
READABLE_VERSIONS = (1, 2)
STATES = ("complete", "failed", "interrupted")
"""Trial state codes stored in ``/trials/state`` (the index is the code)."""

SURFACE_KIND_CODES = ("none", "profile", "panels")
"""Codes of ``/trials/surface_kind``: which kind of surface samples a trial stored."""

SURFACE_FIELDS = (
    "conductor",
    "face",
    "points_m",
    "normal",
    "arc_length_m",
    "sigma_C_per_m2",
    "field_V_per_m",
    "area_m2",
)
"""Flat datasets under ``/surface``: one row per surface sample of one trial."""

#: Columns of points_m / normal / peak_location_m: d coordinates used, the rest NaN.
POINT_COLUMNS = 3

SESSION_FIELDS = ("start_unix", "target_trials", "hours", "workers")
COMMIT_FIELDS = ("trials", "capacitance", "surface", "text", "sessions")

# (name, dtype, fill) of the one-value-per-trial columns under /trials.
SCALAR_COLUMNS: tuple[tuple[str, str, float], ...] = (
    ("number", "i8", -1),
    ("state", "i1", -1),
    ("feasible", "i1", 0),
    ("session", "i4", -1),
    ("started_unix", "f8", np.nan),
    ("finished_unix", "f8", np.nan),
    ("solve_s", "f8", np.nan),
    ("relative_error_estimate", "f8", np.nan),
    ("requested_accuracy", "f8", np.nan),
    ("accuracy_met", "i1", 0),
    ("n_unknowns", "i8", 0),
    ("sense_capacitance_F", "f8", np.nan),
    ("peak_surface_field_V_per_m", "f8", np.nan),
    ("peak_conductor", "i2", -1),
    ("peak_at_sharp_corner", "i1", 0),
    ("peak_rel_error_estimate", "f8", np.nan),
    ("surface_kind", "i1", 0),
    ("worker", "i2", -1),
    ("worker_pid", "i8", -1),
    ("sampler_generation", "i4", -1),
    ("n_conductors", "i2", 0),
    ("capacitance_offset", "i8", 0),
    ("surface_offset", "i8", 0),
    ("surface_length", "i8", 0),
    ("text_offset", "i8", 0),
    ("text_length", "i8", 0),
)
MATRIX_COLUMNS = ("params", "metrics", "objectives", "constraints", "peak_location_m")
OFFSET_COLUMNS = (
    "capacitance_offset",
    "surface_offset",
    "surface_length",
    "text_offset",
    "text_length",
)
ROW_CHUNK = 64
FLAT_CHUNK = 2048
HEADER_TEXT_ATTRS = ("study_name", "family", "config_toml", "elopt_version", "created_utc")
HEADER_LIST_ATTRS = (
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

    def matrix_widths(self) -> dict[str, int]:
        """Columns of each (n, X) dataset under /trials."""
        return {
            "params": len(self.parameter_names),
            "metrics": len(self.metric_names),
            "objectives": len(self.objective_names),
            "constraints": len(self.constraint_names),
            "peak_location_m": POINT_COLUMNS,
        }


def write_layout(h5: h5py.File, header: StudyHeader) -> None:
    """Root attributes and empty datasets of a new (format_version 2) study file."""
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
    a["surface_kind_names"] = list(SURFACE_KIND_CODES)
    a["layout_doc"] = "optimizer/store/STUDY_FILE.md in the elopt sources"
    for name in HEADER_LIST_ATTRS:
        values = getattr(header, name)
        if values and isinstance(values[0], str):
            a[name] = list(values)
        elif name in ("parameter_searched", "search_log"):
            a[name] = np.asarray(values, dtype=np.int8)
        else:
            a[name] = np.asarray(values, dtype=float)
    trials = h5.create_group("trials")
    for name, dtype, fill in SCALAR_COLUMNS:
        trials.create_dataset(
            name, shape=(0,), maxshape=(None,), dtype=dtype, chunks=(ROW_CHUNK,), fillvalue=fill
        )
    for name, w in header.matrix_widths().items():
        trials.create_dataset(
            name,
            shape=(0, w),
            maxshape=(None, w),
            dtype="f8",
            # a chunk cannot be zero wide: a study with no constraints lets h5py choose
            chunks=(ROW_CHUNK, w) if w else True,
            fillvalue=np.nan,
        )
    trials["metrics"].attrs["names"] = list(header.metric_names) or [""]
    trials["params"].attrs["names"] = list(header.parameter_names) or [""]
    h5.create_dataset("capacitance_F", shape=(0,), maxshape=(None,), dtype="f8", chunks=(512,))
    surface = h5.create_group("surface")
    for name in SURFACE_FIELDS:
        dtype = {"conductor": "i2", "face": "i1"}.get(name, "f8")
        if name in ("points_m", "normal"):
            shape, chunks = (0, POINT_COLUMNS), (FLAT_CHUNK, POINT_COLUMNS)
        else:
            shape, chunks = (0,), (FLAT_CHUNK,)
        surface.create_dataset(
            name, shape=shape, maxshape=(None, *shape[1:]), dtype=dtype, chunks=chunks
        )
    h5.create_dataset("text", shape=(0,), maxshape=(None,), dtype="u1", chunks=(FLAT_CHUNK,))
    sess = h5.create_group("sessions")
    for name in SESSION_FIELDS:
        dtype = "f8" if name in ("start_unix", "hours") else "i8"
        sess.create_dataset(name, shape=(0,), maxshape=(None,), dtype=dtype, chunks=(64,))
    commit = h5.create_dataset("commit", data=np.zeros(len(COMMIT_FIELDS), dtype=np.int64))
    commit.attrs["fields"] = list(COMMIT_FIELDS)


def dataset_paths(version: int) -> list[tuple[str, int]]:
    """Every extendable dataset of a file of ``version`` with the index of the commit counter
    entry that bounds it."""
    if version == 1:
        from elopt.optimizer.store.compat_v1 import V1_DATASETS

        return list(V1_DATASETS)
    out = [(f"trials/{name}", 0) for name, _, _ in SCALAR_COLUMNS]
    out += [(f"trials/{name}", 0) for name in MATRIX_COLUMNS]
    out.append(("capacitance_F", 1))
    out += [(f"surface/{name}", 2) for name in SURFACE_FIELDS]
    out.append(("text", 3))
    out += [(f"sessions/{name}", 4) for name in SESSION_FIELDS]
    return out

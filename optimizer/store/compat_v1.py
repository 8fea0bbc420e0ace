"""Reading format_version 1 files in format_version 2 terms.

Version 1 stored the same facts under other names (``rel_error_estimate``,
``peak_field_V_per_m``, ``peak_singular``, ``peak_r_m``/``peak_z_m``) and the surface as
``/profiles/{conductor, arc_length_m, r_m, z_m, sigma_C_per_m2}``. 3-D trials were written
with x in ``r_m``, z in ``z_m`` and arc length 0: y is lost, so they read back as panels with
y = NaN. Version 1 had no ``requested_accuracy``, ``n_unknowns``, ``sense_capacitance_F``,
``peak_rel_error_estimate``, face, normal, area or field per sample (NaN / 0 here).
"""

from __future__ import annotations

from typing import Any

import numpy as np

V1_SCALARS = (
    "number",
    "state",
    "feasible",
    "session",
    "started_unix",
    "finished_unix",
    "solve_s",
    "rel_error_estimate",
    "accuracy_met",
    "peak_field_V_per_m",
    "peak_conductor",
    "peak_r_m",
    "peak_z_m",
    "peak_singular",
    "worker",
    "worker_pid",
    "sampler_generation",
    "n_conductors",
    "capacitance_offset",
    "profile_offset",
    "profile_length",
    "text_offset",
    "text_length",
)
V1_MATRICES = ("params", "metrics", "objectives", "constraints")
V1_PROFILE_FIELDS = ("conductor", "arc_length_m", "r_m", "z_m", "sigma_C_per_m2")
V1_DATASETS: tuple[tuple[str, int], ...] = (
    *((f"trials/{n}", 0) for n in V1_SCALARS + V1_MATRICES),
    ("capacitance_F", 1),
    *((f"profiles/{n}", 2) for n in V1_PROFILE_FIELDS),
    ("text", 3),
    *((f"sessions/{n}", 4) for n in ("start_unix", "target_trials", "hours", "workers")),
)
_RENAMED = {
    "rel_error_estimate": "relative_error_estimate",
    "peak_field_V_per_m": "peak_surface_field_V_per_m",
    "peak_singular": "peak_at_sharp_corner",
    "profile_offset": "surface_offset",
    "profile_length": "surface_length",
}


def v2_columns(v1: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Version-1 trial columns (committed rows) renamed and completed to version 2."""
    n = len(v1["number"])
    out: dict[str, np.ndarray] = {}
    for name, values in v1.items():
        if name in ("peak_r_m", "peak_z_m"):
            continue
        out[_RENAMED.get(name, name)] = values
    out["peak_location_m"] = np.column_stack([v1["peak_r_m"], v1["peak_z_m"], np.full(n, np.nan)])
    out["requested_accuracy"] = np.full(n, np.nan)
    out["n_unknowns"] = np.zeros(n, dtype=np.int64)
    out["sense_capacitance_F"] = np.full(n, np.nan)
    out["peak_rel_error_estimate"] = np.full(n, np.nan)
    out["surface_kind"] = np.where(v1["profile_length"] > 0, 1, 0).astype(np.int8)
    return out


def v2_surface(profile: dict[str, np.ndarray]) -> dict[str, Any]:
    """One trial's version-1 profile rows as version-2 surface columns, plus the kind per
    conductor ("panels" where every arc length is 0 over several samples: a 3-D trial)."""
    k = len(profile["sigma_C_per_m2"])
    cond = profile["conductor"]
    flat = np.zeros(k, dtype=bool)
    for c in np.unique(cond):
        sel = cond == c
        flat[sel] = sel.sum() > 1 and np.all(profile["arc_length_m"][sel] == 0)
    points = np.column_stack([profile["r_m"], profile["z_m"], np.full(k, np.nan)])
    points[flat] = np.column_stack(
        [profile["r_m"][flat], np.full(flat.sum(), np.nan), profile["z_m"][flat]]
    )
    arc = np.where(flat, np.nan, profile["arc_length_m"])
    return {
        "conductor": cond,
        "face": np.zeros(k, dtype=np.int8),
        "points_m": points,
        "normal": np.full((k, 3), np.nan),
        "arc_length_m": arc,
        "sigma_C_per_m2": profile["sigma_C_per_m2"],
        "field_V_per_m": np.full(k, np.nan),
        "area_m2": np.full(k, np.nan),
        "kind": "panels" if flat.any() else "profile",
    }

"""The one record of a solved design, shared by ``solve --json``, the study file and reports.

Schema and units: ``docs/design_record.md``. Build one with :func:`design_record` from a
family's evaluation; write it as strict JSON with :func:`design_json`; the study store keeps
the same fields under the same names (``elopt.optimizer.store.read_design`` reads one back).
The builders load on first use, so the store (and a study reader) imports only the schema.
"""

from typing import Any

from elopt.optimizer.record.schema import (
    POINT_DIM,
    SURFACE_KINDS,
    ConductorRecord,
    DesignRecord,
    PeakRecord,
    SurfaceKind,
    SurfaceSamples,
    design_from_json,
    design_json,
)
from elopt.optimizer.record.strict_json import JsonWarnings, finite_or_none, json_safe, strict_dumps

_LAZY = {
    "design_record": "from_solution",
    "MARGIN_FRACTION": "solve_json",
    "drive_of": "solve_json",
    "solve_record": "solve_json",
    "solve_warnings": "solve_json",
}


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        import importlib

        return getattr(importlib.import_module(f"{__name__}.{_LAZY[name]}"), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


__all__ = [
    "MARGIN_FRACTION",
    "POINT_DIM",
    "SURFACE_KINDS",
    "ConductorRecord",
    "DesignRecord",
    "JsonWarnings",
    "PeakRecord",
    "SurfaceKind",
    "SurfaceSamples",
    "design_from_json",
    "design_json",
    "design_record",
    "drive_of",
    "finite_or_none",
    "json_safe",
    "solve_record",
    "solve_warnings",
    "strict_dumps",
]

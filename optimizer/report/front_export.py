"""The Pareto front as files: CSV (one row per front trial) and JSON (with units and limits).

Exports always hold the whole front, whatever the table shows; an existing file is replaced
only when the caller says so.
"""

from __future__ import annotations

import csv
import json
from pathlib import Path
from typing import Any

from elopt.optimizer.errors import StudyFileError
from elopt.optimizer.report.study_view import front_numbers
from elopt.optimizer.store import StudySnapshot


def checked_output(target: str | Path, flag: str, force: bool) -> Path:
    """``target`` as a Path if it may be written: its folder exists, and it does not exist
    yet or ``force`` is set; else a StudyFileError naming the option and the rule."""
    path = Path(target)
    if not path.parent.is_dir():
        raise StudyFileError(f"{flag} {target}: directory {path.parent} does not exist")
    if path.is_dir():
        raise StudyFileError(f"{flag} {target}: is a directory, give a file name")
    if path.exists() and not force:
        raise StudyFileError(f"{flag} {target}: file exists; add --force to replace it")
    return path


def front_records(snap: StudySnapshot) -> list[dict[str, Any]]:
    """One dict per front trial: number, objectives, metrics, constraint violations, params."""
    h = snap.header
    c = snap.columns
    out = []
    for i in front_numbers(snap):
        out.append(
            {
                "trial": int(i),
                "objectives": dict(
                    zip(h.objective_names, map(float, c["objectives"][i]), strict=True)
                ),
                "metrics": dict(zip(h.metric_names, map(float, c["metrics"][i]), strict=True)),
                "constraint_violations": dict(
                    zip(h.constraint_names, map(float, c["constraints"][i]), strict=True)
                ),
                "params": dict(zip(h.parameter_names, map(float, c["params"][i]), strict=True)),
            }
        )
    return out


def write_front_csv(path: Path, snap: StudySnapshot) -> int:
    h = snap.header
    rows = front_records(snap)
    fields = ["trial", *h.objective_names]
    fields += [m for m in h.metric_names if m not in h.objective_names]
    fields += list(h.parameter_names)
    with open(path, "w", newline="", encoding="utf-8") as f:
        w = csv.writer(f)
        w.writerow(fields)
        for r in rows:
            merged = {"trial": r["trial"], **r["metrics"], **r["objectives"], **r["params"]}
            w.writerow([merged[k] for k in fields])
    return len(rows)


def write_front_json(path: Path, snap: StudySnapshot) -> int:
    h = snap.header
    rows = front_records(snap)
    doc = {
        "study": h.study_name,
        "family": h.family,
        "file": str(snap.path),
        "config_sha256": h.config_sha256,
        "objectives": [
            {"name": n, "direction": d, "unit": u}
            for n, d, u in zip(
                h.objective_names, h.objective_directions, h.objective_units, strict=True
            )
        ],
        "constraints": [
            {"name": n, "metric": m, "kind": k, "limit": lim, "unit": u}
            for n, m, k, lim, u in zip(
                h.constraint_names,
                h.constraint_metrics,
                h.constraint_kinds,
                h.constraint_limits,
                h.constraint_units,
                strict=True,
            )
        ],
        "units": {
            **dict(zip(h.metric_names, h.metric_units, strict=True)),
            **dict(zip(h.parameter_names, h.parameter_units, strict=True)),
        },
        "front": rows,
    }
    Path(path).write_text(json.dumps(doc, indent=2, allow_nan=False) + "\n", encoding="utf-8")
    return len(rows)

"""``elopt front FILE.h5``: the feasible Pareto front as a table and a text scatter; exports."""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import Any

from rich.console import Console

from elopt.optimizer.errors import StudyFileError
from elopt.optimizer.report.study_report import (
    plottable_names,
    render_front,
    write_front_csv,
    write_front_json,
)
from elopt.optimizer.store import read_study


def add_parser(subparsers: Any) -> None:
    p = subparsers.add_parser(
        "front",
        help="show a study's feasible Pareto front (works while the study runs)",
        description="Print the feasible non-dominated trials sorted by the first objective, "
        "and a text scatter of two objectives with the front marked.",
    )
    p.add_argument("study_file", metavar="FILE.h5")
    p.add_argument("--x", metavar="NAME", help="scatter x: an objective, metric or parameter")
    p.add_argument("--y", metavar="NAME", help="scatter y: an objective, metric or parameter")
    out = p.add_mutually_exclusive_group()
    out.add_argument("--csv", metavar="OUT", help="also write the front to a CSV file")
    out.add_argument("--json", metavar="OUT", help="also write the front to a JSON file")
    p.set_defaults(func=front_command)


def front_command(args: argparse.Namespace) -> int:
    snap = read_study(args.study_file)
    allowed = plottable_names(snap)
    for flag, name in (("--x", args.x), ("--y", args.y)):
        if name is not None and name not in allowed:
            raise StudyFileError(
                f"{flag} {name}: not in this study; choose from {', '.join(allowed)}"
            )
    render_front(Console(highlight=False, markup=False), snap, args.x, args.y)
    for target, write in ((args.csv, write_front_csv), (args.json, write_front_json)):
        if target:
            path = Path(target)
            if not path.parent.is_dir():
                raise StudyFileError(f"{target}: directory {path.parent} does not exist")
            n = write(path, snap)
            print(f"elopt: wrote {n} front trials to {path}")
    return 0

"""``elopt front FILE.h5``: the feasible Pareto front as a table and a text scatter; exports."""

from __future__ import annotations

import argparse
from typing import Any


def add_parser(subparsers: Any) -> None:
    p = subparsers.add_parser(
        "front",
        help="show a study's feasible Pareto front (works while the study runs)",
        description="Print the feasible non-dominated trials (best first by the first "
        "objective, or by --sort) and a text scatter of two quantities with the front marked, "
        "the infeasible trials and the constraint limits drawn; log-sampled parameters get a "
        "log axis.",
    )
    p.add_argument("study_file", metavar="FILE.h5")
    p.add_argument(
        "--top",
        type=int,
        metavar="N",
        default=None,
        help="show at most N rows of the table (default 30; 0: every front trial)",
    )
    p.add_argument(
        "--sort",
        metavar="NAME",
        help="order the table by an objective (best first), metric or parameter (ascending)",
    )
    p.add_argument("--reverse", action="store_true", help="reverse the table's order")
    p.add_argument("--x", metavar="NAME", help="scatter x: an objective, metric or parameter")
    p.add_argument("--y", metavar="NAME", help="scatter y: an objective, metric or parameter")
    p.add_argument("--csv", metavar="OUT", help="also write the whole front to a CSV file")
    p.add_argument("--json", metavar="OUT", help="also write the whole front to a JSON file")
    p.add_argument("--force", action="store_true", help="replace export files that exist")
    p.set_defaults(func=front_command)


def front_command(args: argparse.Namespace) -> int:
    from rich.console import Console

    from elopt.optimizer.config.toml_tools import as_int
    from elopt.optimizer.report.front_export import (
        checked_output,
        write_front_csv,
        write_front_json,
    )
    from elopt.optimizer.report.front_table import DEFAULT_TOP, FrontView, render_front
    from elopt.optimizer.report.study_view import checked_name
    from elopt.optimizer.store import read_study

    top = DEFAULT_TOP if args.top is None else as_int(args.top, "--top", low=0)
    exports = [
        (checked_output(target, flag, args.force), write)
        for flag, target, write in (
            ("--csv", args.csv, write_front_csv),
            ("--json", args.json, write_front_json),
        )
        if target
    ]
    if len(exports) == 2 and exports[0][0].resolve() == exports[1][0].resolve():
        from elopt.optimizer.errors import StudyFileError

        raise StudyFileError(f"--csv and --json name the same file {args.csv}; give two names")
    snap = read_study(args.study_file)
    for flag, name in (("--x", args.x), ("--y", args.y), ("--sort", args.sort)):
        if name is not None:
            checked_name(snap, flag, name)
    view = FrontView(top=top, sort=args.sort, reverse=args.reverse)
    render_front(Console(highlight=False, markup=False), snap, args.x, args.y, view)
    for path, write in exports:
        n = write(path, snap)
        print(f"elopt: wrote {n} front trials to {path}")
    return 0

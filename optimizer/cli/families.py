"""``elopt families [NAME]``: every electrode family with its parameters (unit, default,
allowed range where the family declares one), evaluation options and metrics."""

from __future__ import annotations

import argparse
from typing import Any


def add_parser(subparsers: Any) -> None:
    p = subparsers.add_parser(
        "families",
        help="list the electrode families: parameters with units and ranges, options, metrics",
        description="List every electrode family a config can name in [geometry] family (solve) "
        "or [study] family (run): its parameters with their units, defaults, allowed "
        "ranges and meanings, its [evaluation] options and the metrics a study can use as objectives or "
        "constraints.",
    )
    p.add_argument("name", nargs="?", metavar="NAME", help="show only this family")
    p.set_defaults(func=families_command)


def families_command(args: argparse.Namespace) -> int:
    from rich.console import Console

    from elopt.optimizer.report.family_listing import family_descriptions, render_families

    render_families(Console(highlight=False, markup=False), family_descriptions(args.name))
    return 0

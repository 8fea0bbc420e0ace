"""``elopt salvage FILE.h5 --out NEW.h5``: copy the committed trials that still read into a new
study file; the damaged file is only read."""

from __future__ import annotations

import argparse
from typing import Any

from elopt.optimizer.store import salvage_to


def add_parser(subparsers: Any) -> None:
    p = subparsers.add_parser(
        "salvage",
        help="recover the committed trials of a damaged study file into a new file",
        description="Read FILE.h5 as far as it reads, keep every committed trial that passes "
        "the reader's checks, and write them (renumbered in order) into NEW.h5, which "
        "`elopt resume`, `front` and `show` accept. FILE.h5 is never written.",
    )
    p.add_argument("study_file", metavar="FILE.h5")
    p.add_argument("--out", metavar="NEW.h5", required=True, help="the new study file")
    p.set_defaults(func=salvage_command)


def salvage_command(args: argparse.Namespace) -> int:
    report = salvage_to(args.study_file, args.out)
    print(f"elopt: {args.study_file}: {report.summary()}; wrote {args.out}")
    return 0

"""``elopt report FILE.h5 OUT.html``: the study as one self-contained web page, and
optionally its figures as PNG and SVG files."""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import Any


def add_parser(subparsers: Any) -> None:
    p = subparsers.add_parser(
        "report",
        help="write a study's report: one HTML page with its figures embedded (works offline)",
        description="Write one self-contained HTML page about a study: counts, the Pareto "
        "front table, figures (front with constraint limits and infeasible trials, each "
        "constraint, best values trial by trial, parameter importance), the search space and "
        "the config. Needs matplotlib (elopt[figures]).",
    )
    p.add_argument("study_file", metavar="FILE.h5")
    p.add_argument("out", metavar="OUT.html", help="the page to write")
    p.add_argument(
        "--figures",
        metavar="DIR",
        help="also write each figure to DIR as NAME.png and NAME.svg (DIR is made if missing)",
    )
    p.add_argument("--force", action="store_true", help="replace files that exist")
    p.set_defaults(func=report_command)


def report_command(args: argparse.Namespace) -> int:
    from elopt.optimizer.errors import ConfigError
    from elopt.optimizer.report.figure_files import pyplot, refuse_existing
    from elopt.optimizer.report.front_export import checked_output
    from elopt.optimizer.store import read_study

    out = checked_output(args.out, "OUT.html", args.force)
    if out.suffix.lower() not in (".html", ".htm"):
        raise ConfigError(f"OUT.html {args.out}: the page's name must end in .html")
    pyplot()
    snap = read_study(args.study_file)
    if args.figures:
        from elopt.optimizer.report.study_figures import FIGURE_MAKERS, study_figures

        folder = Path(args.figures)
        folder.mkdir(parents=True, exist_ok=True)
        refuse_existing(
            [folder / f"{s}{x}" for s in FIGURE_MAKERS for x in (".png", ".svg")],
            "--figures",
            args.force,
        )
        written = study_figures(snap, folder)
        print(f"elopt: wrote {len(written)} figure files to {folder}")
    from elopt.optimizer.report.html_page import write_study_page

    size = write_study_page(snap, out)
    print(f"elopt: wrote {out} ({size / 1e3:.0f} kB, self-contained; open it in any browser)")
    return 0

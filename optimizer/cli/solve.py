"""``elopt solve CONFIG.toml [--json] [--figure PATH] [--geometry OUT]``: solve one design and
report its metrics; optionally draw it and write its geometry for CAD."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

FIGURE_HELP = (
    "also draw the design to PATH.png and PATH.svg (or only the one a .png/.svg suffix "
    "names): the section to scale with |E| and equipotentials, the peak-field point and the "
    "surface field along each electrode (3-D: electrodes coloured by surface field and the "
    "sensitivity density on the target); needs matplotlib (elopt[figures])"
)
GEOMETRY_HELP = (
    "also write the design's conductors in mm for CAD: OUT.dxf the generating profile "
    "(bodies of revolution), OUT.stl the surfaces"
)


def add_parser(subparsers: argparse._SubParsersAction) -> None:
    p = subparsers.add_parser(
        "solve",
        help="solve one electrode design and report its metrics",
        description="Solve the surface charge of one design given in a TOML config ([geometry] "
        "with the family and its parameters; optional [solver], [medium], [evaluation]) and "
        "print its metrics, capacitance matrix, peak surface field and a picture.",
    )
    p.add_argument("config", metavar="CONFIG.toml", help="the design to solve")
    p.add_argument("--json", action="store_true", help="print one JSON object instead")
    p.add_argument("--figure", metavar="PATH", help=FIGURE_HELP)
    p.add_argument("--geometry", metavar="OUT", help=GEOMETRY_HELP)
    p.add_argument("--force", action="store_true", help="replace output files that exist")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from rich.console import Console

    from elopt.optimizer.config import read_solve_config
    from elopt.optimizer.record import solve_record, strict_dumps
    from elopt.optimizer.report.solve_report import render_solve_report
    from elopt.physics.electrodes.pipeline import evaluate_design
    from elopt.physics.electrodes.registry import get_family
    from elopt.physics.errors import ElOptError

    spec = read_solve_config(args.config)
    family = get_family(spec.family)
    figure_paths = design_outputs(args, lambda: family.build(spec.params))
    try:
        evaluation = evaluate_design(
            family,
            spec.params,
            rel_accuracy=spec.rel_accuracy,
            peak_rel_accuracy=spec.peak_rel_accuracy,
            eps_r=spec.eps_r,
            options=spec.options,
        )
    except ElOptError as exc:  # refusals during the solve name the config too
        raise type(exc)(f"{spec.path}: {exc}") from None
    if args.json:
        print(strict_dumps(solve_record(spec, family, evaluation), indent=2))
    else:
        render_solve_report(Console(), spec, family, evaluation)
    if figure_paths:
        draw_design(figure_paths, spec, family, evaluation, spec.title or spec.path)
    return 0


def design_outputs(args: argparse.Namespace, build) -> list[Path]:
    """Check ``--figure``/``--geometry`` before any solve, write the geometry (it needs no
    solve), and return the figure paths to draw once solved ([] without ``--figure``)."""
    from elopt.optimizer.report.figure_files import figure_paths, pyplot, refuse_existing

    paths: list[Path] = []
    if args.figure:
        paths = figure_paths(args.figure)
        refuse_existing(paths, "--figure", args.force)
        pyplot()  # a missing matplotlib is said now, not after a long solve
    if args.geometry:
        from elopt.optimizer.export import write_geometry
        from elopt.optimizer.report.front_export import checked_output

        out = checked_output(args.geometry, "--geometry", args.force)
        what = write_geometry(build(), out)
        _say(f"elopt: wrote {out}: {what}")
    return paths


def draw_design(paths: list[Path], spec, family, evaluation, title: str) -> None:
    from elopt.optimizer.report.design_figures import design_figure

    written = design_figure(
        evaluation,
        paths,
        title=title,
        breakdown_V_per_m=spec.breakdown_field_V_per_m,
        mirror=bool(getattr(family, "mirror_pair", False)),
    )
    _say("elopt: wrote figure " + ", ".join(str(p) for p in written))


def _say(text: str) -> None:
    # On stderr: stdout may be a JSON document (--json).
    print(text, file=sys.stderr)

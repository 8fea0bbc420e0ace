"""``elopt solve CONFIG.toml [--json]``: solve one design and report its metrics."""

from __future__ import annotations

import argparse

from rich.console import Console

from elopt.optimizer.config import read_solve_config
from elopt.optimizer.record import solve_record, strict_dumps
from elopt.optimizer.report.solve_report import render_solve_report
from elopt.physics.electrodes.pipeline import evaluate_design
from elopt.physics.electrodes.registry import get_family
from elopt.physics.errors import ElOptError


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
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    spec = read_solve_config(args.config)
    family = get_family(spec.family)
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
    return 0

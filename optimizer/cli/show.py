"""``elopt show FILE.h5 TRIAL``: one trial in full — parameters, metrics, capacitance matrix,
peak field and where, and the surface charge along the electrode; optionally the trial as a
solve config, its figure and its geometry for CAD."""

from __future__ import annotations

import argparse
from typing import Any

from elopt.optimizer.cli.solve import FIGURE_HELP, GEOMETRY_HELP


def add_parser(subparsers: Any) -> None:
    p = subparsers.add_parser(
        "show",
        help="show one trial of a study in detail (works while the study runs)",
        description="Print one trial: parameters, metrics, capacitance matrix, peak surface "
        "field and its place, and a text plot of sigma along each conductor. --solve-config "
        "writes the trial as an `elopt solve` config that reproduces it; --figure solves that "
        "config again to draw the design.",
    )
    p.add_argument("study_file", metavar="FILE.h5")
    p.add_argument("trial", metavar="TRIAL", help="trial number (as listed by `elopt front`)")
    p.add_argument(
        "--solve-config",
        metavar="OUT.toml",
        help="write the trial as a solve config (family, every parameter, the study's solver, "
        "medium and evaluation settings)",
    )
    p.add_argument("--figure", metavar="PATH", help=FIGURE_HELP + "; solves the design again")
    p.add_argument("--geometry", metavar="OUT", help=GEOMETRY_HELP)
    p.add_argument("--force", action="store_true", help="replace output files that exist")
    p.set_defaults(func=show_command)


def show_command(args: argparse.Namespace) -> int:
    from rich.console import Console

    from elopt.optimizer.errors import StudyFileError
    from elopt.optimizer.report.front_export import checked_output
    from elopt.optimizer.report.trial_view import render_trial
    from elopt.optimizer.store import read_study, read_trial_arrays

    try:
        number = int(args.trial)
    except ValueError:
        raise StudyFileError(f"TRIAL: expected a trial number, got {args.trial!r}") from None
    config_out = (
        checked_output(args.solve_config, "--solve-config", args.force)
        if args.solve_config
        else None
    )
    snap = read_study(args.study_file)
    if not 0 <= number < snap.n_trials:
        raise StudyFileError(
            f"TRIAL {number}: {args.study_file} holds trials 0..{snap.n_trials - 1}"
            if snap.n_trials
            else f"TRIAL {number}: {args.study_file} holds no trials yet"
        )
    arrays = read_trial_arrays(args.study_file, number)
    render_trial(Console(highlight=False, markup=False), snap, arrays, number)
    if not (config_out or args.figure or args.geometry):
        return 0
    import tomllib
    import typing

    from elopt.optimizer.cli.solve import _say, design_outputs, draw_design
    from elopt.optimizer.config.solve_config import parse_solve_config
    from elopt.optimizer.export import trial_solve_config
    from elopt.physics.electrodes.registry import get_family

    family = get_family(snap.header.family)
    hints = typing.get_type_hints(family.Params)
    whole = {name for name, hint in hints.items() if hint is int}
    text = trial_solve_config(snap, number, integer_names=whole)
    where = str(config_out) if config_out else f"trial {number} of {args.study_file}"
    spec = parse_solve_config(tomllib.loads(text), where)
    if config_out:
        config_out.write_text(text, encoding="utf-8")
        _say(f"elopt: wrote {config_out}; reproduce the trial with: elopt solve {config_out}")
    paths = design_outputs(args, lambda: family.build(spec.params))
    if paths:
        _say(f"elopt: solving trial {number} again for its figure")
        kwargs = {} if spec.options is None else {"options": spec.options}
        evaluation = family.evaluate(
            spec.params, rel_accuracy=spec.rel_accuracy, eps_r=spec.eps_r, **kwargs
        )
        title = f"study {snap.header.study_name}, trial {number}"
        draw_design(paths, spec, family, evaluation, title)
    return 0

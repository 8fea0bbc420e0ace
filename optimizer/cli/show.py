"""``elopt show FILE.h5 TRIAL``: one trial in full — parameters, metrics, capacitance matrix,
peak field and where, and the surface charge along the electrode."""

from __future__ import annotations

import argparse
from typing import Any

from rich.console import Console

from elopt.optimizer.errors import StudyFileError
from elopt.optimizer.report.study_report import render_trial
from elopt.optimizer.store import read_study, read_trial_arrays


def add_parser(subparsers: Any) -> None:
    p = subparsers.add_parser(
        "show",
        help="show one trial of a study in detail (works while the study runs)",
        description="Print one trial: parameters, metrics, capacitance matrix, peak surface "
        "field and its place, and a text plot of sigma along each conductor.",
    )
    p.add_argument("study_file", metavar="FILE.h5")
    p.add_argument("trial", metavar="TRIAL", help="trial number (as listed by `elopt front`)")
    p.set_defaults(func=show_command)


def show_command(args: argparse.Namespace) -> int:
    try:
        number = int(args.trial)
    except ValueError:
        raise StudyFileError(f"TRIAL: expected a trial number, got {args.trial!r}") from None
    snap = read_study(args.study_file)
    if not 0 <= number < snap.n_trials:
        raise StudyFileError(
            f"TRIAL {number}: {args.study_file} holds trials 0..{snap.n_trials - 1}"
            if snap.n_trials
            else f"TRIAL {number}: {args.study_file} holds no trials yet"
        )
    arrays = read_trial_arrays(args.study_file, number)
    render_trial(Console(highlight=False, markup=False), snap, arrays, number)
    return 0

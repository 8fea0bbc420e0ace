"""``elopt calibrate CONFIG.toml``: solve one design over a range of one parameter (the
standoff by default) and write its calibration table: C, 1/C, sensitivity, deviation from the
best straight line."""

from __future__ import annotations

import argparse
from typing import Any


def add_parser(subparsers: Any) -> None:
    p = subparsers.add_parser(
        "calibrate",
        help="sweep one parameter of a design (the standoff by default): C, 1/C, "
        "sensitivity and deviation from a straight line, as a table, CSV and figure",
        description="Solve the design of CONFIG.toml at evenly spaced values of one parameter "
        "and print, per point, C, 1/C, dC/d(parameter) and the deviation from the best "
        "straight line through 1/C (or C, --straight direct) in per cent of full scale.",
    )
    p.add_argument("config", metavar="CONFIG.toml", help="the design (as for elopt solve)")
    p.add_argument(
        "--param",
        metavar="NAME",
        default="standoff_mm",
        help="the parameter to sweep (default standoff_mm)",
    )
    p.add_argument(
        "--from",
        dest="start",
        type=float,
        metavar="A",
        help="first value (default 0.5 x the config's)",
    )
    p.add_argument(
        "--to", dest="stop", type=float, metavar="B", help="last value (default 1.5 x the config's)"
    )
    p.add_argument(
        "--points", type=int, default=9, metavar="N", help="number of values, >= 3 (default 9)"
    )
    p.add_argument(
        "--straight",
        choices=("inverse", "direct"),
        default="inverse",
        help="fit the straight line to 1/C (inverse, default: a gap read through 1/C) or to C",
    )
    p.add_argument("--csv", metavar="OUT", help="write the table to a CSV file")
    p.add_argument(
        "--figure",
        metavar="PATH",
        help="draw it to PATH.png and PATH.svg (or the one suffix given)",
    )
    p.add_argument("--force", action="store_true", help="replace output files that exist")
    p.set_defaults(func=calibrate_command)


def calibrate_command(args: argparse.Namespace) -> int:
    import sys

    from rich import box
    from rich.console import Console
    from rich.table import Table

    from elopt.optimizer.config.solve_config import read_solve_config
    from elopt.optimizer.config.toml_tools import as_int
    from elopt.optimizer.errors import ConfigError
    from elopt.optimizer.report import calibration as cal_mod
    from elopt.optimizer.report.figure_files import figure_paths, pyplot, refuse_existing
    from elopt.optimizer.report.front_export import checked_output
    from elopt.optimizer.report.numbers import short_number
    from elopt.physics.electrodes.registry import get_family

    points = as_int(args.points, "--points", low=3, high=101)
    csv_out = checked_output(args.csv, "--csv", args.force) if args.csv else None
    fig_paths = figure_paths(args.figure) if args.figure else []
    refuse_existing(fig_paths, "--figure", args.force)
    if fig_paths:
        pyplot()
    spec = read_solve_config(args.config)
    family = get_family(spec.family)
    nominal = getattr(spec.params, args.param, None)
    if not isinstance(nominal, int | float) or isinstance(nominal, bool):
        names = [
            n
            for n, v in vars(spec.params).items()
            if isinstance(v, int | float) and not isinstance(v, bool)
        ]
        raise ConfigError(
            f"--param {args.param}: not a number parameter of {spec.family}; choose from {', '.join(names)}"
        )
    values = cal_mod.sweep_values(float(nominal), args.start, args.stop, points)

    def on_point(k: int, v: float) -> None:
        print(
            f"elopt: solving point {k + 1} of {len(values)}: {args.param} = {v:.6g}",
            file=sys.stderr,
            flush=True,
        )

    cal = cal_mod.calibration_sweep(
        spec, family, args.param, values, straight=args.straight, on_point=on_point
    )
    header, rows = cal_mod.calibration_rows(cal)
    table = Table(
        title=f"calibration of {spec.title or spec.path}", title_justify="left", box=box.SIMPLE_HEAD
    )
    for h in cal_mod.terminal_headers(cal):
        table.add_column(h, justify="right", no_wrap=True)
    heads = cal_mod.terminal_headers(cal)
    deviation = len(heads) - 2
    for r in rows:  # the accuracy flag (last) is summed up below the table
        cells = [short_number(v) for v in r[: len(heads)]]
        cells[deviation] = f"{r[deviation]:+.3f}"
        table.add_row(*cells)
    table.caption = f"x = {args.param}"
    table.caption_justify = "left"
    console = Console()
    console.print(table)
    worst = float(max(abs(cal.deviation_pct_fs)))
    what = "1/C" if args.straight == "inverse" else "C"
    console.print(
        f"largest deviation of {what} from its best straight line: {worst:.3g} % of full scale"
    )
    if not cal.accuracy_met.all():
        console.print(
            f"warning: {int((~cal.accuracy_met).sum())} points missed the requested accuracy",
            style="bold red",
        )
    if csv_out:
        cal_mod.write_calibration_csv(csv_out, cal)
        print(f"elopt: wrote {csv_out}")
    if fig_paths:
        from elopt.optimizer.report.figure_files import save_figure

        save_figure(
            cal_mod.calibration_figure(cal, f"calibration: {spec.title or spec.path}"), fig_paths
        )
        print("elopt: wrote figure " + ", ".join(str(p) for p in fig_paths))
    return 0

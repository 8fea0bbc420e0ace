"""``elopt check``: run the published validation cases and print measured vs reference."""

from __future__ import annotations

import argparse
import time
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from rich.text import Text

    from elopt.physics.validation import CheckResult


def add_parser(subparsers: argparse._SubParsersAction) -> None:
    p = subparsers.add_parser(
        "check",
        help="run the published validation cases (exit status 1 if any fails)",
        description="Solve layouts whose answers are published (closed forms, series, Love's "
        "equation, the standards' guarded-electrode formula) and compare.",
    )
    p.add_argument(
        "--case",
        action="append",
        metavar="NAME",
        help="run only this case (repeatable; a name that is not a case lists the cases)",
    )
    p.set_defaults(func=run)


def result_lines(rows: list[CheckResult]) -> list[Text]:
    """Each case as a heading with its source, then one line per checked quantity."""
    from rich.text import Text

    header = Text(f"{'':6}{'quantity':<30}{'measured':>12}{'reference':>12}{'error ≤ tol':>17}")
    lines = [Text(header.plain, style="bold")]
    case = None
    for r in rows:
        if r.case != case:
            case = r.case
            lines.append(Text(case, style="bold"))
            lines.append(Text(f"{'':6}{r.source}", style="dim"))
        line = Text("  ")
        line.append("pass" if r.passed else "FAIL", style="green" if r.passed else "bold red")
        line.append(
            f"  {r.quantity:<30.30}{r.measured:>12.8g}{r.reference:>12.8g}"
            f"{r.error:>9.1e} ≤ {r.tolerance:.0e}"
        )
        lines.append(line)
    return lines


def run(args: argparse.Namespace) -> int:
    from rich.console import Console
    from rich.text import Text

    from elopt.optimizer.errors import ConfigError
    from elopt.physics.validation import CASES, run_cases

    unknown = [c for c in args.case or [] if c not in CASES]
    if unknown:
        raise ConfigError(f"--case {unknown[0]}: not a validation case; cases: {', '.join(CASES)}")
    console = Console()
    start = time.perf_counter()
    rows = run_cases(args.case)
    elapsed = time.perf_counter() - start
    for line in result_lines(rows):
        console.print(line)
    failed = [r for r in rows if not r.passed]
    summary = f"{len(rows) - len(failed)} of {len(rows)} checks passed in {elapsed:.1f} s"
    console.print(Text(summary, style="bold red" if failed else "bold green"))
    return 1 if failed else 0

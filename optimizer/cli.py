"""The ``elopt`` command line: one verb per job (solve, check, run, resume, front, show)."""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence

from optimizer import __version__


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="elopt",
        description="Design capacitive-sensor electrodes: solve for the surface charge of a "
        "parameterised electrode and search its shape under a peak-surface-field limit.",
    )
    parser.add_argument("--version", action="version", version=f"elopt {__version__}")
    parser.add_subparsers(dest="verb", metavar="VERB")
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.verb is None:
        parser.print_help()
        return 0
    return 0


if __name__ == "__main__":
    sys.exit(main())

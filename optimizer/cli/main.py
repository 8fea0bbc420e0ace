"""The ``elopt`` command line: one verb per job.

Building the parser imports only the verb modules, which import nothing heavy at module level:
``elopt --help`` and the study readers start without loading the solvers or optuna.
"""

from __future__ import annotations

import argparse
import importlib
import sys
import warnings
from collections.abc import Sequence

#: Modules that each define ``add_parser(subparsers)``; one verb (or a few) per module.
VERB_MODULES: list[str] = []
VERB_MODULES += ["elopt.optimizer.cli.run", "elopt.optimizer.cli.front", "elopt.optimizer.cli.show"]
VERB_MODULES += ["elopt.optimizer.cli.report", "elopt.optimizer.cli.solve"]
VERB_MODULES += ["elopt.optimizer.cli.calibrate", "elopt.optimizer.cli.families"]
VERB_MODULES += ["elopt.optimizer.cli.check", "elopt.optimizer.cli.salvage"]


def build_parser() -> argparse.ArgumentParser:
    from elopt.optimizer import __version__

    parser = argparse.ArgumentParser(
        prog="elopt",
        description="Design capacitive-sensor electrodes: solve for the surface charge of a "
        "parameterised electrode and search its shape under a peak-surface-field limit.",
    )
    parser.add_argument("--version", action="version", version=f"elopt {__version__}")
    subparsers = parser.add_subparsers(dest="verb", metavar="VERB")
    for module_name in VERB_MODULES:
        importlib.import_module(module_name).add_parser(subparsers)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    from elopt.physics.errors import ElOptError

    parser = build_parser()
    args = parser.parse_args(argv)
    if args.verb is None:
        parser.print_help()
        return 0
    from elopt.physics.threads import limit_blas_threads

    limit_blas_threads()
    # Library warnings are held back: a refusal is one line, and on success they follow the
    # output instead of interleaving with it.
    with warnings.catch_warnings(record=True) as caught:
        try:
            status = int(args.func(args))
        except ElOptError as exc:
            print(f"elopt: error: {exc}", file=sys.stderr)
            return 2
        except KeyboardInterrupt:
            print("elopt: interrupted", file=sys.stderr)
            return 130
    for w in caught:
        warnings.showwarning(w.message, w.category, w.filename, w.lineno)
    return status


if __name__ == "__main__":
    sys.exit(main())

"""The bad-input contract of the ``elopt`` command line, and a check of one run against it.

Exit 0 with (for ``--json``) strict JSON whose every null metric carries a warning, or exit 2
with exactly one line ``elopt: error: <config path>: ...`` and nothing written; never a
traceback; within a time bound. :func:`classify` names the class an outcome falls in.
"""

from __future__ import annotations

import contextlib
import io
import json
import time
import traceback
from dataclasses import dataclass
from pathlib import Path

from fuzz_support.cases import Case

CLASSES = (
    "ok",
    "refused",
    "traceback",
    "unbounded",
    "crash",
    "silent-wrong",
    "false-refusal",
    "messy-refusal",
    "file-left",
    "warned-ok",
    "other-exit",
)


@dataclass
class Outcome:
    status: int | None  # None: an exception escaped, or the run never ended
    stdout: str
    stderr: str
    seconds: float
    timed_out: bool = False
    crashed: bool = False


def run_in_process(argv: list[str]) -> Outcome:
    """``elopt ARGV`` in this process, output captured; an escaping exception is recorded."""
    from elopt.optimizer.cli.main import main

    out, err = io.StringIO(), io.StringIO()
    t0 = time.perf_counter()
    status: int | None
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        try:
            status = main(argv)
        except SystemExit as exc:
            status = exc.code if isinstance(exc.code, int) else 2
        except BaseException:  # the contract: nothing escapes; record what did
            status = None
            err.write(traceback.format_exc())
    return Outcome(status, out.getvalue(), err.getvalue(), time.perf_counter() - t0)


def _reject_constant(name: str) -> None:
    raise ValueError(f"non-strict JSON constant {name}")


def classify(case: Case, where: Path, outcome: Outcome, time_bound_s: float) -> tuple[str, str]:
    """(class, detail) of ``outcome`` for ``case`` run in directory ``where``."""
    config = case.config.replace("{dir}", str(where))
    if outcome.timed_out or outcome.seconds > time_bound_s:
        return "unbounded", f"ran {outcome.seconds:.0f} s"
    if outcome.crashed:
        return "crash", outcome.stderr[-300:]
    if outcome.status is None or "Traceback (most recent call last)" in outcome.stderr:
        return "traceback", _last_line(outcome.stderr)
    if outcome.status == 0:
        if case.expect_json:
            try:
                record = json.loads(outcome.stdout, parse_constant=_reject_constant)
            except ValueError as exc:
                return "silent-wrong", f"output is not strict JSON: {exc}"
            units = record.get("metric_units", {})
            warnings = " ".join(record.get("warnings", []))
            for name in units:
                if record.get(name) is None and name not in warnings:
                    return "silent-wrong", f"{name} is null without a warning"
        if "RuntimeWarning" in outcome.stderr:
            return "warned-ok", _last_line(outcome.stderr)
        return "ok", ""
    if outcome.status == 2:
        lines = outcome.stderr.strip().splitlines()
        if len(lines) != 1 or not lines[0].startswith(f"elopt: error: {config}"):
            return "messy-refusal", " | ".join(lines)[:300]
        if case.study_out and Path(case.study_out.replace("{dir}", str(where))).exists():
            return "file-left", lines[0][:300]
        if case.expect_ok:
            return "false-refusal", lines[0][:300]
        return "refused", lines[0]
    return "other-exit", f"exit {outcome.status}: {_last_line(outcome.stderr)}"


def _last_line(text: str) -> str:
    lines = [ln for ln in text.strip().splitlines() if ln.strip()]
    return lines[-1][:300] if lines else ""

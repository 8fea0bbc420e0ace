"""Property-based check of the command line's bad-input contract.

Hypothesis draws careless edits of the demo configs, configs damaged on disk, damaged STL
files, valid designs at their limits and mutated studies (``tests/fuzz_support/cases.py``);
each is run through ``elopt`` in this process. The contract (``fuzz_support/contract.py``):
exit 0 with finite strict JSON whose null metrics each carry a warning, or exit 2 with one
line ``elopt: error: <config>: ...`` and no study file written; never a traceback; within
the time bound. The same generators drive ``tests/benchmarks/bench_fuzz.py`` at scale.
"""

from __future__ import annotations

import tempfile
from pathlib import Path

import pytest
from fuzz_support.cases import GENERATORS
from fuzz_support.contract import classify, run_in_process
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

#: Seconds one case may take on a loaded 2-core machine; accepted cases solve in about one.
TIME_BOUND_S = 120.0


class HypothesisChooser:
    """The :class:`fuzz_support.cases.Chooser` protocol over hypothesis' ``data.draw``."""

    def __init__(self, data: st.DataObject) -> None:
        self.data = data

    def choice(self, options):
        return self.data.draw(st.sampled_from(list(options)))

    def integer(self, low: int, high: int) -> int:
        return self.data.draw(st.integers(low, high))

    def real(self, low: float, high: float) -> float:
        return self.data.draw(st.floats(low, high, allow_nan=False, allow_infinity=False))


def _check(kind: str, data: st.DataObject) -> None:
    case = GENERATORS[kind](HypothesisChooser(data))
    with tempfile.TemporaryDirectory(prefix="elopt-contract-") as tmp:
        where = Path(tmp)
        outcome = run_in_process(case.materialise(where))
        cls, detail = classify(case, where, outcome, TIME_BOUND_S)
    assert cls in ("ok", "refused"), f"{kind}: {case.description}: {cls}: {detail}"


def _settings(examples: int):
    return settings(
        max_examples=examples,
        deadline=None,
        derandomize=True,
        database=None,
        suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large],
    )


@_settings(25)
@given(st.data())
def test_careless_edits_of_a_solve_config_keep_the_contract(data):
    _check("solve-mutation", data)


@_settings(25)
@given(st.data())
def test_config_files_damaged_on_disk_keep_the_contract(data):
    _check("damaged-bytes", data)


@_settings(10)
@given(st.data())
def test_damaged_mesh_files_keep_the_contract(data):
    _check("damaged-mesh", data)


@_settings(6)
@given(st.data())
def test_valid_designs_at_their_limits_solve(data):
    _check("valid-design", data)


@pytest.mark.slow
@_settings(5)
@given(st.data())
def test_careless_edits_of_a_study_config_keep_the_contract(data):
    _check("study-mutation", data)

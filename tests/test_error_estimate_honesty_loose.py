"""The honesty checks of tests/test_error_estimate_honesty.py on capacitance-only solves at
loose requests (the coarse mesh rule, ``solve.CONDUCTOR_COARSE_RULE``), which stop at fewer levels than
the solves with a peak request of tests/test_error_estimate_honesty_coarse.py.

Every published axisymmetric case (tests/published_cases.py, references in docs/references.md)
is solved at 1e-4 with no peak request, as a study trial without a peak-accuracy request is,
and the refinement loop is replayed at requests from 1e-3 to 1e-4 over those levels; the
same assertions as the main honesty test then run on the capacitance records.
"""

from __future__ import annotations

import pytest
import test_error_estimate_honesty as honesty
from published_cases import cases_for

from elopt.physics.bem_axi.solve import COARSE_REQUEST, solve_axisymmetric
from elopt.physics.refinement import SolveOptions

#: Requests replayed on the levels of one solve at the tightest.
REQUESTS = (1e-3, 7e-4, 5e-4, 3e-4, 2e-4, 1.5e-4, 1.2e-4, COARSE_REQUEST)


def loose_records(cases, requests) -> list:
    """(name, request, true error of C_00, estimate, run) per case and request: one solve at
    the tightest request, replayed at each."""
    rows = []
    for case in cases:
        sol = solve_axisymmetric(case.layout("axi"), rel_accuracy=min(requests))
        solved = honesty._Solved(sol.levels, sol.convergence, sol.layout.estimate_indices)
        for req in requests:
            run = honesty._replay(solved, SolveOptions(rel_accuracy=req))
            true = abs(run.levels[-1].capacitance_F[0, 0] / case.capacitance_F - 1)
            rows.append((f"axi {case.name}", req, true, run.estimate.capacitance, run))
    return rows


@pytest.fixture(scope="module")
def records():
    return {"C": loose_records(cases_for("axi"), REQUESTS)}


@pytest.mark.slow
def test_true_error_is_within_the_estimate_in_95_percent_and_never_above_3x(records):
    honesty.test_true_error_is_within_the_estimate_in_95_percent_and_never_above_3x(records, "C")


@pytest.mark.slow
def test_the_solve_stops_at_the_first_level_that_meets_the_request(records):
    honesty.test_the_solve_stops_at_the_first_level_that_meets_the_request(records, "C")

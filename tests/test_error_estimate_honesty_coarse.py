"""The honesty checks of tests/test_error_estimate_honesty.py on the axisymmetric coarse mesh
rule, which loose requests (1e-4 and above, up to 4 nodes per panel) mesh with.

Every published axisymmetric case (tests/published_cases.py, references in docs/references.md)
is solved at 1e-4 for C and the peak field, and the refinement loop is replayed at requests from
1e-3 to 1e-4 over those levels exactly as in the main honesty test (whose own solves, at 1e-5,
mesh with the ratio-2 rule); the same assertions then run on these records.
"""

from __future__ import annotations

import pytest
import test_error_estimate_honesty as honesty

from elopt.physics.bem_axi.solve import COARSE_REQUEST

#: Requests replayed on the levels of one solve at the tightest (enough of them to give the
#: main test's minimum numbers of records and of solves with three or more levels).
REQUESTS = (1e-3, 7e-4, 5e-4, 3e-4, 2e-4, 1.5e-4, 1.2e-4, COARSE_REQUEST)


@pytest.fixture(scope="module")
def records():
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(honesty, "AXI_REQUESTS", (REQUESTS,))
        cap, peak = honesty._records("axi")
    return {"C": cap, "peak": peak}


@pytest.mark.slow
@pytest.mark.parametrize("quantity", ["C", "peak"])
def test_true_error_is_within_the_estimate_in_95_percent_and_never_above_3x(records, quantity):
    honesty.test_true_error_is_within_the_estimate_in_95_percent_and_never_above_3x(
        records, quantity
    )


@pytest.mark.slow
@pytest.mark.parametrize("quantity", ["C", "peak"])
def test_the_solve_stops_at_the_first_level_that_meets_the_request(records, quantity):
    # With mapped corner panels (bem_axi.mesh.KIND_MAPPED) every published case's C meets
    # 1e-4 at two levels (measured: the disks 5.7e-8 - 3.6e-7 off), so none of the C records
    # has the three levels this check needs; the peak records still do.
    honesty.test_the_solve_stops_at_the_first_level_that_meets_the_request(
        records, quantity, min_checked=5 if quantity == "peak" else 0
    )

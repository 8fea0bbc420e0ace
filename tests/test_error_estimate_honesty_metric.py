"""The error estimate of a metric that combines a few capacitance entries is honest.

A mutual capacitance such as -(C_10 + C_12) can be a small difference of large entries, so
its relative error can exceed the matrix estimate (entries scaled by sqrt(C_ii C_jj)).
``refinement.combination_estimate`` estimates it from how the combination itself changes from
level to level; the coplanar family reports it as ``sense_capacitance_rel_error_estimate``.
"""

from __future__ import annotations

import pytest
from test_bem2d_published import coplanar_waveguide
from test_planar_sensitivity_sign import demo_params, mutual

from elopt.physics.bem2d import solve_2d
from elopt.physics.electrodes.coplanar import Coplanar, strips_layout
from elopt.physics.layout import EPS0_F_PER_M
from elopt.physics.refinement import combination_estimate

REQUESTS = (1e-2, 3e-3, 1e-3, 3e-4, 1e-4)


def _centre_to_grounds(c) -> float:
    return -float(c[0, 1] + c[0, 2])


@pytest.mark.parametrize("request_", REQUESTS)
def test_coplanar_waveguide_mutual_is_within_its_own_estimate(request_):
    # docs/references.md item 18 (Wen 1969): C' = 2 eps0 (eps_r + 1) K(k)/K(k'), as in
    # tests/test_bem2d_published.py: its grounds are finite, which leaves the solved value
    # below the formula by less than 1.5e-4 (measured there, about 8e-5), so the true error
    # is judged against the estimate plus that bound. Without a back plane the mutual
    # capacitance is C_00 itself (measured: its estimate equals the matrix estimate).
    lay, exact_over_eps0 = coplanar_waveguide()
    sol = solve_2d(lay, rel_accuracy=request_)
    exact = exact_over_eps0 * EPS0_F_PER_M
    true = abs(_centre_to_grounds(sol.capacitance_matrix_F) / exact - 1.0)
    finite_grounds = 1.5e-4
    est = combination_estimate(sol.levels, sol.convergence, _centre_to_grounds)
    assert true <= est + finite_grounds


@pytest.mark.slow
@pytest.mark.parametrize("eps_r", [1.0, 80.0])
def test_tank_mutual_is_within_its_own_estimate_where_the_matrix_estimate_is_not(eps_r):
    # The tank-level demo's mutual capacitance -(C_10 + C_12) against the solver's own solve
    # at 1e-7 (no published value exists for this stack; as in
    # tests/test_bem2d_high_contrast.py). Measured: at 1e-3 the mutual is 1.1e-3 (eps_r 1)
    # and 1.5e-3 (eps_r 80) off while the matrix estimate is 5.6e-4; its own estimate
    # 1.9e-3 / 2.4e-3.
    p = demo_params()
    tight = mutual(solve_2d(strips_layout(p, eps_r), rel_accuracy=1e-7).capacitance_matrix_F)
    above_matrix = 0
    for request_ in REQUESTS:
        sol = solve_2d(strips_layout(p, eps_r), rel_accuracy=request_)
        true = abs(mutual(sol.capacitance_matrix_F) / tight - 1.0)
        assert true <= combination_estimate(sol.levels, sol.convergence, mutual), request_
        above_matrix += true > sol.rel_error_estimate
    assert above_matrix >= 3


def test_the_coplanar_family_reports_its_sense_capacitance_estimate():
    p = demo_params()
    ev = Coplanar().evaluate(p, eps_r=80.0, rel_accuracy=1e-3)
    sol = ev.solution
    est = ev.extra["sense_capacitance_rel_error_estimate"]
    assert est == combination_estimate(sol.levels, sol.convergence, mutual)
    assert est > sol.rel_error_estimate

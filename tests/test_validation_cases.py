"""The references ``elopt check`` compares with: each computed reference is itself checked."""

from __future__ import annotations

import math

import pytest

from elopt.physics.validation import (
    CheckResult,
    kirchhoff_disk_pair_capacitance,
    love_disk_pair_capacitance,
    sphere_above_plane_series,
)


def test_love_nystrom_is_converged_and_has_the_right_limits():
    # Converged in the node count at the spacings the check uses.
    for k in (1.0, 0.1):
        assert love_disk_pair_capacitance(k, 200) == pytest.approx(
            love_disk_pair_capacitance(k, 400), rel=1e-11
        )
    # Far apart, each disk is an isolated disk of capacitance 8 eps0 R (Landau & Lifshitz
    # sec. 4, docs/references.md item 2) and the pair is the two in series: 4 eps0 R.
    assert love_disk_pair_capacitance(1e4, 100) == pytest.approx(4.0, rel=1e-3)
    # Close together, Love and Kirchhoff's series agree to within Kirchhoff's last term.
    for k in (0.05, 0.1):
        kirchhoff, last = kirchhoff_disk_pair_capacitance(k)
        assert abs(kirchhoff / love_disk_pair_capacitance(k) - 1) < last / kirchhoff


def test_sphere_above_plane_series_limits():
    # Far from the plane the image series tends to the isolated sphere, C = 4 pi eps0 R
    # (docs/references.md items 1 and 6); the first correction is +R/(2h).
    h = 100.0
    assert sphere_above_plane_series(h) == pytest.approx(1 + 1 / (2 * h), rel=1e-4)
    # The vectorised sum equals a plain compensated sum of the same series.
    alpha = math.acosh(2.0)
    direct = math.sinh(alpha) * math.fsum(1 / math.sinh(n * alpha) for n in range(1, 200))
    assert sphere_above_plane_series(2.0) == pytest.approx(direct, rel=1e-14)


def test_check_result_pass_and_fail():
    assert CheckResult("c", "q", "1", 1.0005, 1.0, 1e-3, "s").passed
    assert not CheckResult("c", "q", "1", 1.002, 1.0, 1e-3, "s").passed

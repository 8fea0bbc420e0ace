"""Test-only family whose solve kills its own process (to test worker-death handling)."""

from __future__ import annotations

import os
import signal

from study_support.analytic_family import AnalyticFamily


class DyingFamily(AnalyticFamily):
    name = "dying_fixture"

    def solve(self, layout, *, solve_options, options):
        if layout.params.width_mm > 5:
            os.kill(os.getpid(), signal.SIGKILL)
        return super().solve(layout, solve_options=solve_options, options=options)


FAMILY = DyingFamily()

"""Test-only family whose evaluate kills its own process (to test worker-death handling)."""

from __future__ import annotations

import os
import signal

from study_support.analytic_family import AnalyticFamily


class DyingFamily(AnalyticFamily):
    name = "dying_fixture"

    def evaluate(self, params, *, rel_accuracy: float = 1e-4, eps_r: float = 1.0):
        if params.width_mm > 5:
            os.kill(os.getpid(), signal.SIGKILL)
        return super().evaluate(params, rel_accuracy=rel_accuracy, eps_r=eps_r)


FAMILY = DyingFamily()

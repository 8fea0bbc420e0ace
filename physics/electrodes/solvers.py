"""The solvers a family can hand its layout to, called the same way from every family.

One place adapts the families to the solvers' options (requested accuracy, refinement
limit) and turns a mesh that fails its checks into the family's :class:`ElectrodeError`.
"""

from __future__ import annotations

from typing import Any

from elopt.physics.bem3d import solve_3d
from elopt.physics.bem_axi.solve import solve_axisymmetric
from elopt.physics.errors import ElectrodeError, GeometryError
from elopt.physics.layout import Layout
from elopt.physics.solution import ChargeSolution


def solve_profiles(layout: Layout, *, rel_accuracy: float) -> ChargeSolution:
    """Bodies of revolution (every shape a generating curve): the axisymmetric solver."""
    return solve_axisymmetric(layout, rel_accuracy=rel_accuracy)


def solve_panels(
    family: str, layout: Layout, *, rel_accuracy: float, max_level: int
) -> ChargeSolution:
    """3-D surfaces: the panel solver, refining up to ``max_level`` (not strict: the
    solution says whether the accuracy was met)."""
    try:
        return solve_3d(layout, rel_accuracy=rel_accuracy, max_level=max_level, strict=False)
    except GeometryError as exc:
        raise ElectrodeError(f"{family}: {exc}") from None


class SolvedByProfiles:
    """Mixin for families whose layouts are bodies of revolution (before ElectrodeFamily)."""

    def solve(self, layout: Layout, *, rel_accuracy: float, options: Any) -> ChargeSolution:
        return solve_profiles(layout, rel_accuracy=rel_accuracy)


class SolvedByPanels:
    """Mixin for families of 3-D surfaces whose Options carry ``max_level``."""

    name: str

    def solve(self, layout: Layout, *, rel_accuracy: float, options: Any) -> ChargeSolution:
        return solve_panels(
            self.name, layout, rel_accuracy=rel_accuracy, max_level=options.max_level
        )

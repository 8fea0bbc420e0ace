"""The solvers a family can hand its layout to, called the same way from every family.

Each takes the solver contract's :class:`~elopt.physics.refinement.SolveOptions` (requested
accuracy, refinement limits, strictness) from the pipeline; a family whose options set a
refinement limit of its own applies it here. A mesh that fails its checks becomes the
family's :class:`ElectrodeError`. A family takes its ``solve`` from one of the mixins.
"""

from __future__ import annotations

import dataclasses
from typing import Any

from elopt.physics.bem3d import solve_3d
from elopt.physics.bem_axi.solve import solve_axisymmetric
from elopt.physics.errors import ElectrodeError, GeometryError
from elopt.physics.layout import Layout
from elopt.physics.refinement import SolveOptions
from elopt.physics.solution import ChargeSolution


def solve_profiles(layout: Layout, solve_options: SolveOptions) -> ChargeSolution:
    """Bodies of revolution (every shape a generating curve): the axisymmetric solver."""
    return solve_axisymmetric(layout, solve_options)


def solve_panels(family: str, layout: Layout, solve_options: SolveOptions) -> ChargeSolution:
    """3-D surfaces: the panel solver."""
    try:
        return solve_3d(layout, solve_options)
    except GeometryError as exc:
        raise ElectrodeError(f"{family}: {exc}") from None


class SolvedByProfiles:
    """Mixin for families whose layouts are bodies of revolution (before ElectrodeFamily)."""

    def solve(self, layout: Layout, *, solve_options: SolveOptions, options: Any) -> ChargeSolution:
        return solve_profiles(layout, solve_options)


class SolvedByPanels:
    """Mixin for families of 3-D surfaces whose Options carry ``max_level`` (the finest
    refinement level: each halves the panel size, so it bounds the cost of a trial)."""

    name: str

    def solve(self, layout: Layout, *, solve_options: SolveOptions, options: Any) -> ChargeSolution:
        limited = dataclasses.replace(solve_options, max_level=options.max_level)
        return solve_panels(self.name, layout, limited)

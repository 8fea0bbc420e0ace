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
from elopt.physics.bem3d.surfaces import MESH_MAX_PANELS
from elopt.physics.bem_axi.mesh import level_zero_unknowns
from elopt.physics.bem_axi.solve import default_order, mesh_rule, solve_axisymmetric
from elopt.physics.errors import ElectrodeError, GeometryError
from elopt.physics.layout import Layout
from elopt.physics.refinement import SolveOptions
from elopt.physics.solution import ChargeSolution

#: Most unknowns the coarsest axisymmetric mesh of one solve may have. Each refinement
#: doubles them and the error estimate needs level 1 and usually level 2: above 2,000, that
#: is 8,000 unknowns, a dense solve of a minute or more, once per companion design too
#: (measured: 1,608 level-0 unknowns took 39 s at rel_accuracy 1e-2 with three linearity
#: standoffs on a loaded 2-core machine).
MAX_COARSE_UNKNOWNS = 2_000


#: Most panels a 3-D solve may have at the level its error estimate needs (level 1: levels 0
#: and 1 are always solved): the 3-D solver's limit, a quarter of what one surface may be
#: meshed with (:data:`~elopt.physics.bem3d.surfaces.MESH_MAX_PANELS`).
MAX_SOLVE_PANELS = MESH_MAX_PANELS // 4
ESTIMATE_LEVEL = 1


def estimated_panels(layout: Layout, level: int = ESTIMATE_LEVEL) -> dict[str, float]:
    """Panels of each conductor and dielectric body of a 3-D layout at ``level`` (name ->
    count), counted without meshing."""
    shapes = [*layout.conductors, *layout.regions]
    return {c.name: float(c.shape.estimated_panels(level)) for c in shapes}


def refuse_too_many_panels(family: str, counts: dict[str, float], cause: str) -> None:
    """Raise an ElectrodeError naming ``cause`` (the parameter or file responsible) when the
    panels in ``counts`` (from :func:`estimated_panels`) exceed :data:`MAX_SOLVE_PANELS`."""
    total = sum(counts.values())
    if total > MAX_SOLVE_PANELS:
        raise ElectrodeError(
            f"{family}: {cause}: the 3-D mesh would have about {total:.3g} panels at refinement "
            f"level {ESTIMATE_LEVEL}, more than the solver's {MAX_SOLVE_PANELS:.3g}"
        )


def check_coarse_mesh(family: str, layout: Layout, solve_options: SolveOptions) -> None:
    """Refuse, before any solve, a homogeneous body-of-revolution layout whose level-0 mesh
    passes :data:`MAX_COARSE_UNKNOWNS`. The mesh is the solve's own (its order and its
    conductors-only rule), so that its grading, cached per layout and rule, is the solve's too
    (with another rule a trial paid a second grading: 0.8 ms of a 4.5 ms guarded-probe solve
    at 1e-4, measured 3 Dec 2026); it is counted from those panels, not assembled."""
    if not layout.homogeneous:
        return
    tightest = min(solve_options.rel_accuracy, solve_options.peak_rel_accuracy or 1.0)
    order = solve_options.order or default_order(tightest)
    n0 = level_zero_unknowns(layout, order, mesh_rule(order, tightest, conductors_only=True))
    if n0 > MAX_COARSE_UNKNOWNS:
        raise ElectrodeError(
            f"{family}: the coarsest mesh of this design already has {n0} unknowns, more than "
            f"{MAX_COARSE_UNKNOWNS} (each refinement doubles them): a clearance such as a gap "
            "or the standoff is far smaller than the electrodes; widen it or shrink them"
        )


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

    name: str

    def solve(self, layout: Layout, *, solve_options: SolveOptions, options: Any) -> ChargeSolution:
        check_coarse_mesh(self.name, layout, solve_options)
        return solve_profiles(layout, solve_options)


class SolvedByPanels:
    """Mixin for families of 3-D surfaces whose Options carry ``max_level`` (the finest
    refinement level: each halves the panel size, so it bounds the cost of a trial)."""

    name: str

    def solve(self, layout: Layout, *, solve_options: SolveOptions, options: Any) -> ChargeSolution:
        limited = dataclasses.replace(solve_options, max_level=options.max_level)
        return solve_panels(self.name, layout, limited)

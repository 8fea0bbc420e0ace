"""What an axisymmetric family's evaluation will cost, estimated before any solve.

Every solve refines from level 0, doubling the unknowns per level; the error estimate needs
level 1 and usually level 2, and a family may solve several designs per evaluation (the
linearity standoffs). The level-0 mesh is cheap to build and tells the cost: above
:data:`MAX_COARSE_UNKNOWNS`, level 1 passes 4,000 unknowns and level 2 8,000, dense solves
of a minute and more each (measured: a guarded disk with 1,608 level-0 unknowns took 39 s
at rel_accuracy 1e-2 with three linearity standoffs on a loaded 2-core machine), so the
evaluation is refused with the numbers and the parameter responsible.
"""

from __future__ import annotations

from elopt.physics.bem_axi.mesh import build_mesh
from elopt.physics.bem_axi.solve import default_order
from elopt.physics.errors import ElectrodeError
from elopt.physics.layout import Layout

#: Most unknowns of the coarsest mesh of one axisymmetric solve.
MAX_COARSE_UNKNOWNS = 2_000


def check_coarse_mesh(
    layout: Layout, rel_accuracy: float, family: str, culprit: str, remedy: str
) -> None:
    """Refuse ``layout`` when its level-0 mesh has more than :data:`MAX_COARSE_UNKNOWNS`.

    ``culprit`` names the parameter that forces the fine mesh (with its value and the size
    it is small against), ``remedy`` says what to change; both go into the one-line error.
    """
    n0 = build_mesh(layout, 0, default_order(rel_accuracy)).n_nodes
    if n0 > MAX_COARSE_UNKNOWNS:
        raise ElectrodeError(
            f"{family}: {culprit}; the coarsest mesh resolving it has {n0} unknowns, more than "
            f"{MAX_COARSE_UNKNOWNS} (each refinement doubles them): {remedy}"
        )

"""Error estimate of the dielectric solver where a rim leaves a layer face tangentially.

The uniform-field cell with its specimen sheet filling the gap: each electrode's flat face
rests on the sheet and its rounded rim leaves the sheet tangentially, leaving a wedge of air
that thins to nothing at the rim. At high sheet permittivity the field in that wedge tends to
eps_r times the field in the sheet (normal D continuous; common practice, no source), so the
charge there varies on ever smaller scales towards the contact. The check is the refinement
loop's own contract (physics/refinement.py): the true error is at or below the estimate.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from test_uniform_field_specimen import CELL

from elopt.physics.bem_axi.dielectric_solve import (
    dielectric_model,
    layer_face_junctions,
    solve_dielectric,
)
from elopt.physics.electrodes.uniform_field import UniformField

FAMILY = UniformField()
#: The cell of test_uniform_field_specimen with its sheet filling the gap.
FILLED = dataclasses.replace(CELL, specimen_um=1000.0)


def _layout(eps_r: float):
    return FAMILY.build(dataclasses.replace(FILLED, specimen_eps_r=eps_r))


def test_the_rim_contact_with_the_sheet_is_graded():
    layout = _layout(1e4)
    model = dielectric_model(layout)
    points = layer_face_junctions(layout, model.size)
    # the flat face ends (r = R_f) on the sheet's face z = h / 2
    assert points == pytest.approx(np.array([[10e-3, 0.5e-3]]), abs=1e-12)


@pytest.mark.slow
@pytest.mark.parametrize("eps_r", [80.0, 1e4])
def test_estimate_is_honest_at_high_contrast_against_a_tight_self_reference(eps_r):
    layout = _layout(eps_r)
    # Self-reference: 8 nodes per panel, four levels; its last changes must be far below
    # every error checked against it.
    ref = solve_dielectric(layout, rel_accuracy=1e-12, order=8, max_level=3)
    caps = [lv.capacitance_F[0, 0] for lv in ref.levels]
    assert abs(caps[-1] / caps[-2] - 1) < 1e-9
    exact = caps[-1]
    # A different order converges to the same value (before the fix the two disagreed
    # by 3e-5 at eps_r = 1e4).
    other = solve_dielectric(layout, rel_accuracy=1e-12, order=4, max_level=3)
    assert other.capacitance_matrix_F[0, 0] == pytest.approx(exact, rel=1e-9)
    for request in (1e-4, 1e-6):
        sol = solve_dielectric(layout, rel_accuracy=request)
        true = abs(sol.capacitance_matrix_F[0, 0] / exact - 1)
        assert sol.accuracy_met
        assert true <= sol.rel_error_estimate <= request, (request, true)

"""The 3-D design figure colours each panel with the field the solver reports for it."""

from __future__ import annotations

import math

import numpy as np
import pytest

from elopt.optimizer.report.design_figures import facing_panels, panel_fields
from elopt.physics import geometry as geo
from elopt.physics.bem3d import revolved_layout, solve_3d
from elopt.physics.layout import Layout, driven
from elopt.physics.media import PlanarLayer


def test_panel_colours_use_the_face_media_of_a_sheet_in_an_interface():
    # A disk lying in the interface of air and an eps 4 half-space: its two faces touch
    # different media, so |total sigma| / eps_air is not the field on either face. The figure
    # must show the solver's own face fields, whose largest is the reported peak (common
    # practice, no source: the picture and the table quote one field).
    eps_lo = 4.0
    layers = (PlanarLayer("lower", eps_lo, -math.inf, 0.0),)
    layout = revolved_layout(
        Layout((driven("disk", geo.disk(1.0, 0.0), 1.0),), layers=layers), h_m=0.3
    )
    sol = solve_3d(layout, rel_accuracy=1e-2, max_level=0, strict=False)
    corners, field, owner = panel_fields(sol)
    assert len(field) == len(corners) == len(owner) == sol.panels.n_conductor_panels
    assert field.max() == pytest.approx(sol.peak_field.field_V_per_m, rel=1e-12)
    # the face samples: the larger face field of each panel
    samples = sol.surface_samples("disk")
    assert np.all(field > 0)
    assert field.max() == pytest.approx(samples.field_V_per_m.max(), rel=1e-12)


def test_faces_shown_look_at_the_target_and_leave_the_target_out():
    # Two horizontal triangles (normals down, up) of the electrode and one of the target.
    down = [[0, 0, 1], [0, 1, 1], [1, 0, 1]]  # clockwise seen from above: normal -z
    up = [[0, 0, 2], [1, 0, 2], [0, 1, 2]]
    corners = np.array([down, up, down], dtype=float)
    owner = np.array([0, 0, 1])
    names = ["pad", "target"]
    below = facing_panels(corners, owner, names, {})
    above = facing_panels(corners, owner, names, {"target_side": "above"})
    skip = facing_panels(corners, owner, names, {"target_conductors": ("target",)})
    assert below.tolist() == [True, False, True]
    assert above.tolist() == [False, True, False]
    assert skip.tolist() == [True, False, False]

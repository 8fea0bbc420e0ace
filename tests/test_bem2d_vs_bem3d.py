"""Per-unit-length capacitance of the 2-D solver against the 3-D panel solver."""

from __future__ import annotations

import pytest

from elopt.physics.bem2d import Strip, solve_2d
from elopt.physics.bem3d import RectangleSheetSurface, solve_3d
from elopt.physics.layout import Layout, driven


@pytest.mark.slow
def test_long_plate_over_plane_matches_3d_per_length():
    # A thin plate of width w at height h over the grounded plane, lengths L1 and L2 in 3-D:
    # C(L) = C' L + C_ends, so (C(L2) - C(L1)) / (L2 - L1) is the per-length value with the
    # two end contributions removed (they are the same for both lengths once L >> w, h).
    # The end effect itself, C_ends = C(L1) - C' L1, is stated in the assertion message.
    w, h = 1.0, 0.5
    two_d = solve_2d(
        Layout((driven("plate", Strip(-w / 2, w / 2, h), 1.0),), ground_plane=True),
        rel_accuracy=1e-6,
    ).capacitance_matrix_F[0, 0]

    def c3(length: float) -> float:
        sheet = RectangleSheetSurface((length, w), h, 0.35)
        lay = Layout((driven("plate", sheet, 1.0),), ground_plane=True)
        sol = solve_3d(lay, rel_accuracy=1e-3, max_level=1, strict=False)
        c = sol.capacitance_matrix_extrapolated_F
        return float((c if c is not None else sol.capacitance_matrix_F)[0, 0])

    l1, l2 = 3.0, 6.0
    c1, c2 = c3(l1), c3(l2)
    per_length = (c2 - c1) / (l2 - l1)
    ends = c1 - two_d * l1
    assert per_length == pytest.approx(two_d, rel=1e-2), (
        f"3-D {per_length:.6e} F/m vs 2-D {two_d:.6e} F/m; end effect {ends:.3e} F "
        f"= {ends / (two_d * l1):.1%} of C' L at L = {l1}"
    )

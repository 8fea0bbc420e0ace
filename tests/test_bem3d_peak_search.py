"""The 3-D peak search (:mod:`elopt.physics.bem3d.peak_search`) against the exhaustive one
(every face of every conductor panel sampled) on the board touch key: same peak per conductor
on every level, in layers and in air, with a conductor whose charge changes sign; and the
bound it rests on."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from test_board_pad import COARSE, ROUND

from elopt.physics.bem3d import solve_3d
from elopt.physics.bem3d.faces import face_samples
from elopt.physics.bem3d.peak_search import (
    one_signed_conductors,
    searched_peaks,
    sheet_face_bounds,
)
from elopt.physics.electrodes.board_pad import (
    BoardPad,
    neutral_layers_removed,
)
from elopt.physics.refinement import peaks_per_conductor

#: The small round key of the board tests on a glass-epoxy board under glass (permittivities:
#: common practice, no source), and in air.
LAYERED = replace(ROUND, board_eps_r=4.4, cover_eps_r=7.0)
AIR = ROUND


def exhaustive_peaks(level):
    """Every face of every conductor panel sampled (what the search replaces)."""
    _, sigma = level.excitation(level.layout)
    s = face_samples(level, level.layout, sigma[:, None], applied=True)
    field = np.abs(s["sigma"][:, 0]) / s["eps_F_per_m"]
    singular = level.panels.feature[s["panel"]]
    return peaks_per_conductor(level.layout.names, s["owner"], field, s["points_m"], singular)


def solved(params, pour_V=0.0):
    layout = neutral_layers_removed(BoardPad().build(params, options=COARSE))
    if pour_V:
        pad, pour, target = layout.conductors
        layout = replace(layout, conductors=(pad, replace(pour, potential_V=pour_V), target))
    return solve_3d(layout, rel_accuracy=1e-3, max_level=1, strict=False)


@pytest.fixture(scope="module")
def layered():
    return solved(LAYERED)


def assert_same_peaks(solution):
    for level in solution.levels:
        found, every = searched_peaks(level), exhaustive_peaks(level)
        for a, b in zip(found, every, strict=True):
            assert a.conductor == b.conductor
            assert a.field_V_per_m == pytest.approx(b.field_V_per_m, rel=1e-9)
            # the same panel or its mirror image (mirror-symmetric key: equal fields)
            assert np.allclose(np.abs(a.location_m), np.abs(b.location_m), rtol=0, atol=1e-12)
            assert a.singular == b.singular


@pytest.mark.slow
def test_search_finds_the_exhaustive_peak_in_layers(layered):
    assert_same_peaks(layered)


@pytest.mark.slow
def test_search_finds_the_exhaustive_peak_in_air():
    assert_same_peaks(solved(AIR))


@pytest.mark.slow
def test_search_samples_every_face_of_a_conductor_at_a_middle_potential():
    # The pour at 1 V between the pad's 3.3 V and the grounded finger: its charge may take
    # either sign, so it is not bounded and all its faces are sampled.
    sol = solved(LAYERED, pour_V=1.0)
    volts, _ = sol.levels[-1].excitation(sol.layout)
    assert list(one_signed_conductors(volts, 0.0)) == [True, False, True]
    assert_same_peaks(sol)


def test_one_signed_conductors_are_the_highest_and_lowest():
    assert list(one_signed_conductors(np.array([3.3, 0.0, 0.0]), 0.0)) == [True] * 3
    assert list(one_signed_conductors(np.array([3.3, 1.0, 0.0]), 0.0)) == [True, False, True]
    assert list(one_signed_conductors(np.array([1.0, 2.0]), 0.0)) == [False, True]
    assert list(one_signed_conductors(np.array([-1.0, 2.0]), 0.0)) == [True, True]
    assert not np.any(one_signed_conductors(np.array([3.3, 0.0]), 1e5))


@pytest.mark.slow
def test_face_fields_of_one_signed_sheets_stay_under_their_bound(layered):
    # Weak maximum principle for div(eps grad u) = 0 (Gilbarg & Trudinger, Elliptic Partial
    # Differential Equations of Second Order, Thm. 8.1): the pad at the highest potential and
    # the grounded pour carry free charge of one sign, so each face's share is at most the
    # panel's whole density (the discrete faces keep the sign only nearly: opposite faces up
    # to 1.05e-3 of the largest here, far inside the bound's margin).
    for level in layered.levels:
        _, sigma = level.excitation(level.layout)
        sheet, bound = sheet_face_bounds(level.panels, level.layout, sigma)
        s = face_samples(level, level.layout, sigma[:, None], True, sheet)
        field = np.abs(s["sigma"][:, 0]) / s["eps_F_per_m"]
        at = np.searchsorted(sheet, s["panel"])
        assert np.all(field <= bound[at])

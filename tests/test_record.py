"""The design record: dimension-aware surface samples from both solvers, strict JSON with a
reason for every null, and a JSON round trip."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from study_support.records import assert_same_design, design_for

from elopt.optimizer.record import (
    JsonWarnings,
    design_from_json,
    design_json,
    strict_dumps,
    surface_of,
)
from elopt.physics import geometry as geo
from elopt.physics.bem3d import RevolvedSurface, solve_3d, sphere
from elopt.physics.bem_axi.solve import solve_axisymmetric
from elopt.physics.layout import EPS0_F_PER_M, Layout, driven


def _refuse_constants(name: str) -> None:
    raise AssertionError(f"non-strict JSON token {name}")


def test_3d_samples_are_panels_spread_over_the_body():
    """Before the record, 3-D samples were stored as (r, z) with arc length 0, so every
    sample of a sphere drew at one point. The record keeps (x, y, z), normal and area."""
    r = 0.01
    sol = solve_3d(
        Layout((driven("ball", sphere(r, subdivisions=1), 5.0),)),
        rel_accuracy=1e-2,
        max_level=1,
        strict=False,
    )
    s = surface_of(sol, "ball")
    assert s.kind == "panels" and s.arc_length_m is None
    assert s.points_m.shape == (len(s.sigma_C_per_m2), 3)
    # Centroids of a sphere's panels lie just inside radius r, spread in every direction.
    radius = np.linalg.norm(s.points_m, axis=1)
    assert np.all((radius > 0.95 * r) & (radius <= r * (1 + 1e-12)))
    assert np.ptp(s.points_m, axis=0) == pytest.approx([2 * r] * 3, rel=0.1)
    np.testing.assert_allclose(np.linalg.norm(s.normal, axis=1), 1.0, rtol=1e-12)
    assert np.all(np.einsum("ij,ij->i", s.normal, s.points_m) > 0), "normals point outwards"
    assert set(s.face.tolist()) == {0}
    # Sphere area 4 pi r^2 (geometry); sigma = eps0 V / r (Jackson, Classical
    # Electrodynamics, 3rd ed., 1999; docs/references.md entry 1).
    assert s.area_m2.sum() == pytest.approx(4 * math.pi * r**2, rel=0.05)
    np.testing.assert_allclose(s.sigma_C_per_m2, EPS0_F_PER_M * 5.0 / r, rtol=0.05)
    np.testing.assert_allclose(s.field_V_per_m, np.abs(s.sigma_C_per_m2) / EPS0_F_PER_M)


def test_3d_open_sheet_keeps_its_two_faces_apart():
    r = 0.05
    sol = solve_3d(
        Layout((driven("disk", RevolvedSurface(geo.disk(r), 0.01), 1.0),)),
        rel_accuracy=1e-2,
        max_level=0,
        strict=False,
    )
    s = surface_of(sol, "disk")
    front, back = s.face == 1, s.face == -1
    assert front.sum() == back.sum() > 0 and not (s.face == 0).any()
    np.testing.assert_allclose(s.normal[front], -s.normal[back])
    # Each face covers the disk once: pi r^2 (geometry).
    assert s.area_m2[front].sum() == pytest.approx(math.pi * r**2, rel=1e-2)
    # An isolated thin disk carries half its charge on each face by symmetry (common
    # practice, no source).
    np.testing.assert_allclose(s.sigma_C_per_m2[front], s.sigma_C_per_m2[back], rtol=0.05)


def test_axisymmetric_sheet_faces_share_the_arc_length_and_sum_to_the_total():
    sol = solve_axisymmetric(
        Layout((driven("disk", geo.disk(1e-2, 2e-3), 1.0),), ground_plane=True), rel_accuracy=1e-4
    )
    raw = sol.surface_samples("disk")
    s = surface_of(sol, "disk")
    assert s.kind == "profile" and s.points_m.shape[1] == 2
    k = len(raw["sigma_C_per_m2"])
    assert list(s.face) == [1] * k + [-1] * k, "ordered by face, then along the curve"
    np.testing.assert_array_equal(s.arc_length_m[:k], s.arc_length_m[k:])
    # The two faces of a charged sheet sum to its total density (jump of the normal field
    # across a charged sheet: common practice, no source).
    np.testing.assert_allclose(
        s.sigma_C_per_m2[:k] + s.sigma_C_per_m2[k:], raw["sigma_C_per_m2"], rtol=1e-4
    )


def test_axisymmetric_closed_body_is_one_face():
    sol = solve_axisymmetric(Layout((driven("ball", geo.sphere(1e-2), 1.0),)), rel_accuracy=1e-4)
    s = surface_of(sol, "ball")
    assert set(s.face.tolist()) == {0} and s.kind == "profile"
    assert np.all(np.diff(s.arc_length_m) > 0)
    # Ring areas of a sphere sum to 4 pi r^2 (geometry).
    assert s.area_m2.sum() == pytest.approx(4 * math.pi * 1e-4, rel=1e-6)


def test_json_is_strict_and_every_null_says_why():
    d = design_for(4)
    d.metrics["score_fF"] = math.nan
    d.surface[0].sigma_C_per_m2[3] = math.inf
    warnings = JsonWarnings()
    obj = design_json(d, warnings)
    text = strict_dumps(obj)
    json.loads(text, parse_constant=_refuse_constants)
    assert obj["score_fF"] is None
    assert obj["surface"][0]["sigma_C_per_m2"][3] is None
    assert any(w.startswith("score_fF is undefined (nan): the family could not") for w in warnings)
    assert any("surface[a].sigma_C_per_m2 is undefined (inf)" in w for w in warnings)
    with pytest.raises(ValueError):
        strict_dumps({"x": math.nan})


@pytest.mark.parametrize("number", [0, 4])
def test_json_round_trip(number):
    d = design_for(number)
    back = design_from_json(json.loads(strict_dumps(design_json(d, JsonWarnings()))))
    assert_same_design(back, d)

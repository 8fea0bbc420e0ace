"""The design record: both solvers' surface samples survive the study file, strict JSON with
a reason for every null, and a JSON round trip."""

from __future__ import annotations

import dataclasses
import json
import math

import numpy as np
import pytest
from study_support.records import assert_same_design, design_for, record_for, small_header

from elopt.optimizer.record import (
    ConductorRecord,
    JsonWarnings,
    design_from_json,
    design_json,
    finite_or_none,
    strict_dumps,
)
from elopt.optimizer.store import StudyWriter, read_design
from elopt.physics import geometry as geo
from elopt.physics.bem3d import solve_3d, sphere
from elopt.physics.bem_axi.solve import solve_axisymmetric
from elopt.physics.layout import EPS0_F_PER_M, Layout, driven


def _refuse_constants(name: str) -> None:
    raise AssertionError(f"non-strict JSON token {name}")


def _through_a_study(tmp_path, surface) -> tuple:
    """Store a design with these samples in a study file and read the record back."""
    base = design_for(0)
    names = tuple(s.conductor for s in surface)
    design = dataclasses.replace(
        base,
        conductors=tuple(ConductorRecord(n, 1.0, None) for n in names),
        capacitance_matrix_F=np.eye(len(names)),
        charges_C=np.ones(len(names)),
        potentials_V=np.ones(len(names)),
        peak=dataclasses.replace(
            base.peak, conductor=names[0], location_m=(0.0,) * surface[0].points_m.shape[1]
        ),
        surface=tuple(surface),
    )
    rec = record_for(0)
    rec.design = design
    path = tmp_path / "s.h5"
    with StudyWriter.create(path, small_header()) as w:
        w.append(rec)
    return read_design(path, 0).surface


def test_3d_samples_keep_their_place_in_the_study_file(tmp_path):
    """Format 1 stored 3-D samples as (r, z) with arc length 0, so every sample of a sphere
    drew at one point. The record keeps (x, y, z), normal and area through the file."""
    r = 0.01
    sol = solve_3d(
        Layout((driven("ball", sphere(r, subdivisions=1), 5.0),)),
        rel_accuracy=1e-2,
        max_level=1,
        strict=False,
    )
    (s,) = _through_a_study(tmp_path, [sol.surface_samples("ball")])
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


def test_sheet_faces_stay_apart_in_the_study_file(tmp_path):
    sol = solve_axisymmetric(
        Layout((driven("disk", geo.disk(1e-2, 2e-3), 1.0),), ground_plane=True), rel_accuracy=1e-4
    )
    given = sol.surface_samples("disk")
    (s,) = _through_a_study(tmp_path, [given])
    assert s.kind == "profile" and s.points_m.shape[1] == 2
    for name in ("face", "points_m", "normal", "arc_length_m", "sigma_C_per_m2", "area_m2"):
        np.testing.assert_array_equal(getattr(s, name), getattr(given, name), err_msg=name)
    k = len(s.face) // 2
    assert list(s.face) == [1] * k + [-1] * k, "ordered by face, then along the curve"
    np.testing.assert_array_equal(s.arc_length_m[:k], s.arc_length_m[k:])


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


def test_an_undefined_value_is_reported_once_with_the_first_reason():
    warnings = JsonWarnings(["score_fF is undefined (null): no specimen in the cell"])
    assert finite_or_none(math.nan, "score_fF", warnings, "generic reason") is None
    assert finite_or_none(math.nan, "other", warnings, "generic reason") is None
    assert warnings == [
        "score_fF is undefined (null): no specimen in the cell",
        "other is undefined (nan): generic reason; written as null",
    ]


@pytest.mark.parametrize("number", [0, 1, 4])
def test_json_round_trip(number):
    d = design_for(number)
    back = design_from_json(json.loads(strict_dumps(design_json(d, JsonWarnings()))))
    assert_same_design(back, d)


def test_the_record_says_which_entries_the_estimate_covers():
    # A record written before the covered entries were recorded covers every conductor and
    # its whole-matrix estimate is its estimate.
    old = design_json(design_for(0), JsonWarnings())
    for key in ("relative_error_estimate_covers", "matrix_relative_error_estimate"):
        del old[key]
    back = design_from_json(old)
    assert back.estimate_covers == ("a", "b")
    assert back.matrix_estimate == back.relative_error_estimate
    restricted = design_json(design_for(1), JsonWarnings())
    assert restricted["relative_error_estimate_covers"] == ["a"]
    assert restricted["matrix_relative_error_estimate"] == pytest.approx(6e-4)

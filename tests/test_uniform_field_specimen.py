"""Uniform-field pair with a specimen sheet in the gap: placement, published limits, bad input."""

from __future__ import annotations

import dataclasses

import pytest

from elopt.physics.electrodes.uniform_field import UniformField, UniformFieldParams
from elopt.physics.errors import ElectrodeError

FAMILY = UniformField()
# Flat faces 10 gaps in radius: the centre of the gap is far from the rims.
CELL = UniformFieldParams(
    gap_mm=1.0,
    flat_radius_mm=10.0,
    blend_length_mm=1.0,
    edge_radius_mm=1.0,
    back_thickness_mm=3.0,
    drive_V=1.0,
)
MM = 1e-3


def _filled(eps_r: float) -> UniformFieldParams:
    return dataclasses.replace(CELL, specimen_um=1000.0, specimen_eps_r=eps_r)


def test_specimen_is_a_layer_centred_on_the_mid_plane():
    layout = FAMILY.build(dataclasses.replace(CELL, specimen_um=400.0, specimen_eps_r=3.0))
    (layer,) = layout.layers
    # Mirror pair: the solver holds the upper half, the sheet's half above the mid-plane.
    assert (layer.z_bottom_m, layer.eps_r) == (0.0, 3.0)
    assert layer.z_top_m == pytest.approx(200e-6, rel=1e-12)
    assert FAMILY.build(CELL).layers == ()


def test_no_specimen_reports_no_inferred_permittivity():
    ev = FAMILY.evaluate(CELL, rel_accuracy=1e-4)
    m = ev.metrics
    assert m["specimen_eps_r_inferred"] != m["specimen_eps_r_inferred"]  # nan
    assert m["specimen_eps_r_error_pct"] != m["specimen_eps_r_error_pct"]
    # ... and says why, so a user reads "no specimen", not "could not define it"
    notes = ev.extra["metric_notes"]
    assert "no specimen" in notes["specimen_eps_r_inferred"]
    assert "no specimen" in notes["specimen_eps_r_error_pct"]


def test_inferred_permittivity_tends_to_the_true_one_for_a_very_permittive_filling_specimen():
    # docs/references.md item 8 (Amey & Hamburger, Proc. ASTM 49, 1079 (1949), as used by
    # ASTM D150 / D257; formula from memory), settled there: the effective-area formula is the
    # limit of an infinitely permittive specimen. Here in its no-guard limit g -> inf (our own
    # step, see inferred_specimen_eps_r). Measured: error 22.9 % (eps_r 4), 4.94 % (100),
    # 1.40 % (1e3), 0.288 % (1e4), 0.0456 % (1e5), 0.0058 % (1e6): it falls towards zero.
    errors = [
        FAMILY.evaluate(_filled(eps), rel_accuracy=1e-5).metrics["specimen_eps_r_error_pct"]
        for eps in (4.0, 100.0, 1e5)
    ]
    assert errors[0] > errors[1] > errors[2] > 0.0
    assert errors[0] > 10.0
    assert errors[2] < 0.1


def test_centre_field_in_a_thin_sheet_follows_the_series_formula():
    # docs/references.md item 16 (large parallel plates, two-layer dielectric; any text):
    # D = V / (d_air / eps0 + d_sheet / (eps0 eps_r)), the limit far inside wide electrodes;
    # the field at the mid-plane is in the sheet, D / (eps0 eps_r).
    for sheet_um, eps_r in ((500.0, 4.0), (200.0, 80.0)):
        p = dataclasses.replace(CELL, specimen_um=sheet_um, specimen_eps_r=eps_r)
        m = FAMILY.evaluate(p, rel_accuracy=1e-5).metrics
        d_sheet = sheet_um * 1e-6
        d_air = CELL.gap_mm * MM - d_sheet
        expected = CELL.drive_V / (d_air * eps_r + d_sheet)
        assert m["centre_field_V_per_m"] == pytest.approx(expected, rel=2e-4)


@pytest.mark.parametrize(
    ("change", "words"),
    [
        ({"specimen_um": 1500.0}, ["specimen_um = 1500", "gap_mm * 1000 = 1000", "bury"]),
        ({"specimen_eps_r": 0.0}, ["specimen_eps_r = 0", ">= 1"]),
        ({"specimen_eps_r": -2.0}, ["specimen_eps_r = -2", ">= 1"]),
        ({"specimen_um": -1.0}, ["specimen_um = -1", ">= 0"]),
    ],
)
def test_bad_specimen_is_refused_in_one_line_naming_the_parameter(change, words):
    msg = str(
        pytest.raises(ElectrodeError, FAMILY.validate, dataclasses.replace(CELL, **change)).value
    )
    assert msg.startswith("uniform_field: ") and "\n" not in msg
    for w in words:
        assert w in msg

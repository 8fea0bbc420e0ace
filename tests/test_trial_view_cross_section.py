"""`elopt show` on a trial of a cross-section family: the capacitance matrix is per metre
and labelled so, the peak sits at (x, z) not (r, z), and when the comb's peak is on an outer
finger the interior cell's own peak is not passed off as the metric (common practice, no
source: the units follow the solver's per-unit-length definition)."""

from __future__ import annotations

import dataclasses
import io

import numpy as np
from rich.console import Console
from study_support.records import design_for, record_for, small_header

from elopt.optimizer.report.trial_view import render_trial
from elopt.optimizer.store import StudyWriter, read_study, read_trial_arrays
from elopt.physics.electrodes.cross_section import CROSS_SECTION_FAMILIES
from elopt.physics.electrodes.registry import FAMILIES


def test_cross_section_list_matches_the_families_declarations():
    declared = {name for name, fam in FAMILIES.items() if fam.per_unit_length}
    assert declared == set(CROSS_SECTION_FAMILIES)


def _shown(tmp_path, family: str) -> str:
    path = tmp_path / f"{family}.h5"
    header = dataclasses.replace(small_header(), family=family)
    rec = record_for(0)
    design = design_for(0)
    whole_peak = 2.5e6  # the metric: larger than the interior cell's peak of the record
    rec.metrics = np.array([0.0, 0.0, whole_peak])
    rec.constraints = np.array([whole_peak - 3e6])
    rec.design = dataclasses.replace(
        design,
        capacitance_matrix_F=np.array([[113e-12, -113e-12], [-113e-12, 113e-12]]),
        metrics={**design.metrics, "peak_surface_field_V_per_m": whole_peak},
        extra={"period_m": 4.7e-5, "peak_on_outer_fingers": True},
    )
    with StudyWriter.create(path, header) as w:
        w.append(rec)
    console = Console(file=io.StringIO(), record=True, width=200)
    render_trial(console, read_study(path), read_trial_arrays(path, 0), 0)
    return console.export_text()


def test_a_cross_section_trial_is_shown_per_metre(tmp_path):
    text = _shown(tmp_path, "interdigitated")
    assert "capacitance matrix (pF/m)" in text
    assert "113" in text and "1.13e+05" not in text
    assert "at x = " in text and "at r = " not in text
    assert "interior periodic cell" in text
    assert "over the whole comb the peak is 2.5e+06 V/m" in text


def test_a_body_of_revolution_keeps_fF_and_r(tmp_path):
    text = _shown(tmp_path, "guarded_disk")
    assert "capacitance matrix (fF)" in text and "at r = " in text

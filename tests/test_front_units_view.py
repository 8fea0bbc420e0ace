"""The front table and the study page mark pure numbers the one way every table does ('-' or
nothing), never as a unit "1"; text values fixed by the config appear as written
(the fixture fixes drive_V as text only to have one)."""

from __future__ import annotations

import dataclasses
import io
import math

import numpy as np
from rich.console import Console
from study_support.records import record_for, small_header

from elopt.optimizer.report.front_table import FrontView, render_front
from elopt.optimizer.report.html_page import _setup_tables
from elopt.optimizer.store import StudyWriter, read_study


def _study(tmp_path):
    header = dataclasses.replace(
        small_header("[study]\nname = 'fixture'\n[fixed]\ndrive_V = 'round'\n"),
        parameter_units=("mm", "1", "V"),
        metric_units=("mm", "1", "V/m"),
        objective_units=("1", "mm"),
    )
    path = tmp_path / "u.h5"
    with StudyWriter.create(path, header) as w:
        for i in range(12):
            rec = record_for(i)
            if rec.feasible:
                rec.objectives = np.array([math.sin(i) * 10, math.cos(i) * 5])
                rec.metrics[1], rec.metrics[0] = rec.objectives
            w.append(rec)
    return read_study(path)


def test_a_pure_number_objective_has_no_unit_one(tmp_path):
    snap = _study(tmp_path)
    console = Console(file=io.StringIO(), record=True, width=160)
    render_front(console, snap, view=FrontView(top=0))
    text = console.export_text()
    assert "max (1)" not in text and "(1)" not in text
    assert "min (mm)" in text


def test_the_study_page_gives_pure_numbers_no_unit(tmp_path):
    snap = _study(tmp_path)
    page = _setup_tables(snap)
    assert "<td>gap_mm</td><td></td>" in page and "<td>1</td>" not in page
    # A value the config fixed as text is shown as written, not as a number the file lacks.
    assert "fixed at round" in page

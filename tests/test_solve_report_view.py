"""The design table of `elopt solve` as the user reads it: text and yes/no parameters shown as
written, pure numbers without a unit."""

from __future__ import annotations

from pathlib import Path

from rich.console import Console

from elopt.optimizer.config import read_solve_config
from elopt.optimizer.report.solve_report import _design_table

CONFIGS = Path(__file__).resolve().parents[1] / "configs"


def _rows(config: str) -> dict[str, list[str]]:
    console = Console(record=True, width=200, highlight=False, markup=False)
    console.print(_design_table(read_solve_config(CONFIGS / config)))
    rows = {}
    for line in console.export_text().splitlines():
        cells = [c.strip() for c in line.split("│")]
        if len(cells) == 3:
            rows[cells[0]] = cells[1:]
    return rows


def test_text_and_bool_parameters_are_shown_as_written():
    rows = _rows("cooker_hood_touch_key.toml")
    assert rows["pad_shape"] == ["round", ""]
    assert rows["target_kind"] == ["finger", ""]
    assert rows["back_ground"] == ["true", ""]
    assert rows["pad_length_mm"] == ["12", "mm"]


def test_pure_numbers_carry_no_unit():
    rows = _rows("spindle_runout_probe.toml")
    assert rows["spacer_eps_r"][1] == ""
    assert rows["eps_r (medium)"][1] == ""


def test_sense_capacitance_is_described_in_the_family_own_words():
    from elopt.optimizer.report.solve_report import _metrics_table
    from elopt.physics.electrodes.base import Evaluation
    from elopt.physics.electrodes.registry import FAMILIES

    family = FAMILIES["mesh_file"]
    metrics = {m.name: 1.0 for m in family.metrics}
    meaning = "Q / V of the first conductor 'tip' at the drive"
    evaluation = Evaluation(metrics, None, {"sense_capacitance_meaning": meaning})
    console = Console(record=True, width=300, highlight=False, markup=False)
    console.print(_metrics_table(family, evaluation))
    line = next(r for r in console.export_text().splitlines() if "sense_capacitance_fF" in r)
    assert meaning in line and "guard" not in line


def test_a_cross_section_matrix_is_labelled_per_metre():
    from types import SimpleNamespace

    import numpy as np

    from elopt.optimizer.report.solve_report import _capacitance_table

    def title(planar: bool) -> str:
        c = np.array([[207e-12, -10e-12], [-10e-12, 207e-12]])
        sol = SimpleNamespace(
            capacitance_matrix_F=c, layout=SimpleNamespace(names=("a", "b")), planar=planar
        )
        return str(_capacitance_table(SimpleNamespace(solution=sol)).title)

    assert title(True) == "Capacitance matrix (pF/m)"
    assert title(False) == "Capacitance matrix (pF)"


def test_a_refinement_change_reads_as_a_plain_percentage():
    from elopt.optimizer.report.solve_report import _percent

    assert _percent(1.4) == "140%"  # was printed as 1.4e+02%
    assert _percent(0.021) == "2.1%"
    assert _percent(3.4e-5) == "0.0034%"
    assert _percent(1e-7) == "less than 0.001%"

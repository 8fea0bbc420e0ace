"""`elopt families` as the user reads it: each parameter's meaning beside its unit and range,
and pure numbers shown without a unit in every family."""

from __future__ import annotations

from rich.console import Console

from elopt.optimizer.report.family_listing import family_descriptions, render_families


def _listing(name: str) -> str:
    console = Console(record=True, width=200, highlight=False, markup=False)
    render_families(console, family_descriptions(name))
    return console.export_text()


def test_parameters_show_their_meaning():
    text = _listing("board_pad")
    # The choices of a text parameter live only in its meaning.
    line = next(row for row in text.splitlines() if row.startswith("pad_shape "))
    assert "round or rect" in line
    line = next(row for row in text.splitlines() if row.startswith("target_kind "))
    assert "finger or plate" in line


def test_pure_numbers_show_no_unit_in_every_family():
    for family in family_descriptions():
        for row in family.parameters + family.options:
            assert row.unit != "1", (family.name, row.name)
        for name, unit, _sense, _meaning in family.metrics:
            assert unit != "1", (family.name, name)
    boards = {r.name: r for r in family_descriptions("board_pad")[0].parameters}
    assert boards["board_eps_r"].unit == "" and boards["pad_length_mm"].unit == "mm"

"""Text scatter and line plot: markers land where the numbers say."""

from __future__ import annotations

import numpy as np

from elopt.optimizer.report.textplot import Series, line_plot, scatter


def _grid(lines: list[str]) -> list[str]:
    """The plot area: the rows between the y label and the x axis, after the '|'."""
    rows = [line for line in lines if " |" in line]
    return [r.split(" |", 1)[1] for r in rows]


def test_scatter_puts_corner_points_in_corners():
    lines = scatter(
        [Series(np.array([0.0, 10.0]), np.array([0.0, 5.0]), "o", "pts")],
        x_label="x",
        y_label="y",
        width=20,
        height=8,
    )
    g = _grid(lines)
    assert len(g) == 8 and all(len(r) == 20 for r in g)
    assert g[0][19] == "o" and g[7][0] == "o"
    assert sum(r.count("o") for r in g) == 2
    assert lines[-1].strip() == "o pts"
    assert "10" in lines[-3] and "0" in lines[-3]


def test_later_series_draw_over_earlier_and_nan_is_skipped():
    a = Series(np.array([1.0, 2.0, np.nan]), np.array([1.0, 2.0, 3.0]), "x", "a")
    b = Series(np.array([1.0]), np.array([1.0]), "O", "b")
    g = _grid(scatter([a, b], x_label="x", y_label="y", width=10, height=5))
    assert g[4][0] == "O" and g[0][9] == "x"


def test_line_plot_is_continuous_across_columns():
    x = np.linspace(0.0, 1.0, 5)
    g = _grid(
        line_plot([Series(x, x**2, "s", "sq")], x_label="x", y_label="y", width=30, height=10)
    )
    cols = {c for r in g for c, ch in enumerate(r) if ch == "s"}
    assert cols == set(range(30))
    assert g[9][0] == "s" and g[0][29] == "s"


def test_empty_plot_says_so():
    lines = scatter([Series(np.array([]), np.array([]), "o", "none")], x_label="a", y_label="b")
    assert lines == ["(nothing to plot: no finite b vs a)"]

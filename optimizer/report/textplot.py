"""Plots drawn with characters, for terminals and log files: a scatter and a line plot.

Both return a list of text lines (no colour), so they read the same in a terminal, a pager and
a CI log. Axes are linear or logarithmic; values are placed on a ``width`` x ``height``
character grid, later series drawn over earlier ones. Limit lines (a constraint's bound) are
drawn under the points: ``:`` for an x limit, ``~`` for a y limit.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Series:
    """Points (x (N,), y (N,)) drawn with one character ``marker``; ``label`` for the legend."""

    x: np.ndarray
    y: np.ndarray
    marker: str
    label: str


def scatter(
    series: Sequence[Series],
    *,
    x_label: str,
    y_label: str,
    width: int = 60,
    height: int = 16,
    x_log: bool = False,
    y_log: bool = False,
    x_limits: Sequence[float] = (),
    y_limits: Sequence[float] = (),
) -> list[str]:
    """One character per point; where points share a cell the later series wins.

    ``x_log``/``y_log``: logarithmic axis (non-positive values are left out);
    ``x_limits``/``y_limits``: positions of limit lines inside the plotted span.
    """
    axes = _Axes(x_log, y_log, tuple(x_limits), tuple(y_limits))
    return _draw(series, x_label, y_label, width, height, connect=False, axes=axes)


def line_plot(
    series: Sequence[Series],
    *,
    x_label: str,
    y_label: str,
    width: int = 60,
    height: int = 14,
) -> list[str]:
    """Each series sampled at every column of its x span (linear interpolation), so a curve
    reads as a continuous trace of its marker."""
    return _draw(series, x_label, y_label, width, height, connect=True, axes=_Axes())


@dataclass(frozen=True)
class _Axes:
    x_log: bool = False
    y_log: bool = False
    x_limits: tuple[float, ...] = ()
    y_limits: tuple[float, ...] = ()


def _to_axis(v: np.ndarray, log: bool) -> np.ndarray:
    v = np.asarray(v, float)
    if not log:
        return v
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(v > 0, np.log10(np.where(v > 0, v, 1.0)), np.nan)


def _draw(
    series: Sequence[Series],
    x_label: str,
    y_label: str,
    width: int,
    height: int,
    connect: bool,
    axes: _Axes,
) -> list[str]:
    finite = [
        (x[m], y[m], s)
        for s in series
        for x, y in [(_to_axis(s.x, axes.x_log), _to_axis(s.y, axes.y_log))]
        for m in [np.isfinite(x) & np.isfinite(y)]
    ]
    xs = np.concatenate([f[0] for f in finite]) if finite else np.zeros(0)
    ys = np.concatenate([f[1] for f in finite]) if finite else np.zeros(0)
    if xs.size == 0:
        return [f"(nothing to plot: no finite {y_label} vs {x_label})"]
    x_lines = _to_axis(np.asarray(axes.x_limits, float), axes.x_log)
    y_lines = _to_axis(np.asarray(axes.y_limits, float), axes.y_log)
    x_lines, y_lines = x_lines[np.isfinite(x_lines)], y_lines[np.isfinite(y_lines)]
    # The span takes in the limit lines, so a limit far from every point still shows.
    x0, x1 = _span(np.concatenate([xs, x_lines]))
    y0, y1 = _span(np.concatenate([ys, y_lines]))
    grid = [[" "] * width for _ in range(height)]

    def col(x: np.ndarray) -> np.ndarray:
        return np.clip(np.round((x - x0) / (x1 - x0) * (width - 1)), 0, width - 1).astype(int)

    def row(y: np.ndarray) -> np.ndarray:
        return np.clip(np.round((y1 - y) / (y1 - y0) * (height - 1)), 0, height - 1).astype(int)

    for c in col(x_lines):
        for r in range(height):
            grid[r][c] = ":"
    for r in row(y_lines):
        grid[r] = ["~" if ch == " " else ch for ch in grid[r]]
    for x, y, s in finite:
        if connect and len(x) > 1:
            order = np.argsort(x, kind="stable")
            x, y = x[order], y[order]
            c_lo, c_hi = col(np.array([x[0], x[-1]]))
            cx = x0 + (np.arange(c_lo, c_hi + 1) / (width - 1)) * (x1 - x0)
            x, y = cx, np.interp(cx, x, y)
        for c, r in zip(col(x), row(y), strict=True):
            grid[r][c] = s.marker

    y_ticks = {0: y1, height // 2: 0.5 * (y0 + y1), height - 1: y0}
    labels = {r: _fmt(_from_axis(v, axes.y_log)) for r, v in y_ticks.items()}
    pad = max(len(t) for t in labels.values())
    lines = [y_label + (" [log scale]" if axes.y_log else "")]
    for r in range(height):
        lines.append(f"{labels.get(r, ''):>{pad}} |{''.join(grid[r])}")
    lines.append(f"{'':>{pad}} +{'-' * width}")
    left, mid, right = (_fmt(_from_axis(v, axes.x_log)) for v in (x0, 0.5 * (x0 + x1), x1))
    axis = [" "] * (width + 2)
    _place(axis, 0, left)
    _place(axis, (width - len(mid)) // 2, mid)
    _place(axis, width + 1 - len(right), right)
    lines.append(f"{'':>{pad}} {''.join(axis).rstrip()}")
    x_text = x_label + (" [log scale]" if axes.x_log else "")
    lines.append(f"{'':>{pad}}  {x_text:^{width}}".rstrip())
    legend = "   ".join(f"{s.marker} {s.label}" for s in series)
    if len(x_lines) or len(y_lines):
        legend += "   " + " ".join(m for m, v in ((":", x_lines), ("~", y_lines)) if len(v))
        legend += " constraint limit"
    lines.append(f"{'':>{pad}}  {legend}")
    return lines


def _from_axis(v: float, log: bool) -> float:
    return 10.0**v if log else v


def _span(v: np.ndarray) -> tuple[float, float]:
    lo, hi = float(v.min()), float(v.max())
    if hi - lo <= 1e-12 * max(abs(lo), abs(hi), 1e-300):
        d = abs(lo) * 0.05 or 1.0
        return lo - d, hi + d
    return lo, hi


def _place(chars: list[str], start: int, text: str) -> None:
    start = max(0, min(start, len(chars) - len(text)))
    for i, ch in enumerate(text):
        chars[start + i] = ch


def _fmt(v: float) -> str:
    if v == 0 or not math.isfinite(v):
        return f"{v:g}"
    return f"{v:.3g}" if 1e-3 <= abs(v) < 1e5 else f"{v:.2e}"

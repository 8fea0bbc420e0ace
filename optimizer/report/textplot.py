"""Plots drawn with characters, for terminals and log files: a scatter and a line plot.

Both return a list of text lines (no colour), so they read the same in a terminal, a pager and
a CI log. Axes are linear; values are placed on a ``width`` x ``height`` character grid, later
series drawn over earlier ones.
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
) -> list[str]:
    """One character per point; where points share a cell the later series wins."""
    return _draw(series, x_label, y_label, width, height, connect=False)


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
    return _draw(series, x_label, y_label, width, height, connect=True)


def _draw(
    series: Sequence[Series], x_label: str, y_label: str, width: int, height: int, connect: bool
) -> list[str]:
    finite = [
        (np.asarray(s.x, float)[m], np.asarray(s.y, float)[m], s)
        for s in series
        for m in [np.isfinite(np.asarray(s.x, float)) & np.isfinite(np.asarray(s.y, float))]
    ]
    xs = np.concatenate([f[0] for f in finite]) if finite else np.zeros(0)
    ys = np.concatenate([f[1] for f in finite]) if finite else np.zeros(0)
    if xs.size == 0:
        return [f"(nothing to plot: no finite {y_label} vs {x_label})"]
    x0, x1 = _span(xs)
    y0, y1 = _span(ys)
    grid = [[" "] * width for _ in range(height)]

    def col(x: np.ndarray) -> np.ndarray:
        return np.clip(np.round((x - x0) / (x1 - x0) * (width - 1)), 0, width - 1).astype(int)

    def row(y: np.ndarray) -> np.ndarray:
        return np.clip(np.round((y1 - y) / (y1 - y0) * (height - 1)), 0, height - 1).astype(int)

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
    labels = {r: _fmt(v) for r, v in y_ticks.items()}
    pad = max(len(t) for t in labels.values())
    lines = [f"{y_label}"]
    for r in range(height):
        lines.append(f"{labels.get(r, ''):>{pad}} |{''.join(grid[r])}")
    lines.append(f"{'':>{pad}} +{'-' * width}")
    left, mid, right = _fmt(x0), _fmt(0.5 * (x0 + x1)), _fmt(x1)
    axis = [" "] * (width + 2)
    _place(axis, 0, left)
    _place(axis, (width - len(mid)) // 2, mid)
    _place(axis, width + 1 - len(right), right)
    lines.append(f"{'':>{pad}} {''.join(axis).rstrip()}")
    lines.append(f"{'':>{pad}}  {x_label:^{width}}".rstrip())
    legend = "   ".join(f"{s.marker} {s.label}" for s in series)
    lines.append(f"{'':>{pad}}  {legend}")
    return lines


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

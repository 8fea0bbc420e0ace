"""Text picture of an axisymmetric layout's cross-section in the (r, z) half-plane.

Each conductor is filled with its own shade, the plane z = 0 is drawn as a rule, a point
(the peak surface field) is marked, and a left scale gives heights in mm. A character cell
is about twice as tall as it is wide; very flat layouts get their heights stretched (and
say so) so that gaps and faces stay visible. ``mirror`` also draws the mirror image below
the plane (a symmetric electrode pair solved above its mid-plane).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from rich.text import Text

from elopt.physics.geometry import closed_outline, point_in_region
from elopt.physics.layout import Layout

FILLS = ("█", "▓", "▒", "░")
STYLES = ("cyan", "yellow", "magenta", "green")
MARK = "✱"
MARK_STYLE = "bold red"
CELL_ASPECT = 2.0


@dataclass(frozen=True)
class Picture:
    """Lines of the picture, a legend line, and how much heights were stretched (1: true)."""

    lines: tuple[Text, ...]
    legend: Text
    z_stretch: float


def _frame(layout: Layout, mirror: bool) -> tuple[float, float, float]:
    pts = np.concatenate([c.shape.sample(64) for c in layout.conductors])
    r_max = 1.06 * float(pts[:, 0].max())
    z_top = 1.10 * float(pts[:, 1].max())
    z_bottom = -z_top if mirror else 0.0
    return r_max, z_top, z_bottom


def _grid_size(r_span: float, z_span: float, width: int, min_rows: int, max_rows: int):
    """(columns, rows, height stretch): true aspect where it fits, heights stretched up to
    ``min_rows`` or compressed down to x0.5, and the width narrowed beyond that."""
    natural = width * z_span / r_span / CELL_ASPECT
    if natural * 0.5 > max_rows:
        width = max(24, int(round(2.0 * max_rows * CELL_ASPECT * r_span / z_span)))
        natural = width * z_span / r_span / CELL_ASPECT
    rows = int(min(max(round(natural), min_rows), max_rows))
    return width, rows, rows / natural


def section_picture(
    layout: Layout,
    *,
    marker_m: tuple[float, float] | None = None,
    plane_label: str = "grounded plane z = 0",
    mirror: bool = False,
    width: int = 64,
    min_rows: int = 10,
    max_rows: int = 22,
) -> Picture:
    """Draw ``layout`` (bodies of revolution above z = 0); positions in metres."""
    r_max, z_top, z_bottom = _frame(layout, mirror)
    half_rows = max_rows // 2 if mirror else max_rows
    width, rows_above, stretch = _grid_size(
        r_max, z_top, width, min_rows // (2 if mirror else 1), half_rows
    )
    dr, dz = r_max / width, z_top / rows_above
    owner = np.full((rows_above, width), -1)
    centres_r = (np.arange(width) + 0.5) * dr
    centres_z = z_top - (np.arange(rows_above) + 0.5) * dz
    cell_r, cell_z = np.meshgrid(centres_r, centres_z)
    cells = np.stack([cell_r.ravel(), cell_z.ravel()], axis=1)
    for k, c in enumerate(layout.conductors):
        outline = closed_outline(c.shape)
        if outline is not None:
            inside = point_in_region(cells, outline).reshape(owner.shape)
            owner[inside] = k
        # The outline's own samples mark cells too, so thin parts never vanish.
        pts = c.shape.sample(256)
        col = np.clip((pts[:, 0] / dr).astype(int), 0, width - 1)
        row = np.clip(((z_top - pts[:, 1]) / dz).astype(int), 0, rows_above - 1)
        owner[row, col] = k
    mark_cell = None
    if marker_m is not None:
        mark_cell = (
            int(np.clip((z_top - marker_m[1]) / dz, 0, rows_above - 1)),
            int(np.clip(marker_m[0] / dr, 0, width - 1)),
        )
    lines: list[Text] = [Text("  z (mm)", style="dim")]
    for i in range(rows_above):
        label = f"{(z_top - i * dz) * 1e3:7.3g} " if i in (0, rows_above // 2) else " " * 8
        lines.append(
            _row(label, owner[i], mark_cell[1] if mark_cell and mark_cell[0] == i else None)
        )
    plane = Text(f"{0.0:7.3g} ", style="dim")
    plane.append("┷" + "━" * (width - 1), style="bold")
    lines.append(plane)
    if mirror:
        for i in reversed(range(rows_above)):
            label = f"{-(z_top - i * dz) * 1e3:7.3g} " if i == 0 else " " * 8
            lines.append(_row(label, owner[i], None, dim=True))
    scale = Text(" " * 8 + "0", style="dim")
    r_text = f"{r_max * 1e3:.3g} r (mm)"
    scale.append(" " * max(width - len(r_text) - 1, 1) + r_text, style="dim")
    lines.append(scale)
    legend = Text("  ")
    for k, c in enumerate(layout.conductors):
        legend.append(FILLS[k % len(FILLS)] * 2, style=STYLES[k % len(STYLES)])
        drive = f" ({c.potential_V:g} V)" if c.potential_V is not None else ""
        legend.append(f" {c.name}{drive}   ")
    legend.append("\n  ")
    legend.append("━━", style="bold")
    legend.append(f" {plane_label}   ")
    if marker_m is not None:
        legend.append(MARK, style=MARK_STYLE)
        legend.append(" peak surface field")
    if mirror:
        legend.append(
            "\n  below the plane: the mirror electrode at the opposite potential", style="dim"
        )
    if stretch > 1.05:
        legend.append(
            f"\n  heights stretched x{stretch:.2g} so that thin parts stay visible", style="dim"
        )
    elif stretch < 0.95:
        legend.append(f"\n  heights compressed x{stretch:.2g} to fit the screen", style="dim")
    return Picture(lines=tuple(lines), legend=legend, z_stretch=float(stretch))


def _row(label: str, owners: np.ndarray, mark_col: int | None, dim: bool = False) -> Text:
    text = Text(label, style="dim")
    if mark_col == 0:
        text.append(MARK, style=MARK_STYLE)
    else:
        text.append("│", style="dim")
    for j, k in enumerate(owners[1:], start=1):
        if mark_col is not None and j == mark_col:
            text.append(MARK, style=MARK_STYLE)
        elif k < 0:
            text.append(" ")
        else:
            style = STYLES[k % len(STYLES)] + (" dim" if dim else "")
            text.append(FILLS[k % len(FILLS)], style=style)
    return text

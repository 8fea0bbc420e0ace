"""How numbers and names are written in elopt's tables: one short format for every verb."""

from __future__ import annotations

import math

#: Objective direction as a table word.
ARROW = {"maximize": "max", "minimize": "min"}


def short_number(v: float) -> str:
    """Four significant digits; a short exponent (3.384e4) outside [1e-3, 1e5); '-' if not finite."""
    if not math.isfinite(v):
        return "-"
    if 1e3 <= abs(v) < 1e5:
        return f"{v:.0f}"
    if 1e-3 <= abs(v) < 1e3 or v == 0:
        return f"{v:.4g}"
    mantissa, exponent = f"{v:.3e}".split("e")
    return f"{mantissa}e{int(exponent)}"


def wrapped_name(name: str, width: int = 12) -> str:
    """A long snake_case name broken after underscores (it stays exact when read joined)."""
    lines, line = [], ""
    for part in name.split("_"):
        piece = part if not line else "_" + part
        if line and len(line) + len(piece) > width:
            lines.append(line + "_")
            line = part
        else:
            line += piece
    lines.append(line)
    return "\n".join(lines)


def shown_unit(unit: str) -> str:
    """A declared unit as the tables show it: nothing for a pure number (declared "" or "1")."""
    return "" if unit in ("", "1") else unit

"""A minimal ASCII DXF writer (R12 entities LINE and ARC on named layers), drawing in mm.

Only the ENTITIES section is written, which R12-level readers accept; x is the drawing's
horizontal axis, y its vertical one.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class DxfLine:
    layer: str
    start: tuple[float, float]
    end: tuple[float, float]


@dataclass(frozen=True)
class DxfArc:
    """Counter-clockwise from ``start_deg`` to ``end_deg`` about ``center`` (DXF's sense)."""

    layer: str
    center: tuple[float, float]
    radius: float
    start_deg: float
    end_deg: float


def _pairs(code: int, value: str | float) -> str:
    text = value if isinstance(value, str) else f"{value:.9g}"
    return f"{code:>3}\n{text}\n"


def dxf_text(entities: list[DxfLine | DxfArc]) -> str:
    """The DXF file text for ``entities`` (coordinates already in drawing units)."""
    out = [_pairs(0, "SECTION"), _pairs(2, "ENTITIES")]
    for e in entities:
        if isinstance(e, DxfLine):
            out += [_pairs(0, "LINE"), _pairs(8, e.layer)]
            out += [_pairs(10, e.start[0]), _pairs(20, e.start[1]), _pairs(30, 0.0)]
            out += [_pairs(11, e.end[0]), _pairs(21, e.end[1]), _pairs(31, 0.0)]
        else:
            out += [_pairs(0, "ARC"), _pairs(8, e.layer)]
            out += [_pairs(10, e.center[0]), _pairs(20, e.center[1]), _pairs(30, 0.0)]
            out += [_pairs(40, e.radius), _pairs(50, e.start_deg), _pairs(51, e.end_deg)]
    out += [_pairs(0, "ENDSEC"), _pairs(0, "EOF")]
    return "".join(out)

"""What each electrode family takes and gives, read from its own declarations
(:func:`elopt.physics.electrodes.registry.family_listing`): parameters and options with type,
default, unit and allowed range, and the metric registry."""

from __future__ import annotations

import math
from dataclasses import dataclass

from rich.console import Console
from rich.table import Table
from rich.text import Text

from elopt.optimizer.errors import ConfigError
from elopt.optimizer.report.numbers import shown_unit
from elopt.physics.electrodes.base import ParameterSpec


@dataclass(frozen=True)
class FieldRow:
    name: str
    kind: str
    default: str
    unit: str
    allowed: str
    meaning: str


@dataclass(frozen=True)
class FamilyDescription:
    name: str
    summary: str
    parameters: tuple[FieldRow, ...]
    options: tuple[FieldRow, ...]
    metrics: tuple[tuple[str, str, str, str], ...]  # name, unit, sense, meaning


def _rows(specs: tuple[ParameterSpec, ...]) -> tuple[FieldRow, ...]:
    """Table rows from the family's declarations (units and ranges live there only)."""
    out = []
    for s in specs:
        if s.required:
            default = "required"
        elif isinstance(s.default, float) and math.isfinite(s.default):
            default = f"{s.default:g}"
        elif isinstance(s.default, (int, str, bool)):
            default = str(s.default)
        else:
            default = "(table)"
        out.append(FieldRow(s.name, s.type_name, default, shown_unit(s.unit), s.allowed, s.meaning))
    return tuple(out)


def family_descriptions(only: str | None = None) -> list[FamilyDescription]:
    from elopt.physics.electrodes.registry import FAMILIES, family_listing

    if only is not None and only not in FAMILIES:
        raise ConfigError(f"family {only!r}: not known; families: {', '.join(sorted(FAMILIES))}")
    return [
        FamilyDescription(
            name=info.name,
            summary=info.summary,
            parameters=_rows(info.parameters),
            options=_rows(info.options),
            metrics=tuple(
                (m.name, shown_unit(m.unit), m.sense, m.description) for m in info.metrics
            ),
        )
        for info in family_listing()
        if only is None or info.name == only
    ]


def _field_table(title: str, rows: tuple[FieldRow, ...]) -> Table:
    t = Table(title=title, title_justify="left", show_edge=False, pad_edge=False)
    t.add_column("name", overflow="fold")
    for col in ("type", "default", "unit", "allowed", "meaning"):
        t.add_column(col)
    for r in rows:
        t.add_row(r.name, r.kind, r.default, r.unit, r.allowed, r.meaning)
    return t


def render_families(console: Console, families: list[FamilyDescription]) -> None:
    for d in families:
        console.rule(Text(d.name, style="bold"), align="left")
        console.print(d.summary)
        console.print(
            _field_table(
                "parameters ([geometry] in solve, [fixed]/[search] in a study)", d.parameters
            )
        )
        if d.options:
            console.print(_field_table("evaluation options ([evaluation])", d.options))
        t = Table(
            title="metrics (objectives and constraints of a study)",
            title_justify="left",
            show_edge=False,
            pad_edge=False,
        )
        t.add_column("name", overflow="fold")
        for col in ("unit", "usually", "meaning"):
            t.add_column(col)
        for name, unit, sense, meaning in d.metrics:
            t.add_row(name, unit, sense, meaning)
        console.print(t)
        console.print()
    console.print(
        "Every config value is checked before a solve; a value outside a family's rules is "
        "refused with a one-line message naming the rule."
    )

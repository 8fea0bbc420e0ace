"""What each electrode family takes and gives, read from its own declarations: the parameter
and option dataclasses (type, default, unit and range from field metadata or the name's unit
suffix) and the metric registry."""

from __future__ import annotations

import dataclasses
import math
import typing
from dataclasses import dataclass

from rich.console import Console
from rich.table import Table
from rich.text import Text

from elopt.optimizer.errors import ConfigError
from elopt.optimizer.report.numbers import unit_from_name
from elopt.optimizer.study.objectives import metric_catalog


@dataclass(frozen=True)
class FieldRow:
    name: str
    kind: str
    default: str
    unit: str
    allowed: str


@dataclass(frozen=True)
class FamilyDescription:
    name: str
    summary: str
    parameters: tuple[FieldRow, ...]
    options: tuple[FieldRow, ...]
    metrics: tuple[tuple[str, str, str, str], ...]  # name, unit, sense, meaning


def _unit(f: dataclasses.Field) -> str:
    if "unit" in f.metadata:
        return str(f.metadata["unit"])
    return unit_from_name(f.name)


def _allowed(f: dataclasses.Field) -> str:
    m = f.metadata
    if "range" in m:
        return str(m["range"])
    low, high = m.get("low", m.get("min")), m.get("high", m.get("max"))
    if low is None and high is None:
        return "see the family's rules"
    lo = "-inf" if low is None else f"{low:g}"
    hi = "inf" if high is None else f"{high:g}"
    return f"[{lo}, {hi}]"


def _rows(cls: type | None) -> tuple[FieldRow, ...]:
    if cls is None:
        return ()
    hints = typing.get_type_hints(cls)
    out = []
    for f in dataclasses.fields(cls):
        if f.default is not dataclasses.MISSING:
            default = (
                f"{f.default:g}"
                if isinstance(f.default, float) and math.isfinite(f.default)
                else str(f.default)
            )
        elif f.default_factory is not dataclasses.MISSING:
            default = "(table)"
        else:
            default = "required"
        kind = getattr(hints[f.name], "__name__", str(hints[f.name]))
        out.append(FieldRow(f.name, kind, default, _unit(f), _allowed(f)))
    return tuple(out)


def family_descriptions(only: str | None = None) -> list[FamilyDescription]:
    from elopt.physics.electrodes.registry import FAMILIES

    if only is not None and only not in FAMILIES:
        raise ConfigError(f"family {only!r}: not known; families: {', '.join(sorted(FAMILIES))}")
    out = []
    for name in sorted(FAMILIES):
        if only is not None and name != only:
            continue
        fam = FAMILIES[name]
        doc = (type(fam).__doc__ or "").strip().splitlines()
        metrics = tuple((m.name, m.unit, m.sense, m.description) for m in metric_catalog(fam))
        out.append(
            FamilyDescription(
                name=name,
                summary=doc[0] if doc else "",
                parameters=_rows(fam.Params),
                options=_rows(getattr(fam, "Options", None)),
                metrics=metrics,
            )
        )
    return out


def _field_table(title: str, rows: tuple[FieldRow, ...]) -> Table:
    t = Table(title=title, title_justify="left", show_edge=False, pad_edge=False)
    for col in ("name", "type", "default", "unit", "allowed"):
        t.add_column(col)
    for r in rows:
        t.add_row(r.name, r.kind, r.default, r.unit, r.allowed)
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
        for col in ("name", "unit", "usually", "meaning"):
            t.add_column(col)
        for name, unit, sense, meaning in d.metrics:
            t.add_row(name, unit, sense, meaning)
        console.print(t)
        console.print()
    console.print(
        "Every config value is checked before a solve; a value outside a family's rules is "
        "refused with a one-line message naming the rule."
    )

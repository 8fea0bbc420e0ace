"""The electrode families elopt knows, by name: the one place a family is registered.

A new family is one module defining an :class:`ElectrodeFamily` subclass plus one line in
:data:`FAMILIES`. :func:`family_listing` describes every registered family (parameters with
units and allowed ranges, evaluation options, metrics) for listings on the CLI or in JSON.
"""

from __future__ import annotations

import dataclasses
import inspect
from dataclasses import dataclass
from typing import Any

from elopt.physics.electrodes.base import ElectrodeFamily, MetricSpec, ParameterSpec
from elopt.physics.electrodes.board_pad import BoardPad
from elopt.physics.electrodes.coplanar import Coplanar
from elopt.physics.electrodes.guarded_disk import GuardedDisk
from elopt.physics.electrodes.guarded_pad import GuardedPad
from elopt.physics.electrodes.interdigitated import Interdigitated
from elopt.physics.electrodes.mesh_file import MeshFile
from elopt.physics.electrodes.uniform_field import UniformField
from elopt.physics.errors import ElectrodeError

FAMILIES: dict[str, ElectrodeFamily] = {
    BoardPad.name: BoardPad(),
    Coplanar.name: Coplanar(),
    GuardedDisk.name: GuardedDisk(),
    GuardedPad.name: GuardedPad(),
    Interdigitated.name: Interdigitated(),
    MeshFile.name: MeshFile(),
    UniformField.name: UniformField(),
}


def get_family(name: str) -> ElectrodeFamily:
    """The registered family called ``name``; ElectrodeError listing the known names."""
    try:
        return FAMILIES[name]
    except KeyError:
        known = ", ".join(sorted(FAMILIES))
        raise ElectrodeError(
            f"unknown electrode family {name!r}; known families: {known}"
        ) from None


@dataclass(frozen=True)
class FamilyInfo:
    """One family as a listing shows it."""

    name: str
    summary: str
    parameters: tuple[ParameterSpec, ...]
    options: tuple[ParameterSpec, ...]
    metrics: tuple[MetricSpec, ...]
    mirror_pair: bool

    def as_dict(self) -> dict[str, Any]:
        """Plain JSON types: defaults that are not numbers, text or flags become null."""

        def spec(s: ParameterSpec) -> dict[str, Any]:
            default = s.default if isinstance(s.default, (int, float, str, bool)) else None
            return {
                "name": s.name,
                "type": s.type_name,
                "unit": s.unit,
                "meaning": s.meaning,
                "allowed": s.allowed,
                "required": s.required,
                "mounting": s.info.mounting,
                "default": default,
            }

        return {
            "name": self.name,
            "summary": self.summary,
            "parameters": [spec(s) for s in self.parameters],
            "options": [spec(s) for s in self.options],
            "metrics": [dataclasses.asdict(m) for m in self.metrics],
            "mirror_pair": self.mirror_pair,
        }


def describe_family(family: ElectrodeFamily) -> FamilyInfo:
    """The declarations of one family (registered or not); the summary is the first line of
    its module's docstring."""
    module = inspect.getmodule(type(family))
    doc = (module.__doc__ if module is not None else None) or inspect.getdoc(type(family)) or ""
    return FamilyInfo(
        name=family.name,
        summary=doc.splitlines()[0] if doc else "",
        parameters=family.parameters(),
        options=family.options(),
        metrics=family.metric_catalog(),
        mirror_pair=bool(family.mirror_pair),
    )


def family_listing() -> tuple[FamilyInfo, ...]:
    """Every registered family, sorted by name, with its parameters, units and ranges."""
    return tuple(describe_family(FAMILIES[name]) for name in sorted(FAMILIES))

"""Parameter rules shared by the electrode families: collect every broken rule, raise once.

A family's ``validate`` feeds its relations to a :class:`RuleBook`; ``raise_if_broken`` then
raises one :class:`ElectrodeError` whose single line lists every broken rule with the
parameters, their values and the relation, so that a user fixes a config in one pass.
"""

from __future__ import annotations

import functools
import math
from dataclasses import fields
from typing import Any

from elopt.physics.electrodes.base import PARAMETER_INFO
from elopt.physics.errors import ElectrodeError


def _fmt(value: float) -> str:
    return f"{value:.6g}"


@functools.cache
def _declared_fields(cls: type) -> tuple[tuple[str, Any], ...]:
    """(name, ParameterInfo or None) of every field of the dataclass ``cls``, in field order
    (read once per class: a study validates every trial's parameters)."""
    return tuple((f.name, f.metadata.get(PARAMETER_INFO)) for f in fields(cls))


class RuleBook:
    """Accumulates broken parameter rules of one family for one parameter set."""

    def __init__(self, family: str, params: Any) -> None:
        self.family = family
        self.params = params
        self.broken: list[str] = []

    def value(self, name: str) -> float:
        return float(getattr(self.params, name))

    def finite(self) -> bool:
        """Every numeric field must be finite; returns False (and records it) otherwise."""
        ok = True
        for name, _ in _declared_fields(type(self.params)):
            v = getattr(self.params, name)
            if isinstance(v, bool) or not isinstance(v, (int, float)):
                self.broken.append(f"{name} = {v!r} must be a number")
                ok = False
            elif not math.isfinite(v):
                self.broken.append(f"{name} = {v!r} must be finite")
                ok = False
        return ok

    def declared(self) -> None:
        """Check every field against the range declared in its metadata (:func:`parameter`)."""
        for name, info in _declared_fields(type(self.params)):
            if info is not None:
                broken = info.broken_rule(name, getattr(self.params, name))
                if broken:
                    self.broken.append(broken)

    def at_most(self, name: str, limit: float, limit_text: str, why: str) -> None:
        """Record ``name <= limit`` broken; ``limit_text`` says how the limit is formed."""
        v = self.value(name)
        if v > limit * (1 + 1e-12):
            self.broken.append(
                f"{name} = {_fmt(v)} must be <= {limit_text} = {_fmt(limit)} ({why})"
            )

    def below(self, name: str, limit: float, limit_text: str, why: str) -> None:
        """Record ``name < limit`` broken."""
        v = self.value(name)
        if not v < limit:
            self.broken.append(f"{name} = {_fmt(v)} must be < {limit_text} = {_fmt(limit)} ({why})")

    def at_least(self, name: str, limit: float, limit_text: str, why: str) -> None:
        v = self.value(name)
        if v < limit * (1 - 1e-12):
            self.broken.append(
                f"{name} = {_fmt(v)} must be >= {limit_text} = {_fmt(limit)} ({why})"
            )

    def raise_if_broken(self) -> None:
        if self.broken:
            raise ElectrodeError(f"{self.family}: " + "; ".join(self.broken))

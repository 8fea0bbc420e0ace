"""Parameter rules shared by the electrode families: collect every broken rule, raise once.

A family's ``validate`` feeds its relations to a :class:`RuleBook`; ``raise_if_broken`` then
raises one :class:`ElectrodeError` whose single line lists every broken rule with the
parameters, their values and the relation, so that a user fixes a config in one pass.
"""

from __future__ import annotations

import math
from dataclasses import fields
from typing import Any

from elopt.physics.errors import ElectrodeError

#: Magnitudes a drive voltage may have (V): from a microvolt, below which the fields leave
#: the range of the arithmetic, to 10 MV, beyond any electrode elopt designs (common
#: practice, no source).
DRIVE_RANGE_V = (1e-6, 1e7)


def _fmt(value: float) -> str:
    return f"{value:.6g}"


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
        for f in fields(self.params):
            v = getattr(self.params, f.name)
            if isinstance(v, bool) or not isinstance(v, (int, float)):
                self.broken.append(f"{f.name} = {v!r} must be a number")
                ok = False
            elif not math.isfinite(v):
                self.broken.append(f"{f.name} = {v!r} must be finite")
                ok = False
        return ok

    def positive(self, *names: str) -> None:
        for name in names:
            v = self.value(name)
            if not v > 0:
                self.broken.append(f"{name} = {_fmt(v)} must be > 0")

    def non_negative(self, *names: str) -> None:
        for name in names:
            v = self.value(name)
            if v < 0:
                self.broken.append(f"{name} = {_fmt(v)} must be >= 0")

    def nonzero(self, name: str) -> None:
        v = self.value(name)
        if v == 0:
            self.broken.append(f"{name} = {_fmt(v)} must be nonzero")

    def drive(self, name: str) -> None:
        """A drive voltage: nonzero, its magnitude within :data:`DRIVE_RANGE_V`."""
        v = self.value(name)
        low, high = DRIVE_RANGE_V
        if v == 0:
            self.nonzero(name)
        elif not low <= abs(v) <= high:
            self.broken.append(f"{name} = {_fmt(v)} must have a magnitude in [{low:g}, {high:g}] V")

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

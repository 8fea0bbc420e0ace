"""Which families are solved as a cross-section per unit length (the 2-D solver).

Kept apart from the families so that a reader of a study file (``elopt show``) can label a
trial's capacitance matrix (F/m instead of F) and its peak location ((x, z) instead of (r, z))
without importing the solvers. Every family declares ``per_unit_length`` itself; a test holds
this list and those declarations equal.
"""

from __future__ import annotations

#: Registry names of the families whose capacitance matrix is per metre of length.
CROSS_SECTION_FAMILIES: frozenset[str] = frozenset({"coplanar", "interdigitated"})


def is_cross_section(family: str) -> bool:
    """True when ``family`` (a registry name) is solved per unit length."""
    return family in CROSS_SECTION_FAMILIES

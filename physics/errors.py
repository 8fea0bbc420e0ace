"""Exception tree of elopt's physics layer.

Every message names the offending item (conductor, parameter, key), its value and the rule it
breaks, so that a user can fix the input without reading a traceback.
"""

from __future__ import annotations


class ElOptError(Exception):
    """Base of every error elopt raises on purpose."""


class GeometryError(ElOptError, ValueError):
    """A generating curve or surface breaks a geometric rule (self-intersection, axis crossing ...)."""


class ElectrodeError(ElOptError, ValueError):
    """An electrode family's parameters break one of the family's relations."""


class SolverError(ElOptError, RuntimeError):
    """The boundary-element solve cannot be carried out as asked (too large, ill-posed ...)."""

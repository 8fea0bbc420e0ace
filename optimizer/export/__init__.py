"""Taking a design away from elopt: its geometry for mechanical CAD and its solve config.

:func:`write_geometry` writes a layout's conductors in millimetres: the generating profile of a
body of revolution as DXF (``.dxf``, R12 entities) and surfaces as ASCII STL (``.stl``; bodies
of revolution are revolved first). :func:`trial_solve_config` turns a stored trial into the
``elopt solve`` config that reproduces it.
"""

from __future__ import annotations

from elopt.optimizer.export.geometry_files import GEOMETRY_SUFFIXES, write_geometry
from elopt.optimizer.export.trial_config import trial_solve_config

__all__ = ["GEOMETRY_SUFFIXES", "trial_solve_config", "write_geometry"]

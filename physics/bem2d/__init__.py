"""2-D (per unit length) and periodic boundary-element solver on planar layer stacks."""

from elopt.physics.bem2d.shapes import Bar, Strip
from elopt.physics.bem2d.solve import solve_2d

__all__ = ["Bar", "Strip", "solve_2d"]

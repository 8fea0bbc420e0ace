"""elopt's physics layer: geometry, electrode families, boundary-element solvers, fields.

Usable on its own (a notebook needs nothing from ``optimizer``).
"""

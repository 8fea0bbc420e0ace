"""Parameterised electrode families (one module per family)."""

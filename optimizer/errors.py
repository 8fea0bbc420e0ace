"""Exception tree of elopt's optimizer layer (configs, study files)."""

from __future__ import annotations

from elopt.physics.errors import ElOptError


class ConfigError(ElOptError, ValueError):
    """A TOML config is missing, malformed, or has a key/value outside its allowed range."""


class StudyFileError(ElOptError, RuntimeError):
    """A study file cannot be opened, written, or resumed as asked."""

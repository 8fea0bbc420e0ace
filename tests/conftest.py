"""Shared fixtures for elopt's tests."""

from __future__ import annotations

import physics  # noqa: F401  (sets one BLAS thread per process before numpy loads)

"""Shared fixtures for elopt's tests."""

from __future__ import annotations

from elopt.physics.threads import limit_blas_threads

limit_blas_threads()  # as the CLI and the workers do: one BLAS thread per process

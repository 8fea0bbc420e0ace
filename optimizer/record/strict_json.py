"""Strict JSON: no NaN or Infinity tokens. An undefined number is null plus a warning."""

from __future__ import annotations

import json
import math
from typing import Any


class JsonWarnings(list[str]):
    """Warnings collected while numbers are made JSON-safe; one line per undefined value
    (an array with several undefined entries gives one line)."""

    def note(self, key: str, value: float, why: str) -> None:
        # One line per key: a reason given earlier (a family's note on the metric) stands.
        if any(w.startswith(f"{key} is undefined ") for w in self):
            return
        self.append(f"{key} is undefined ({value}): {why}; written as null")


def finite_or_none(value: Any, key: str, warnings: JsonWarnings, why: str) -> float | None:
    """``value`` as a float when finite, else None with a warning naming ``key`` and ``why``."""
    if value is None:
        return None
    v = float(value)
    if math.isfinite(v):
        return v
    warnings.note(key, v, why)
    return None


def strict_dumps(obj: Any, **kwargs: Any) -> str:
    """``json.dumps`` that refuses NaN and Infinity (the record must have replaced them)."""
    return json.dumps(obj, allow_nan=False, **kwargs)


def json_safe(obj: Any) -> Any:
    """A copy of a JSON-able value with every non-finite float replaced by None (for small
    free-form objects such as a trial's text, where no warning is wanted)."""
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if isinstance(obj, dict):
        return {k: json_safe(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [json_safe(v) for v in obj]
    return obj

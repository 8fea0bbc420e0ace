"""Small helpers every TOML reader of elopt shares: load, unknown keys, typed range checks.

Each check raises :class:`ConfigError` with one line that names the key (dotted path), the
value and the allowed range or the nearest valid key.
"""

from __future__ import annotations

import difflib
import math
import tomllib
from collections.abc import Iterable, Mapping
from pathlib import Path
from typing import Any

from elopt.optimizer.errors import ConfigError


def load_toml(path: str | Path) -> tuple[dict[str, Any], str]:
    """Parse a TOML file; returns (table, raw text). One-line ConfigError on any failure."""
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ConfigError(f"{p}: no such file") from None
    except OSError as exc:
        raise ConfigError(f"{p}: cannot read ({exc.strerror})") from None
    try:
        return tomllib.loads(text), text
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{p}: malformed TOML: {exc}") from None


def check_keys(table: Mapping[str, Any], allowed: Iterable[str], where: str) -> None:
    """Refuse keys of ``table`` not in ``allowed``, suggesting the nearest valid key."""
    allowed = list(allowed)
    for key in table:
        if key not in allowed:
            near = difflib.get_close_matches(key, allowed, n=1, cutoff=0.5)
            hint = (
                f"; did you mean '{near[0]}'?" if near else f"; allowed keys: {', '.join(allowed)}"
            )
            raise ConfigError(f"{_join(where, key)}: unknown key{hint}")


def require(table: Mapping[str, Any], key: str, where: str) -> Any:
    if key not in table:
        raise ConfigError(f"{_join(where, key)}: required key is missing")
    return table[key]


def as_float(
    value: Any,
    key: str,
    *,
    low: float | None = None,
    high: float | None = None,
    low_open: bool = False,
    high_open: bool = False,
) -> float:
    """``value`` as a finite float inside [low, high] (open ends where asked)."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise ConfigError(f"{key}: expected a number, got {value!r}")
    v = float(value)
    if not math.isfinite(v):
        raise ConfigError(f"{key}: must be finite, got {value!r}")
    bad_low = low is not None and (v <= low if low_open else v < low)
    bad_high = high is not None and (v >= high if high_open else v > high)
    if bad_low or bad_high:
        lo = "-inf" if low is None else f"{low:g}"
        hi = "inf" if high is None else f"{high:g}"
        rng = f"{'(' if low_open or low is None else '['}{lo}, {hi}{')' if high_open or high is None else ']'}"
        raise ConfigError(f"{key}: {v:g} is outside the allowed range {rng}")
    return v


def as_int(value: Any, key: str, *, low: int | None = None, high: int | None = None) -> int:
    if isinstance(value, bool) or not isinstance(value, int):
        raise ConfigError(f"{key}: expected a whole number, got {value!r}")
    if (low is not None and value < low) or (high is not None and value > high):
        raise ConfigError(
            f"{key}: {value} is outside the allowed range [{low if low is not None else '-inf'}, "
            f"{high if high is not None else 'inf'}]"
        )
    return value


def as_choice(value: Any, key: str, choices: Iterable[str]) -> str:
    choices = list(choices)
    if not isinstance(value, str) or value not in choices:
        near = difflib.get_close_matches(str(value), choices, n=1, cutoff=0.5)
        hint = f" (did you mean '{near[0]}'?)" if near else ""
        raise ConfigError(f"{key}: {value!r} is not one of {', '.join(choices)}{hint}")
    return value


def as_table(value: Any, key: str) -> dict[str, Any]:
    if not isinstance(value, dict):
        raise ConfigError(f"{key}: expected a table, got {value!r}")
    return value


def _join(where: str, key: str) -> str:
    return f"{where}.{key}" if where else key

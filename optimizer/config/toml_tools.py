"""Small helpers every TOML reader of elopt shares: load, unknown keys, typed range checks.

Each check raises :class:`ConfigError` with one line that names the key (dotted path), the
value and the allowed range or the nearest valid key.
"""

from __future__ import annotations

import difflib
import math
import stat
import tomllib
from collections.abc import Iterable, Mapping
from pathlib import Path
from typing import Any

from elopt.optimizer.errors import ConfigError

#: Largest relative permittivity of a medium (solve and study configs): ferroelectric
#: ceramics reach about 1e4 (common practice, no source); beyond 1e5 the field values under-
#: and overflow.
MAX_EPS_R = 1e5
#: Largest config file read (bytes): a config is a page of text; anything bigger is a mistake.
MAX_CONFIG_BYTES = 1_000_000
#: Deepest nesting of tables and arrays a config may use (the formats need three or four).
MAX_NESTING = 32
_HDF5_SIGNATURE = b"\x89HDF\r\n\x1a\n"
_UTF8_BOM = b"\xef\xbb\xbf"
_UTF16_BOMS = (b"\xff\xfe", b"\xfe\xff")


def load_toml(path: str | Path) -> tuple[dict[str, Any], str]:
    """Parse a TOML file; returns (table, raw text). One-line ConfigError on any failure.

    Only a regular file of at most :data:`MAX_CONFIG_BYTES` is read (a FIFO or a device would
    block or never end); the text must be UTF-8 (a leading byte-order mark is dropped).
    """
    p = Path(path)
    text = _config_text(p)
    try:
        table = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{p}: malformed TOML: {exc}") from None
    except RecursionError:
        raise ConfigError(
            f"{p}: malformed TOML: arrays or inline tables nested too deeply to parse "
            f"(a config needs at most {MAX_NESTING} levels)"
        ) from None
    if nesting_depth(table) > MAX_NESTING:
        raise ConfigError(
            f"{p}: tables and arrays are nested more than {MAX_NESTING} levels deep; a config "
            f"needs only a few"
        )
    return table, text


def _config_text(p: Path) -> str:
    """The UTF-8 text of the regular file ``p`` (checked before it is opened)."""
    try:
        st = p.stat()
    except FileNotFoundError:
        raise ConfigError(f"{p}: no such file") from None
    except OSError as exc:
        raise ConfigError(f"{p}: cannot read ({exc.strerror})") from None
    if not stat.S_ISREG(st.st_mode):
        kind = "a directory" if stat.S_ISDIR(st.st_mode) else "not a regular file"
        raise ConfigError(f"{p}: is {kind}; give a TOML config file")
    if st.st_size > MAX_CONFIG_BYTES:
        raise ConfigError(
            f"{p}: is {st.st_size} bytes long; a config file is at most {MAX_CONFIG_BYTES} bytes"
        )
    try:
        with p.open("rb") as fh:
            raw = fh.read(MAX_CONFIG_BYTES + 1)
    except OSError as exc:
        raise ConfigError(f"{p}: cannot read ({exc.strerror})") from None
    if raw.startswith(_HDF5_SIGNATURE):
        raise ConfigError(
            f"{p}: is an HDF5 study file, not a TOML config; read it with `elopt front`, "
            "`elopt show` or `elopt resume`"
        )
    if raw.startswith(_UTF16_BOMS):
        raise ConfigError(f"{p}: is UTF-16 text; save the config as UTF-8")
    if raw.startswith(_UTF8_BOM):
        raw = raw[len(_UTF8_BOM) :]
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        column = exc.start - (raw.rfind(b"\n", 0, exc.start) + 1) + 1
        raise ConfigError(
            f"{p}: is not UTF-8 text (byte 0x{raw[exc.start]:02x} at line {line}, column "
            f"{column}); save the config as UTF-8"
        ) from None


def nesting_depth(value: Any) -> int:
    """Levels of tables and arrays in a parsed TOML value (a scalar is 0), without recursion;
    counting stops at ``MAX_NESTING + 1``."""
    deepest = 0
    stack = [(value, 0)]
    while stack:
        v, depth = stack.pop()
        if isinstance(v, dict):
            children = v.values()
        elif isinstance(v, list):
            children = v
        else:
            deepest = max(deepest, depth)
            continue
        deepest = max(deepest, depth + 1)
        if depth + 1 <= MAX_NESTING:
            stack.extend((c, depth + 1) for c in children)
    return deepest


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

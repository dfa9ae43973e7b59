"""Schema-driven validation of TOML sections into frozen dataclasses.

A section is a frozen dataclass whose fields carry metadata made by
:func:`setting`: allowed range, unit and a one-line description. The loader
checks types and ranges, rejects unknown keys with the nearest valid name,
and names file, section, key and value in every error.
"""

from __future__ import annotations

import dataclasses
import difflib
import math
from typing import Any, get_type_hints

from livecoach.errors import ConfigError

MISSING = dataclasses.MISSING


def setting(
    default: Any = MISSING,
    *,
    doc: str,
    unit: str = "",
    lo: float | None = None,
    hi: float | None = None,
    lo_open: bool = False,
    hi_open: bool = False,
    choices: tuple[str, ...] | None = None,
) -> Any:
    """A dataclass field with validation metadata.

    ``lo``/``hi`` bound numbers (inclusive unless ``lo_open``/``hi_open``);
    ``choices`` restricts strings.
    """
    meta = {
        "doc": doc,
        "unit": unit,
        "lo": lo,
        "hi": hi,
        "lo_open": lo_open,
        "hi_open": hi_open,
        "choices": choices,
    }
    if isinstance(default, (list, dict)):
        value = default
        return dataclasses.field(default_factory=lambda: type(value)(value), metadata=meta)
    return dataclasses.field(default=default, metadata=meta)


def _range_text(meta: dict[str, Any]) -> str:
    lo, hi = meta["lo"], meta["hi"]
    left = "(" if meta["lo_open"] else "["
    right = ")" if meta["hi_open"] else "]"
    if lo is not None and hi is not None:
        return f"a number in {left}{lo}, {hi}{right}"
    if lo is not None:
        return f"a number {'>' if meta['lo_open'] else '>='} {lo}"
    if hi is not None:
        return f"a number {'<' if meta['hi_open'] else '<='} {hi}"
    return "a number"


def _check_number(where: str, value: Any, meta: dict[str, Any], want_int: bool) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise ConfigError(f"{where} = {value!r}: expected {_range_text(meta)}")
    if want_int and not isinstance(value, int):
        if float(value).is_integer():
            value = int(value)
        else:
            raise ConfigError(f"{where} = {value!r}: expected a whole number")
    if isinstance(value, float) and not math.isfinite(value):
        raise ConfigError(f"{where} = {value!r}: expected a finite number")
    lo, hi = meta["lo"], meta["hi"]
    bad = (
        (lo is not None and (value <= lo if meta["lo_open"] else value < lo))
        or (hi is not None and (value >= hi if meta["hi_open"] else value > hi))
    )
    if bad:
        unit = f" {meta['unit']}" if meta["unit"] else ""
        raise ConfigError(f"{where} = {value!r}{unit}: expected {_range_text(meta)}")
    return value


def nearest_name(name: str, valid: list[str]) -> str:
    """Text suggesting the valid name closest to ``name`` (or listing them)."""
    close = difflib.get_close_matches(name, valid, n=1, cutoff=0.5)
    if close:
        return f"did you mean '{close[0]}'?"
    return "valid keys: " + ", ".join(sorted(valid))


def build_section(cls: type, data: Any, section: str, source: str) -> Any:
    """Validate ``data`` (a TOML table) against dataclass ``cls`` and build it."""
    if not isinstance(data, dict):
        raise ConfigError(f"{source}: [{section}] must be a table, got {type(data).__name__}")
    hints = get_type_hints(cls)
    fields = {f.name: f for f in dataclasses.fields(cls) if f.init}
    for key in data:
        if key not in fields:
            raise ConfigError(
                f"{source}: unknown key '{key}' in [{section}]; "
                + nearest_name(key, list(fields))
            )
    values: dict[str, Any] = {}
    for name, f in fields.items():
        where = f"{source}: [{section}] {name}"
        if name not in data:
            if f.default is MISSING and f.default_factory is MISSING:  # type: ignore[misc]
                doc = f.metadata.get("doc", "")
                raise ConfigError(f"{where} is missing ({doc})")
            continue
        value = data[name]
        meta = dict(f.metadata)
        hint = hints[name]
        text = str(hint)
        if hint is bool:
            if not isinstance(value, bool):
                raise ConfigError(f"{where} = {value!r}: expected true or false")
        elif hint is int:
            value = _check_number(where, value, meta, want_int=True)
        elif hint is float:
            value = float(_check_number(where, value, meta, want_int=False))
        elif hint is str or text in ("str | None", "typing.Optional[str]"):
            if not isinstance(value, str):
                raise ConfigError(f"{where} = {value!r}: expected a text string")
            choices = meta.get("choices")
            if choices and value not in choices:
                raise ConfigError(
                    f"{where} = {value!r}: expected one of {', '.join(choices)}"
                )
        elif text.startswith("float | None"):
            if value is not None:
                value = float(_check_number(where, value, meta, want_int=False))
        values[name] = value
    try:
        return cls(**values)
    except ConfigError as exc:
        raise ConfigError(f"{source}: [{section}] {exc}") from None


def describe_section(cls: type) -> list[tuple[str, str, str, Any]]:
    """(key, unit, doc, default) for each key of a section, for help texts."""
    out = []
    for f in dataclasses.fields(cls):
        default = f.default if f.default is not MISSING else None
        out.append((f.name, f.metadata.get("unit", ""), f.metadata.get("doc", ""), default))
    return out

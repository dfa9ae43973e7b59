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
import types
import typing
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


def _range_text(meta: dict[str, Any], noun: str = "a number") -> str:
    lo, hi = meta.get("lo"), meta.get("hi")
    lo_open, hi_open = meta.get("lo_open", False), meta.get("hi_open", False)
    left = "(" if lo_open else "["
    right = ")" if hi_open else "]"
    if lo is not None and hi is not None:
        return f"{noun} in {left}{lo}, {hi}{right}"
    if lo is not None:
        return f"{noun} {'>' if lo_open else '>='} {lo}"
    if hi is not None:
        return f"{noun} {'<' if hi_open else '<='} {hi}"
    return noun


def _check_number(where: str, value: Any, meta: dict[str, Any], want_int: bool) -> float:
    noun = "a whole number" if want_int else "a number"
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise ConfigError(f"{where} = {value!r}: expected {_range_text(meta, noun)}")
    if isinstance(value, float) and not math.isfinite(value):
        raise ConfigError(f"{where} = {value!r}: expected {_range_text(meta, 'a finite number')}")
    if want_int and not isinstance(value, int):
        if float(value).is_integer():
            value = int(value)
        else:
            raise ConfigError(f"{where} = {value!r}: expected {_range_text(meta, noun)}")
    lo, hi = meta.get("lo"), meta.get("hi")
    bad = (
        (lo is not None and (value <= lo if meta.get("lo_open") else value < lo))
        or (hi is not None and (value >= hi if meta.get("hi_open") else value > hi))
    )
    if bad:
        unit = f" {meta['unit']}" if meta.get("unit") else ""
        raise ConfigError(f"{where} = {value!r}{unit}: expected {_range_text(meta, noun)}")
    return value


def nearest_name(name: str, valid: list[str]) -> str:
    """Text suggesting the valid name closest to ``name`` (or listing them)."""
    close = difflib.get_close_matches(name, valid, n=1, cutoff=0.5)
    if close:
        return f"did you mean '{close[0]}'?"
    return "valid keys: " + ", ".join(sorted(valid))


def _is_internal(f: dataclasses.Field) -> bool:
    return bool(f.metadata.get("internal"))


def _check_value(where: str, value: Any, hint: Any, meta: dict[str, Any]) -> Any:
    """Check one TOML value against a type hint; return it converted."""
    args = typing.get_args(hint)
    origin = typing.get_origin(hint)
    if origin in (typing.Union, types.UnionType) and type(None) in args:
        if value is None:
            return None
        rest = [a for a in args if a is not type(None)]
        hint = rest[0] if len(rest) == 1 else Any
        origin = typing.get_origin(hint)
    if hint is bool:
        if not isinstance(value, bool):
            raise ConfigError(f"{where} = {value!r}: expected true or false")
        return value
    if hint is int:
        return _check_number(where, value, meta, want_int=True)
    if hint is float:
        return float(_check_number(where, value, meta, want_int=False))
    if hint is str:
        if not isinstance(value, str):
            raise ConfigError(f"{where} = {value!r}: expected a text string in quotes")
        choices = meta.get("choices")
        if choices and value not in choices:
            raise ConfigError(f"{where} = {value!r}: expected one of {', '.join(choices)}")
        return value
    if hint in (list, tuple) or origin in (list, tuple):
        if not isinstance(value, list):
            raise ConfigError(f"{where} = {value!r}: expected a list [ ... ]")
        item = typing.get_args(hint)[0] if typing.get_args(hint) else Any
        if item in (bool, int, float, str):
            value = [_check_value(f"{where}[{i}]", v, item, meta) for i, v in enumerate(value)]
        return tuple(value) if (hint is tuple or origin is tuple) else value
    if hint is dict or origin is dict:
        if not isinstance(value, dict):
            raise ConfigError(f"{where} = {value!r}: expected a table {{ ... }}")
        return value
    return value


def build_section(cls: type, data: Any, section: str, source: str) -> Any:
    """Validate ``data`` (a TOML table) against dataclass ``cls`` and build it.

    Checks every key is known (suggesting the nearest valid name), every
    required key is present, and each value has the right type and range;
    errors name the file, section, key, value and what is allowed.
    Fields made with ``dataclasses.field(metadata={"internal": True})`` are
    not ride-file keys.
    """
    if not isinstance(data, dict):
        raise ConfigError(f"{source}: [{section}] must be a table, got {type(data).__name__}")
    hints = get_type_hints(cls)
    fields = {f.name: f for f in dataclasses.fields(cls) if f.init and not _is_internal(f)}
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
                unit = f.metadata.get("unit", "")
                what = f"{doc}, {unit}" if doc and unit else doc or unit
                raise ConfigError(f"{where} is missing" + (f" ({what})" if what else ""))
            continue
        values[name] = _check_value(where, data[name], hints[name], dict(f.metadata))
    try:
        return cls(**values)
    except ConfigError as exc:
        raise ConfigError(f"{source}: [{section}] {exc}") from None


def describe_section(cls: type) -> list[tuple[str, str, str, Any]]:
    """(key, unit, doc, default) for each key of a section, for help texts."""
    out = []
    for f in dataclasses.fields(cls):
        if not f.init or _is_internal(f):
            continue
        default = f.default if f.default is not MISSING else None
        out.append((f.name, f.metadata.get("unit", ""), f.metadata.get("doc", ""), default))
    return out

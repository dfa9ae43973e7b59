"""A small TOML writer for the tables the simulator builds (ride files).

Writes the subset of TOML 1.0 that ride files use: tables of tables, strings,
booleans, integers, floats and (nested) arrays of those. Used to keep the exact
ride-file text of a scenario (after its ``[ride_patch]``) so a recording can
carry it and a replay re-reads the very same settings.
"""

from __future__ import annotations

import math
from typing import Any

from livecoach.errors import ConfigError


def _key(k: str) -> str:
    if k and all(c.isalnum() or c in "_-" for c in k):
        return k
    return _string(k)


def _string(s: str) -> str:
    out = ['"']
    for c in s:
        if c == '"':
            out.append('\\"')
        elif c == "\\":
            out.append("\\\\")
        elif c == "\n":
            out.append("\\n")
        elif c == "\t":
            out.append("\\t")
        elif ord(c) < 0x20 or ord(c) == 0x7F:
            out.append(f"\\u{ord(c):04x}")
        else:
            out.append(c)
    out.append('"')
    return "".join(out)


def _value(v: Any, where: str) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if not math.isfinite(v):
            raise ConfigError(f"{where}: {v!r} cannot be written to a ride file")
        return repr(v)
    if isinstance(v, str):
        return _string(v)
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_value(x, where) for x in v) + "]"
    raise ConfigError(f"{where}: a {type(v).__name__} cannot be written to a ride file")


def dumps(data: dict[str, Any]) -> str:
    """TOML text for ``data`` (top-level scalars first, then one [table] per dict)."""
    lines: list[str] = []

    def table(prefix: str, tbl: dict[str, Any]) -> None:
        scalars = [(k, v) for k, v in tbl.items() if not isinstance(v, dict)]
        subs = [(k, v) for k, v in tbl.items() if isinstance(v, dict)]
        if prefix and (scalars or not subs):
            if lines:
                lines.append("")
            lines.append(f"[{prefix}]")
        for k, v in scalars:
            lines.append(f"{_key(k)} = {_value(v, f'{prefix}.{k}' if prefix else k)}")
        for k, v in subs:
            table(f"{prefix}.{_key(k)}" if prefix else _key(k), v)

    table("", data)
    return "\n".join(lines) + "\n"


def deep_merge(base: dict[str, Any], patch: dict[str, Any]) -> dict[str, Any]:
    """A copy of ``base`` with ``patch`` merged in (tables merge, values replace)."""
    out = dict(base)
    for k, v in patch.items():
        if isinstance(v, dict) and isinstance(out.get(k), dict):
            out[k] = deep_merge(out[k], v)
        else:
            out[k] = v
    return out

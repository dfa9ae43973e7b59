"""Small helpers shared by subcommands."""

from __future__ import annotations

import argparse
import json
import math
import sys
from typing import Any


def description_from_doc(doc: str | None, fallback: str) -> str:
    """A subcommand's ``--help`` description: its module docstring without the
    first paragraph (the title line) and without reST double backquotes."""
    parts = (doc or "").split("\n\n", 1)
    if len(parts) < 2 or not parts[1].strip():
        return fallback
    return parts[1].strip().replace("``", "")


def positive_float(text: str) -> float:
    """argparse type: a finite number > 0 (else a usage error, exit 2)."""
    try:
        x = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number") from None
    if not (x > 0.0 and math.isfinite(x)):
        raise argparse.ArgumentTypeError(f"{text!r}: expected a number > 0")
    return x


def positive_int(text: str) -> int:
    """argparse type: a whole number >= 1 (else a usage error, exit 2)."""
    try:
        n = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
    if n < 1:
        raise argparse.ArgumentTypeError(f"{text!r}: expected a whole number >= 1")
    return n


def add_config_argument(parser: argparse.ArgumentParser, required: bool = True) -> None:
    parser.add_argument(
        "--config", "-c", metavar="RIDE.toml", required=required,
        help="the ride file (see `livecoach init`)",
    )


def _clean(value: Any) -> Any:
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, dict):
        return {k: _clean(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_clean(v) for v in value]
    return value


def print_json(obj: Any) -> None:
    """Print ``obj`` as JSON on stdout: sorted keys, NaN/inf as null, stable output."""
    sys.stdout.write(json.dumps(_clean(obj), sort_keys=True, indent=2) + "\n")

"""``livecoach init DIR``: write a commented example ride file."""

from __future__ import annotations

import argparse
from importlib import resources
from pathlib import Path

from livecoach.errors import ConfigError, LivecoachError

NAME = "init"
HELP = "write a commented example ride file (invented demo vehicle and course) into DIR"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("directory", metavar="DIR", help="folder to write ride.toml into (created if needed)")
    p.add_argument("--force", action="store_true", help="overwrite an existing ride.toml")


def example_ride_text() -> str:
    return resources.files("livecoach.data").joinpath("example_ride.toml").read_text(encoding="utf-8")


def run(args: argparse.Namespace) -> int:
    folder = Path(args.directory)
    target = folder / "ride.toml"
    if target.exists() and not args.force:
        raise ConfigError(f"{target} exists already; use --force to overwrite it")
    try:
        folder.mkdir(parents=True, exist_ok=True)
        target.write_text(example_ride_text(), encoding="utf-8")
    except OSError as exc:
        raise LivecoachError(f"cannot write {target}: {exc.strerror or exc}") from None
    print(f"wrote {target}")
    return 0

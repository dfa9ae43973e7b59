"""The ``livecoach`` entry point.

Subcommands live one per module in :mod:`livecoach.cli.commands`; each module
defines ``NAME``, ``HELP``, ``add_arguments(parser)`` and ``run(args) -> int``
and keeps heavy imports inside ``run`` so start-up stays fast.

Exit codes: 0 success, 1 the job failed (bad input data, no-go check,
decode failure), 2 usage error (bad command line or ride file unreadable).
Errors go to stderr without a traceback unless ``--debug`` is given.
"""

from __future__ import annotations

import argparse
import importlib
import pkgutil
import sys
from typing import Sequence

from livecoach import __version__
from livecoach.errors import ConfigError, LivecoachError

EXIT_OK = 0
EXIT_FAILED = 1
EXIT_USAGE = 2


def _command_modules() -> list:
    import livecoach.cli.commands as pkg

    mods = []
    for info in sorted(pkgutil.iter_modules(pkg.__path__), key=lambda m: m.name):
        if info.name.startswith("_"):
            continue
        mod = importlib.import_module(f"{pkg.__name__}.{info.name}")
        if hasattr(mod, "NAME") and hasattr(mod, "run"):
            mods.append(mod)
    return sorted(mods, key=lambda m: m.NAME)


EXIT_CODES_TEXT = "exit codes: 0 done, 1 the job failed, 2 usage or configuration error"


def _description(mod) -> str:
    """The module's DESCRIPTION, else its one-line HELP as a sentence."""
    text = getattr(mod, "DESCRIPTION", None)
    if text:
        return text
    return mod.HELP[:1].upper() + mod.HELP[1:] + ("" if mod.HELP.endswith(".") else ".")


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="livecoach",
        description=(
            "On-board ride computer for human-powered speed vehicles: live drag "
            "estimation, run-up pacing, telemetry, recording and replay."
        ),
        epilog=EXIT_CODES_TEXT,
    )
    parser.add_argument("--version", action="version", version=f"livecoach {__version__}")
    parser.add_argument("--debug", action="store_true", help="show tracebacks on errors")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for mod in _command_modules():
        p = sub.add_parser(mod.NAME, help=mod.HELP, description=_description(mod), epilog=EXIT_CODES_TEXT)
        p.add_argument("--debug", action="store_true", default=argparse.SUPPRESS,
                       help="show tracebacks on errors")
        mod.add_arguments(p)
        p.set_defaults(_run=mod.run)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "_run", None):
        parser.print_help(sys.stderr)
        return EXIT_USAGE
    debug = getattr(args, "debug", False)
    try:
        code = args._run(args)
    except ConfigError as exc:
        if debug:
            raise
        print(f"livecoach {args.command}: {exc}", file=sys.stderr)
        return EXIT_USAGE
    except LivecoachError as exc:
        if debug:
            raise
        print(f"livecoach {args.command}: {exc}", file=sys.stderr)
        return EXIT_FAILED
    except KeyboardInterrupt:
        print(f"livecoach {args.command}: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return EXIT_OK
    return EXIT_OK if code is None else int(code)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())

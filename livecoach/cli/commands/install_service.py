"""``livecoach install-service``: run the ride loop at boot (systemd unit + udev rules)."""

from __future__ import annotations

import argparse

from livecoach.cli.common import add_config_argument, print_json

NAME = "install-service"
HELP = "install the systemd unit that starts the ride loop at boot, and udev rules for stable serial names"
DESCRIPTION = (
    "Writes /etc/systemd/system/livecoach.service (starts the ride loop at boot, restarts it on "
    "failure, logs to the data folder) and /etc/udev/rules.d/99-livecoach-serial.rules (links "
    "/dev/livecoach-gps, -mcu, -radio), then reloads systemd and udev and enables the service. "
    "Needs root on the board; --dry-run shows what it would do, --prefix writes under another "
    "folder and runs nothing. See hardware_notes/board_setup.md."
)

#: The livecoach subcommand the service runs (the live ride loop).
DEFAULT_RIDE_COMMAND = "ride"


def add_arguments(p: argparse.ArgumentParser) -> None:
    add_config_argument(p)
    p.add_argument("--user", help="user the service runs as (default: the user who ran sudo)")
    p.add_argument("--data-dir", metavar="DIR",
                   help="data folder for logs (and recordings by default): on the data partition "
                        "(default: the ride file's folder)")
    p.add_argument("--serial", action="append", default=[], metavar="ROLE=DEVICE",
                   help="name a plugged-in serial device: gps, mcu or radio, e.g. gps=/dev/ttyUSB0 "
                        "(repeatable)")
    p.add_argument("--ride-command", default=DEFAULT_RIDE_COMMAND, metavar="NAME",
                   help=f"livecoach subcommand the service runs (default: {DEFAULT_RIDE_COMMAND})")
    p.add_argument("--prefix", default="/", metavar="DIR",
                   help="write under this folder instead of / and run nothing (for images and tests)")
    p.add_argument("--dry-run", action="store_true", help="write nothing, run nothing; print the plan")
    p.add_argument("--no-enable", action="store_true", help="do not enable the service at boot")
    p.add_argument("--json", action="store_true", help="print JSON")


def _default_user() -> str:
    import getpass
    import os

    return os.environ.get("SUDO_USER") or getpass.getuser()


def _livecoach_program() -> str:
    """Absolute path of this installation's ``livecoach`` script (in the venv)."""
    import shutil
    import sys
    from pathlib import Path

    beside = Path(sys.executable).parent / "livecoach"
    if beside.is_file():
        return str(beside)
    found = shutil.which("livecoach")
    if found:
        return str(Path(found).resolve())
    from livecoach.errors import LivecoachError

    raise LivecoachError("cannot find the livecoach program; install the package into a venv first")


def run(args: argparse.Namespace) -> int:
    import grp
    import importlib.util
    import pwd
    from pathlib import Path

    from livecoach.config.ridefile import load_ride_file
    from livecoach.errors import ConfigError
    from livecoach.setup_check import install as inst

    ride_path = Path(args.config).resolve()
    load_ride_file(ride_path)  # refuse to install a service for a ride file that does not load
    user = args.user or _default_user()
    try:
        pw = pwd.getpwnam(user)
    except KeyError:
        raise ConfigError(f"--user {user}: no such user on this system") from None
    group = grp.getgrgid(pw.pw_gid).gr_name
    data_dir = str(Path(args.data_dir).resolve()) if args.data_dir else str(ride_path.parent)
    steps: list[inst.Step] = []
    import re

    if not re.fullmatch(r"[a-z][a-z0-9-]*", args.ride_command):
        raise ConfigError(f"--ride-command {args.ride_command!r}: expected a livecoach subcommand name")
    module = "livecoach.cli.commands." + args.ride_command.replace("-", "_")
    if importlib.util.find_spec(module) is None:
        steps.append(inst.Step("note", f"warning: this installation has no 'livecoach {args.ride_command}' "
                                       "command yet; the service will fail until it does"))
    unit = inst.render_unit(
        exec_argv=[_livecoach_program(), args.ride_command, "--config", str(ride_path)],
        user=user, group=group, data_dir=data_dir, log_file=f"{data_dir}/logs/livecoach.log",
    )
    rules = []
    for item in args.serial:
        role, sep, device = item.partition("=")
        if not sep or not device:
            raise ConfigError(f"--serial {item}: expected ROLE=DEVICE, e.g. gps=/dev/ttyUSB0")
        role, device = role.strip(), device.strip()
        if role not in inst.SERIAL_ROLES:
            raise ConfigError(f"--serial {item}: role '{role}' is not one of {', '.join(inst.SERIAL_ROLES)}")
        rules.append(inst.device_rule(role, device, inst.udev_properties(device)))
    rules_text = inst.render_rules(rules)
    steps += inst.install(prefix=Path(args.prefix), unit_text=unit, rules_text=rules_text,
                          data_dir=data_dir, user=user, dry_run=args.dry_run, enable=not args.no_enable)
    if Path(args.prefix).resolve() == Path("/") and not args.dry_run:
        steps.append(inst.Step("note", "start it now with: sudo systemctl start livecoach; "
                                       f"logs: {data_dir}/logs/livecoach.log"))
    if args.json:
        print_json({"dry_run": args.dry_run, "prefix": args.prefix, "unit": unit, "rules": rules_text,
                    "steps": [{"action": s.action, "text": s.text} for s in steps]})
        return 0
    if args.dry_run:
        print(f"--- {inst.UNIT_NAME} ---\n{unit}\n--- {inst.RULES_NAME} ---\n{rules_text}")
    for s in steps:
        print(f"{s.action:>5}  {s.text}")
    return 0

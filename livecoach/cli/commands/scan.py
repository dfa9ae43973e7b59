"""``livecoach scan``: list nearby BLE sensors offering Cycling Power, CSC or Heart Rate."""

from __future__ import annotations

import argparse

from livecoach.cli.common import print_json

NAME = "scan"
HELP = "list nearby Bluetooth LE power meters, speed/cadence sensors and heart-rate straps with RSSI"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--timeout-s", type=float, default=5.0, help="how long to listen, s (default 5)")
    p.add_argument("--config", "-c", metavar="RIDE.toml",
                   help="mark the devices the ride file's [sensors] allow-list names")
    p.add_argument("--json", action="store_true", help="print JSON")


def run(args: argparse.Namespace) -> int:
    import asyncio

    from livecoach.errors import ConfigError
    from livecoach.sources.ble import allow_list_from_sensors
    from livecoach.sources.scan import kind_titles, scan_sensors

    if not 0.5 <= args.timeout_s <= 120.0:
        raise ConfigError(f"--timeout-s {args.timeout_s:g}: expected 0.5..120 s")
    allow: frozenset[str] = frozenset()
    if args.config:
        from livecoach.config.ridefile import load_ride_file

        allow = allow_list_from_sensors(load_ride_file(args.config).sensors)
    results = asyncio.run(scan_sensors(args.timeout_s, allow_list=allow))
    if args.json:
        print_json({"devices": [r.as_dict() for r in results]})
        return 0
    if not results:
        print(f"no power, speed/cadence or heart-rate sensor heard in {args.timeout_s:g} s "
              "(wake the sensors: turn the crank and the wheel)")
        return 0
    print(f"{'address':<20} {'RSSI dBm':>8}  {'in ride file':<12} {'offers':<32} name")
    for r in results:
        mark = "yes" if r.allowed else ("no" if args.config else "-")
        print(f"{r.address:<20} {r.rssi_dbm:>8}  {mark:<12} {kind_titles(r.kinds):<32} {r.name or ''}")
    print("livecoach connects only to addresses written in the ride file's [sensors] section.")
    return 0

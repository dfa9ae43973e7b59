"""``livecoach sim SCENARIO``: play a simulated run in real time over serial ports."""

from __future__ import annotations

import argparse

from livecoach.cli.common import positive_float

NAME = "sim"
HELP = "play a simulated run in real time: GPS NMEA and microcontroller lines over serial ports"
DESCRIPTION = (
    "Simulate SCENARIO (a name from sim/scenarios/ or a path) and write its GPS sentences and "
    "microcontroller lines to serial ports at the simulated times, so another process or the "
    "on-board computer on a USB-serial cable reads them as hardware. Without --serial / "
    "--mcu-serial a pseudo-terminal is created for each and its name printed "
    "('gps /dev/pts/N'). Bluetooth sensors have no serial form and are not sent."
)


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("scenario", metavar="SCENARIO", help="scenario name (sim/scenarios/NAME.toml) or path")
    p.add_argument("--serial", metavar="PORT", help="serial port for the GPS sentences (default: a new pty)")
    p.add_argument("--mcu-serial", metavar="PORT",
                   help="serial port for the microcontroller lines (default: a new pty when the "
                        "scenario has air-speed, barometer or hall-sensor data)")
    p.add_argument("--speed", type=float, default=1.0, help="time factor: 2 plays twice as fast (default 1)")
    p.add_argument("--seed", type=int, default=None, help="seed (default: the scenario's)")
    p.add_argument("--duration-s", type=positive_float, default=None, help="stop after this much simulated time, s")
    p.add_argument("--quiet", action="store_true", help="print only the port names and the end")


def run(args: argparse.Namespace) -> int:
    import sys

    from livecoach.errors import ConfigError
    from sim.realtime import run_realtime
    from sim.scenario import load_scenario

    if not args.speed > 0.0:
        raise ConfigError(f"--speed {args.speed}: must be > 0")
    scenario = load_scenario(args.scenario)
    status_lines = [0]

    def announce(text: str) -> None:
        if args.quiet and not text.startswith(("gps ", "mcu ")):
            return
        status_lines[0] += 1
        print(text, flush=True)

    stats = run_realtime(scenario, seed=args.seed, gps_port=args.serial, mcu_port=args.mcu_serial,
                         speed=args.speed, duration_s=args.duration_s, announce=announce)
    sent = ", ".join(f"{k} {v} lines ({stats.dropped.get(k, 0)} dropped)" for k, v in stats.lines.items())
    print(f"done at t = {stats.sim_t_s:.1f} s ({stats.end_reason}): {sent}", flush=True)
    if stats.late_s > 0.5:
        print(f"warning: fell up to {stats.late_s:.2f} s behind real time", file=sys.stderr)
    return 0

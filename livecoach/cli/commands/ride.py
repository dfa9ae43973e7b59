"""``livecoach ride``: the live job on the vehicle.

Reads the configured sensors (BLE allow-list and serial ports from the ride
file), runs the pipeline, shows the rider's display, plays cues, serves the
crew page, sends radio telemetry and records every byte, until stopped
(Ctrl-C, SIGTERM from systemd, or ``--duration``).
"""

from __future__ import annotations

import argparse

from livecoach.cli.common import add_config_argument

NAME = "ride"
HELP = "run the live ride computer on the configured sensors (the job on the vehicle)"


def add_arguments(p: argparse.ArgumentParser) -> None:
    add_config_argument(p)
    p.add_argument("--plan", metavar="PLAN.csv", help="a plan from `livecoach plan --out` (else planned now)")
    p.add_argument("--no-display", action="store_true", help="no full-screen display (e.g. as a service)")
    p.add_argument("--mute", action="store_true", help="no audio cues")
    p.add_argument("--no-web", action="store_true", help="do not serve the crew web page")
    p.add_argument("--no-record", action="store_true", help="do not record (not recommended)")
    p.add_argument("--recordings", metavar="DIR", help="folder for the recording (default: [recording] directory)")
    p.add_argument("--duration", type=float, metavar="S", help="stop after S seconds")


def load_or_make_plan(ride, plan_path: str | None):
    """The plan to coach against: loaded and checked against the ride, or made now."""
    from livecoach.plan import make_plan
    from livecoach.plan.plan import load_plan

    if plan_path:
        return load_plan(plan_path, ride)
    return make_plan(ride)


def run(args: argparse.Namespace) -> int:
    import asyncio
    import signal
    import sys

    from livecoach.config.ridefile import load_ride_file
    from livecoach.errors import ConfigError
    from livecoach.live.assemble import build_sinks, print_warnings
    from livecoach.live.loop import LiveLoop
    from livecoach.sources import sources_from_ride

    ride = load_ride_file(args.config)
    plan = load_or_make_plan(ride, args.plan)
    for w in getattr(plan, "warnings", ()) or ():
        print(f"livecoach ride: plan: {w}", file=sys.stderr)
    sources = sources_from_ride(ride)
    if not sources:
        raise ConfigError(
            f"{ride.source}: no sensors configured: set power_address/speed_address, gps_port "
            "or mcu_port in [sensors] (see `livecoach scan`)"
        )
    live = LiveLoop(ride, plan, sources)

    def on_warning(text: str) -> None:
        # Called from the recorder's writer thread: post_warning is thread-safe.
        print(f"livecoach ride: {text}", file=sys.stderr)
        live.post_warning(text)

    sinks = build_sinks(
        ride, plan, record=not args.no_record, recording_dir=args.recordings,
        display=not args.no_display and sys.stdout.isatty(),
        audio=False if args.mute else None, web=False if args.no_web else None,
        on_warning=on_warning,
    )
    live.sinks.extend(sinks.sinks)
    print_warnings(sinks)
    for text in sinks.warnings:
        live.post_warning(text)
    if sinks.recording_path is not None:
        print(f"recording to {sinks.recording_path}", file=sys.stderr)

    async def main() -> None:
        stop = asyncio.Event()
        loop = asyncio.get_running_loop()
        for sig in (signal.SIGINT, signal.SIGTERM):
            try:
                loop.add_signal_handler(sig, stop.set)
            except (NotImplementedError, RuntimeError):
                pass
        stats = await live.run(stop, duration_s=args.duration)
        print(f"livecoach ride: {stats.events} events processed", file=sys.stderr)

    try:
        asyncio.run(main())
    finally:
        sinks.close("ride ended")
        if sinks.recording_path is not None:
            print(f"recording: {sinks.recording_path}")
    return 0

"""``livecoach ground``: the chase vehicle's ground station for radio telemetry."""

from __future__ import annotations

import argparse
import sys
import time
from typing import Any

from livecoach.cli.common import positive_float, positive_int

NAME = "ground"
HELP = "receive, show and record the radio telemetry frames from the vehicle"
DESCRIPTION = (
    "Receive telemetry frames from a serial radio modem, decode them, show them "
    "(a live view on a terminal, plain lines otherwise, JSON Lines with --json) and "
    "record them. Lost frames (sequence gaps) and corrupted frames (bad COBS, bad "
    "CRC) are counted and skipped; a modem that disappears is reopened when it comes "
    "back. Stop with Ctrl-C. The modem's frequency band, transmit power and duty "
    "cycle must follow local radio rules and any licence they require."
)


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--port", required=True, help="serial port of the radio modem (e.g. /dev/ttyUSB0)")
    p.add_argument("--baud", type=positive_int, default=57600, help="baud rate (default 57600)")
    p.add_argument("--record", metavar="FILE",
                   help="append every frame and rejected packet to FILE (JSON Lines)")
    p.add_argument("--json", action="store_true",
                   help="print one JSON object per line (frames, faults, and a summary at the end)")
    p.add_argument("--plain", action="store_true", help="plain lines even on a terminal")
    p.add_argument("--duration", type=positive_float, metavar="S", help="stop after S seconds")
    p.add_argument("--frames", type=positive_int, metavar="N", help="stop after N good frames")


#: Short names of the sensor channels for the screen.
SENSOR_LABELS = {
    "ble.cycling_power": "power meter",
    "ble.csc": "wheel speed",
    "ble.heart_rate": "heart rate",
    "serial.gps": "GPS",
    "serial.mcu": "sensor board",
    "csv": "CSV",
}


def _fmt(value: float | None, spec: str, unit: str = "") -> str:
    if value is None:
        return "--"
    return f"{value:{spec}}{unit}"


def plain_line(item: Any) -> str:
    """One readable line for a frame or a rejected packet."""
    from livecoach.telemetry.frame import NoticeFrame
    from livecoach.telemetry.reader import FrameFault

    if isinstance(item, FrameFault):
        return f"! rejected packet ({item.kind}): {item.reason}"
    if isinstance(item, NoticeFrame):
        return f"#{item.seq:<5d} t {item.t_s:10.3f} s  {item.kind.upper()}: {item.text}"
    speed = _fmt(item.speed_mps, ".2f", " m/s")
    if item.speed_mps is not None:
        speed += f" ({item.speed_mps * 3.6:.1f} km/h)"
    if item.speed_stale:
        speed += " STALE"
    power = f"{_fmt(item.power_w, '.0f')}/{_fmt(item.target_power_w, '.0f')} W"
    if item.power_stale:
        power += " STALE"
    cda = _fmt(item.cda_m2, ".4f")
    if item.cda_sd_m2 is not None and item.cda_m2 is not None:
        cda += f"+-{item.cda_sd_m2:.4f}"
    stale = [SENSOR_LABELS.get(h.channel, h.channel) for h in item.sensors if h.stale]
    parts = [
        f"#{item.seq:<5d} t {item.t_s:10.3f} s",
        f"{item.phase:<7}",
        f"d {_fmt(item.distance_m, '.1f', ' m')}",
        f"v {speed}",
        f"P {power}",
        f"CdA {cda} m2",
        f"trap pred {_fmt(item.predicted_trap_speed_mps, '.2f', ' m/s')}",
    ]
    if item.cue:
        parts.append(f"cue {item.cue}")
    if item.alarm_active:
        parts.append("DRAG ALARM")
    if stale:
        parts.append("stale: " + ", ".join(stale))
    return "  ".join(parts)


def _view(station: Any) -> Any:
    """The rich renderable of the ground station's screen."""
    from rich.console import Group
    from rich.panel import Panel
    from rich.table import Table
    from rich.text import Text

    f = station.latest
    age = station.age_s()
    old = age is None or age > 3.0

    def val(text: str, stale: bool = False) -> Text:
        if stale or old:
            return Text(text + ("  (stale)" if stale else "  (old)"), style="dim")
        return Text(text, style="bold")

    t = Table.grid(padding=(0, 2))
    t.add_column(justify="right", style="cyan")
    t.add_column()
    if f is None:
        t.add_row("waiting", Text("for the first frame ...", style="yellow"))
    else:
        kmh = f"{f.speed_mps * 3.6:.1f} km/h" if f.speed_mps is not None else "--"
        t.add_row("phase", val(f.phase))
        t.add_row("speed", val(f"{_fmt(f.speed_mps, '.2f', ' m/s')}  {kmh}", f.speed_stale))
        t.add_row("power / target", val(f"{_fmt(f.power_w, '.0f')} / {_fmt(f.target_power_w, '.0f')} W",
                                        f.power_stale))
        t.add_row("distance", val(f"{_fmt(f.distance_m, '.1f', ' m')}   to trap "
                                  f"{_fmt(f.distance_to_trap_m, '.1f', ' m')}"))
        t.add_row("trap speed", val(f"predicted {_fmt(f.predicted_trap_speed_mps, '.2f')}  plan "
                                    f"{_fmt(f.planned_trap_speed_mps, '.2f')}  measured "
                                    f"{_fmt(f.trap_speed_mps, '.2f')} m/s"))
        t.add_row("W' left", val(_fmt(f.w_prime_balance_j, '.0f', ' J')))
        cda = _fmt(f.cda_m2, ".4f") + (f" +- {f.cda_sd_m2:.4f}" if f.cda_sd_m2 is not None else "")
        crr = _fmt(f.crr, ".5f") + (f" +- {f.crr_sd:.5f}" if f.crr_sd is not None else "")
        t.add_row("CdA", val(cda + " m2"))
        t.add_row("Crr", val(crr))
        t.add_row("cue", val(f.cue or "--"))
        if f.alarm_active:
            t.add_row("alarm", Text("DRAG CHANGED", style="bold red"))
        sensors = Text()
        for h in f.sensors:
            bad = h.stale or not h.link_up
            name = SENSOR_LABELS.get(h.channel, h.channel)
            label = f"{name} {'STALE' if h.stale else ('down' if not h.link_up else 'ok')}"
            sensors.append(label + "   ", style="bold red" if bad else "green")
        t.add_row("sensors", sensors)
    s = station.reader.stats
    link = Text(
        f"frames {s.frames_ok}  lost {s.lost}  corrupt {s.corrupt}  "
        f"last {('%.1f s ago' % age) if age is not None else '--'}  "
        f"port {'open' if station.port_up else 'LOST: ' + str(station.port_error)}",
        style="red" if old or not station.port_up else "green",
    )
    notes = Text("\n".join(f"{n.t_s:9.1f} s  {n.kind}: {n.text}" for n in list(station.notices)[-6:]))
    return Group(Panel(t, title=f"livecoach ground - {station.port}"), link, notes)


def run(args: argparse.Namespace) -> int:
    from livecoach.cli.main import EXIT_OK
    from livecoach.errors import ConfigError
    from livecoach.telemetry.frame import frame_to_dict
    from livecoach.telemetry.ground import GroundStation, json_line
    from livecoach.telemetry.reader import FrameFault

    if args.frames is not None and args.frames < 1:
        raise ConfigError(f"--frames {args.frames}: expected a whole number >= 1")
    if args.duration is not None and not args.duration > 0:
        raise ConfigError(f"--duration {args.duration}: expected a number of seconds > 0")
    station = GroundStation(args.port, args.baud, record=args.record)
    try:
        station.open()
        print(f"ground: listening on {args.port} at {args.baud} baud"
              + (f", recording to {args.record}" if args.record else ""), file=sys.stderr, flush=True)
        live_view = sys.stdout.isatty() and not args.json and not args.plain
        deadline = time.monotonic() + args.duration if args.duration else None
        live = None
        if live_view:
            from rich.live import Live

            live = Live(_view(station), refresh_per_second=4, transient=False)
            live.start()
        try:
            while True:
                items = station.poll()
                for item in items:
                    if args.json:
                        if isinstance(item, FrameFault):
                            obj = {"type": "fault", "kind": item.kind, "reason": item.reason,
                                   "raw_hex": item.raw.hex()}
                        else:
                            obj = frame_to_dict(item)
                        sys.stdout.write(json_line(obj) + "\n")
                    elif live is None:
                        sys.stdout.write(plain_line(item) + "\n")
                if items:
                    sys.stdout.flush()
                if live is not None:
                    live.update(_view(station))
                if args.frames is not None and station.reader.stats.frames_ok >= args.frames:
                    break
                if deadline is not None and time.monotonic() >= deadline:
                    break
        except KeyboardInterrupt:
            pass
        finally:
            if live is not None:
                live.stop()
    finally:
        station.close()
    summary = station.summary()
    if args.json:
        sys.stdout.write(json_line({"type": "summary", **summary}) + "\n")
    else:
        print(
            f"ground: {summary['frames_ok']} frames ({summary['state_frames']} state, "
            f"{summary['notice_frames']} notice), lost {summary['lost']}, corrupt "
            f"{summary['corrupt']} (COBS {summary['bad_cobs']}, CRC {summary['bad_crc']}, "
            f"layout {summary['bad_layout']}, oversize {summary['oversize']}), port drops "
            f"{summary['port_drops']}" + (f"; recorded to {args.record}" if args.record else "")
        )
    sys.stdout.flush()
    return EXIT_OK

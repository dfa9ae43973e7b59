"""``livecoach decode UUID PAYLOAD``: decode one sensor payload from a log, for debugging a sensor.

UUID is a Bluetooth SIG characteristic: ``2A63`` (Cycling Power
Measurement), ``2A5B`` (CSC Measurement) or ``2A37`` (Heart Rate
Measurement), as 16-bit hex (``2a63``, ``0x2A63``) or the full 128-bit
form; PAYLOAD is hex bytes (``30 00 fa 00``, ``3000fa00``, ``30:00:FA:00``).
For serial lines use ``mcu`` (lsl1 line) or ``nmea`` (NMEA 0183 sentence)
and give the line as text.
"""

from __future__ import annotations

import argparse
import re

from livecoach.cli.common import description_from_doc, print_json
from livecoach.errors import ConfigError, DecodeError

NAME = "decode"
HELP = "decode one sensor payload (BLE characteristic value as hex, or a serial line) for debugging"
DESCRIPTION = "Decode one sensor payload from a log, for debugging a sensor. " + description_from_doc(__doc__, HELP)

_BASE_UUID = re.compile(r"0000([0-9a-f]{4})-0000-1000-8000-00805f9b34fb\Z")
_KINDS = {"2a63": "2A63", "2a5b": "2A5B", "2a37": "2A37", "mcu": "mcu", "nmea": "nmea"}

_UNITS = {
    "instantaneous_power_w": "W",
    "pedal_power_balance_pct": "%",
    "accumulated_torque_nm": "N*m",
    "last_wheel_event_time_s": "s",
    "last_crank_event_time_s": "s",
    "heart_rate_bpm": "1/min",
    "energy_expended_kj": "kJ",
    "rr_intervals_s": "s",
}


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("uuid", metavar="UUID", help="2A63, 2A5B or 2A37 (16-bit or 128-bit form), or mcu / nmea")
    p.add_argument("payload", metavar="PAYLOAD", nargs="+",
                   help="payload bytes in hex (spaces and colons allowed), or the serial line text")
    p.add_argument("--json", action="store_true", help="print JSON")


def characteristic_kind(uuid: str) -> str:
    """Normalise a characteristic UUID (or ``mcu``/``nmea``) to 2A63/2A5B/2A37/mcu/nmea."""
    u = uuid.strip().lower()
    if u.startswith("0x"):
        u = u[2:]
    m = _BASE_UUID.match(u)
    if m:
        u = m.group(1)
    if len(u) == 8 and u.startswith("0000"):
        u = u[4:]
    kind = _KINDS.get(u)
    if kind is None:
        raise ConfigError(
            f"UUID '{uuid}' is not one this command decodes: use 2A63 (Cycling Power Measurement), "
            f"2A5B (CSC Measurement), 2A37 (Heart Rate Measurement), mcu or nmea"
        )
    return kind


def parse_hex(text: str) -> bytes:
    """Bytes from hex text; spaces, colons, dashes and a leading 0x are ignored."""
    t = text.strip()
    if t.lower().startswith("0x"):
        t = t[2:]
    t = re.sub(r"[\s:\-]", "", t)
    bad = re.search(r"[^0-9a-fA-F]", t)
    if bad:
        raise DecodeError(f"payload: '{bad.group(0)}' at position {bad.start()} is not a hex digit")
    if len(t) % 2:
        raise DecodeError(f"payload: {len(t)} hex digits is an odd number (a byte needs two)")
    return bytes.fromhex(t)


def decode_payload(kind: str, payload_text: str) -> dict:
    """Decode and return the documented JSON dict for ``kind``."""
    if kind == "mcu":
        from dataclasses import asdict

        from livecoach.codecs.mcu_line import decode_mcu_line

        rec = decode_mcu_line(payload_text.encode("utf-8", "surrogateescape"))
        return {"record": type(rec).__name__, **asdict(rec)}
    if kind == "nmea":
        from dataclasses import asdict

        from livecoach.codecs.nmea import decode_nmea

        s = decode_nmea(payload_text.encode("utf-8", "surrogateescape"), 0.0)
        if s is None:
            raise DecodeError("nmea: a well-formed sentence, but not RMC, GGA or VTG")
        out = asdict(s)
        out.pop("t_s")
        return out
    raw = parse_hex(payload_text)
    if kind == "2A63":
        from livecoach.codecs.cycling_power import decode_cycling_power

        return decode_cycling_power(raw).to_dict()
    if kind == "2A5B":
        from livecoach.codecs.csc import decode_csc

        return decode_csc(raw).to_dict()
    from livecoach.codecs.heart_rate import decode_heart_rate

    return decode_heart_rate(raw).to_dict()


def run(args: argparse.Namespace) -> int:
    kind = characteristic_kind(args.uuid)
    text = " ".join(args.payload)
    try:
        out = decode_payload(kind, text)
    except DecodeError as exc:
        raise DecodeError(f"{kind} payload '{text[:80]}': {exc}") from None
    if args.json:
        print_json(out)
        return 0
    width = max(len(k) for k in out)
    for key, value in out.items():
        unit = _UNITS.get(key, "")
        if value is None:
            shown = "(absent)"
        elif isinstance(value, list):
            shown = ", ".join(f"{v:g}" for v in value) or "(none)"
        elif isinstance(value, float):
            shown = f"{value:g}"
        else:
            shown = str(value)
        print(f"{key:<{width}}  {shown}{' ' + unit if unit and value not in (None, []) else ''}")
    return 0

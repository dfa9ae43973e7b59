"""The livecoach recording format, version 1 ("LCREC"), file suffix ``.lcrec``.

A recording keeps every raw payload the module received, in arrival order,
behind a header that says what produced it. It is written append-only and
synced at least once per ``[recording] flush_interval_s``, so a power cut
loses at most the records of the last flush interval; every record is framed
and checksummed, so a torn last record and damage in the middle are both
detected. The layout is documented here and in ``docs/recording_format.md``
so that other programs can read recordings without livecoach.

File layout
-----------
::

    offset 0   8 bytes   file signature b"LCREC01\\n" (ASCII "LCREC", format "01", LF)
    offset 8   frame 0   the header record (type 'H')
               frame 1.. event, output and end records, in the order written

Every record is one frame (all integers little-endian)::

    0      2   sync bytes 0xC7 0x3E
    2      1   record type: 'H' 0x48 header, 'E' 0x45 event, 'O' 0x4F output, 'Z' 0x5A end
    3      1   flags, 0 in version 1 (a reader rejects a frame with other flags)
    4      4   body length n, uint32 (header <= 16 MiB, other types <= 65 535)
    8      4   sequence number, uint32: 0 for the header, +1 for each frame after it
    12     n   body
    12+n   4   CRC-32 of bytes 2 .. 12+n-1 (type, flags, length, sequence, body);
               the CRC-32 of ISO-HDLC / IEEE 802.3 / zlib (polynomial 0x04C11DB7,
               reflected, initial and final XOR 0xFFFFFFFF)

Bodies::

    'H'  UTF-8 JSON object (keys in :class:`RecordingHeader`)
    'E'  float64 t_s | uint8 k | k bytes channel name (ASCII) | payload (the raw bytes)
    'O'  float64 t_s | uint8 k | k bytes output kind (ASCII) | UTF-8 JSON value
    'Z'  UTF-8 JSON object: {"events": int, "outputs": int, "dropped": int, "reason": str}

``t_s`` is the monotonic receive time, s, on the clock named by the header's
``start_monotonic_s`` (wall time of a record = ``start_wall_time_unix_s +
t_s - start_monotonic_s``). An end record is written only by a clean close;
a file without one ended by a crash or power cut (still fully readable).

Damage handling (what :mod:`livecoach.recording.reader` does): a frame whose
sync bytes, flags, length or CRC are wrong is damage. The reader then
*resynchronises*: it scans forward for the next sync bytes that begin a
complete frame with a good CRC and a later sequence number, reports the
skipped byte range and the number of records lost (from the sequence gap) as
a warning, and goes on. Damage with no good frame after it is the torn tail
of an interrupted write: skipped with a warning. In strict mode the first
damage raises :class:`livecoach.errors.RecordingError` instead.
"""

from __future__ import annotations

import json
import math
import struct
import zlib
from dataclasses import dataclass, field
from typing import Any

from livecoach.errors import RecordingError

#: First 8 bytes of every recording.
MAGIC = b"LCREC01\n"
#: Format version written in the signature and the header.
FORMAT_VERSION = 1
#: Recommended file-name suffix.
SUFFIX = ".lcrec"
#: The two bytes that start every frame.
SYNC = b"\xc7\x3e"

TYPE_HEADER = 0x48   # 'H'
TYPE_EVENT = 0x45    # 'E'
TYPE_OUTPUT = 0x4F   # 'O'
TYPE_END = 0x5A      # 'Z'
RECORD_TYPES = (TYPE_HEADER, TYPE_EVENT, TYPE_OUTPUT, TYPE_END)

#: Largest body of a header record, bytes.
MAX_HEADER_BODY = 16 * 1024 * 1024
#: Largest body of any other record, bytes.
MAX_RECORD_BODY = 65535
#: Frame bytes around the body: 12 in front, 4 (CRC) behind.
FRAME_OVERHEAD = 16

FRAME_HEAD = struct.Struct("<2sBBII")   # sync, type, flags, body length, sequence
U32 = struct.Struct("<I")
F64 = struct.Struct("<d")
_SEQ_MASK = 0xFFFFFFFF


def frame(rtype: int, seq: int, body: bytes) -> bytes:
    """One complete frame around ``body`` (see the module docstring)."""
    limit = MAX_HEADER_BODY if rtype == TYPE_HEADER else MAX_RECORD_BODY
    if len(body) > limit:
        raise RecordingError(f"record body of {len(body)} bytes exceeds the limit of {limit} bytes")
    head = FRAME_HEAD.pack(SYNC, rtype, 0, len(body), seq & _SEQ_MASK)
    crc = zlib.crc32(body, zlib.crc32(head[2:]))
    return b"".join((head, body, U32.pack(crc)))


def event_body(t_s: float, channel: str, payload: bytes) -> bytes:
    """Body of an event record: float64 t_s, uint8 name length, name, payload."""
    name = channel.encode("ascii")
    if len(name) > 255:
        raise RecordingError(f"channel name {channel!r} is longer than 255 bytes")
    return b"".join((F64.pack(t_s), bytes((len(name),)), name, payload))


def output_body(t_s: float, kind: str, value_json: bytes) -> bytes:
    """Body of an output record: float64 t_s, uint8 kind length, kind, JSON."""
    name = kind.encode("ascii")
    if len(name) > 255:
        raise RecordingError(f"output kind {kind!r} is longer than 255 bytes")
    return b"".join((F64.pack(t_s), bytes((len(name),)), name, value_json))


def canonical_json(value: Any) -> bytes:
    """Compact UTF-8 JSON with sorted keys (the form output records use).

    Floats are written with Python's shortest round-trip repr, so a value
    read back compares equal bit for bit; NaN and infinities are written as
    the JSON extensions NaN/Infinity that Python's json reads back.
    """
    return json.dumps(value, sort_keys=True, separators=(",", ":"), ensure_ascii=False,
                      default=_json_default).encode("utf-8")


def _json_default(obj: Any) -> Any:
    if isinstance(obj, (tuple, set, frozenset)):
        return list(obj)
    if isinstance(obj, bytes):
        return obj.hex()
    if hasattr(obj, "to_dict"):
        return obj.to_dict()
    return repr(obj)


# ---------------------------------------------------------------------- header
@dataclass(frozen=True, slots=True)
class SensorIdentity:
    """Which device fed a channel.

    channel: a ``livecoach.stream.events.CH_*`` name.  transport: "ble",
    "serial", "simulator", ...  address: BLE address; port / baud: serial port
    and its rate; name: the device's advertised or given name, if known.
    """

    channel: str
    transport: str
    address: str = ""
    port: str = ""
    baud: int | None = None
    name: str = ""

    def to_dict(self) -> dict[str, Any]:
        return {"channel": self.channel, "transport": self.transport, "address": self.address,
                "port": self.port, "baud": self.baud, "name": self.name}


@dataclass(frozen=True, slots=True)
class RecordingHeader:
    """What the header record holds.

    ride_text: the ride file's TOML text as loaded (``RideConfig.text``);
    ride_source: where it was loaded from; software_version: livecoach's
    version; start_wall_time_unix_s: wall time at start, s since 1970-01-01
    UTC; start_monotonic_s: the receive-time clock's reading at the same
    moment, s; sensors: the sensor identities; course_profile: the course's
    ((distance_m, elevation_m), ...) points as loaded, so a recording whose
    ride file names a GPX file replays without it; flush_interval_s: the
    writer's sync interval; extra: free JSON-able notes.
    """

    ride_text: str
    software_version: str
    start_wall_time_unix_s: float
    start_monotonic_s: float
    sensors: tuple[SensorIdentity, ...] = ()
    ride_source: str = ""
    course_profile: tuple[tuple[float, float], ...] = ()
    flush_interval_s: float | None = None
    extra: dict[str, Any] = field(default_factory=dict)

    def to_json(self) -> bytes:
        obj = {
            "format": "livecoach-recording",
            "format_version": FORMAT_VERSION,
            "software": "livecoach",
            "software_version": self.software_version,
            "start_wall_time_unix_s": self.start_wall_time_unix_s,
            "start_wall_time_utc": _utc_text(self.start_wall_time_unix_s),
            "start_monotonic_s": self.start_monotonic_s,
            "ride_source": self.ride_source,
            "ride_file": self.ride_text,
            "course_profile": [list(p) for p in self.course_profile],
            "sensors": [s.to_dict() for s in self.sensors],
            "flush_interval_s": self.flush_interval_s,
            "extra": self.extra,
        }
        return json.dumps(obj, indent=1, ensure_ascii=False, default=_json_default).encode("utf-8")

    @classmethod
    def from_json(cls, body: bytes, where: str) -> "RecordingHeader":
        """Parse a header body; ``where`` names the file in errors."""
        try:
            obj = json.loads(body.decode("utf-8"))
        except (UnicodeDecodeError, ValueError) as exc:
            raise RecordingError(f"{where}: the header is not valid UTF-8 JSON ({exc})") from None
        if not isinstance(obj, dict) or obj.get("format") != "livecoach-recording":
            raise RecordingError(f"{where}: the header does not describe a livecoach recording")
        version = obj.get("format_version")
        if version != FORMAT_VERSION:
            raise RecordingError(
                f"{where}: recording format version {version!r} is not supported "
                f"(this livecoach reads version {FORMAT_VERSION})"
            )
        try:
            sensors = tuple(
                SensorIdentity(channel=str(s["channel"]), transport=str(s.get("transport", "")),
                               address=str(s.get("address", "")), port=str(s.get("port", "")),
                               baud=None if s.get("baud") is None else int(s["baud"]),
                               name=str(s.get("name", "")))
                for s in obj.get("sensors", [])
            )
            profile = tuple((float(d), float(e)) for d, e in obj.get("course_profile") or [])
            flush = obj.get("flush_interval_s")
            header = cls(
                ride_text=str(obj["ride_file"]),
                software_version=str(obj.get("software_version", "")),
                start_wall_time_unix_s=float(obj["start_wall_time_unix_s"]),
                start_monotonic_s=float(obj["start_monotonic_s"]),
                sensors=sensors,
                ride_source=str(obj.get("ride_source", "")),
                course_profile=profile,
                flush_interval_s=None if flush is None else float(flush),
                extra=dict(obj.get("extra") or {}),
            )
        except (KeyError, TypeError, ValueError) as exc:
            raise RecordingError(f"{where}: the header is incomplete or malformed ({type(exc).__name__}: {exc})") from None
        return header

    def ride_config(self, where: str = "recording header"):
        """The ride file as a :class:`livecoach.config.ridefile.RideConfig`.

        A ride file that takes its elevation from a GPX file gets the profile
        stored in the header instead, so the recording replays on its own.
        """
        import tomllib

        from livecoach.config.ridefile import parse_ride_dict
        from livecoach.errors import ConfigError

        try:
            data = tomllib.loads(self.ride_text)
        except tomllib.TOMLDecodeError as exc:
            raise ConfigError(f"{where}: the stored ride file is not valid TOML: {exc}") from None
        course = data.get("course")
        if isinstance(course, dict) and course.get("gpx") and self.course_profile:
            course = dict(course)
            del course["gpx"]
            course["elevation"] = [list(p) for p in self.course_profile]
            data = dict(data, course=course)
        return parse_ride_dict(data, where, None, self.ride_text)


def _utc_text(unix_s: float) -> str:
    import datetime as _dt

    if not math.isfinite(unix_s):
        return ""
    return _dt.datetime.fromtimestamp(unix_s, _dt.timezone.utc).isoformat(timespec="milliseconds")


def sensors_from_ride(ride: Any) -> tuple[SensorIdentity, ...]:
    """Sensor identities as configured in the ride file's ``[sensors]`` section."""
    from livecoach.stream.events import CH_CSC, CH_GPS, CH_HEART_RATE, CH_MCU, CH_POWER

    s = ride.sensors
    out = []
    if s.power_address:
        out.append(SensorIdentity(CH_POWER, "ble", address=s.power_address))
    if s.speed_address:
        out.append(SensorIdentity(CH_CSC, "ble", address=s.speed_address))
    if s.heart_rate_address:
        out.append(SensorIdentity(CH_HEART_RATE, "ble", address=s.heart_rate_address))
    if s.gps_port:
        out.append(SensorIdentity(CH_GPS, "serial", port=s.gps_port, baud=s.gps_baud))
    if s.mcu_port:
        out.append(SensorIdentity(CH_MCU, "serial", port=s.mcu_port, baud=s.mcu_baud))
    return tuple(out)


def header_for_ride(ride: Any, *, start_wall_time_unix_s: float, start_monotonic_s: float,
                    sensors: tuple[SensorIdentity, ...] | None = None,
                    extra: dict[str, Any] | None = None) -> RecordingHeader:
    """A header for ``ride`` (a RideConfig). The caller (the shell) reads the clocks."""
    from livecoach import __version__

    course = ride.course
    return RecordingHeader(
        ride_text=ride.text,
        software_version=__version__,
        start_wall_time_unix_s=start_wall_time_unix_s,
        start_monotonic_s=start_monotonic_s,
        sensors=sensors_from_ride(ride) if sensors is None else tuple(sensors),
        ride_source=ride.source,
        course_profile=tuple(zip(course.distances_m, course.elevations_m)),
        flush_interval_s=ride.recording.flush_interval_s,
        extra=dict(extra or {}),
    )

"""One root exception type for the whole project, with specific subclasses.

Every error a user can cause carries a message that says what was wrong and
where (file, key, line, byte offset), so the CLI can print it without a
traceback.
"""

from __future__ import annotations


class LivecoachError(Exception):
    """Root of every error livecoach raises on purpose."""


class ConfigError(LivecoachError):
    """A ride file or scenario file is missing, unreadable or invalid."""


class PhysicsError(LivecoachError):
    """A physics computation got inputs outside its domain (e.g. negative mass)."""


class NoSolutionError(PhysicsError):
    """A root finder or planner found no solution (e.g. a power too low to climb)."""


class DecodeError(LivecoachError):
    """A sensor payload (BLE bytes, serial line, NMEA sentence) could not be decoded."""


class EncodeError(LivecoachError):
    """A measurement cannot be encoded: a field is out of its protocol range or
    disagrees with the flags (used by the codecs' encoders and the simulator)."""


class RecordingError(LivecoachError):
    """A recording file is missing, corrupt, or cannot be written."""


class SourceError(LivecoachError):
    """A sensor source (serial port, BLE adapter) failed in a way the caller must see."""


class PlanError(LivecoachError):
    """The run-up cannot be planned with the given course, vehicle and rider."""


class CsvImportError(LivecoachError):
    """A CSV ride file is missing a required column or has bad values."""


class ExportError(LivecoachError):
    """An export (e.g. a recording written out as CSV) cannot be written."""


class FrameError(DecodeError):
    """A radio telemetry frame is corrupt: bad COBS stuffing, bad CRC, wrong
    length, unknown version or type (the ground station counts and skips it)."""


class SinkError(LivecoachError):
    """An output for the rider (screen, sound) cannot work as set up: a
    player or speech program is missing, or a sound file cannot be made."""


class ReportError(LivecoachError):
    """A post-ride report cannot be made (no data, output folder not writable)."""

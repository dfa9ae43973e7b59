"""Sensor emulators: from the true motion to the bytes and lines real sensors send.

Each emulator is advanced once per integration step with a :class:`StepInfo`
and posts payloads, encoded by the project's own codecs, to an
:class:`Outbox` with their receive times; the fault injector sits in the
outbox, so faults act on the bytes, as in the field.
"""

from sim.sensors.base import Outbox, SensorClock, StepInfo

__all__ = ["Outbox", "SensorClock", "StepInfo"]

"""Sensor sources (imperative shell): BLE (bleak) and serial lines (pyserial).

Each source has ``async run(queue)`` and ``async stop()`` and puts
:class:`livecoach.stream.events.RawEvent` objects, stamped with an injectable
monotonic clock, on the live loop's asyncio queue; link changes go on the
``link`` channel. :func:`sources_from_ride` builds the sources a ride file's
``[sensors]`` section asks for.
"""

from __future__ import annotations

import time
from typing import Any

from livecoach.sources.common import Clock


def sources_from_ride(ride: Any, *, clock: Clock = time.monotonic, ble_backend: Any = None) -> list[Any]:
    """The sources configured in ``ride.sensors``: one per BLE address (allow-list)
    and one per serial port (GPS at ``gps_baud``, microcontroller at ``mcu_baud``)."""
    from livecoach.sources.ble import ble_sources_from_sensors
    from livecoach.sources.serial_line import gps_source, mcu_source

    s = ride.sensors
    out: list[Any] = ble_sources_from_sensors(s, clock=clock, backend=ble_backend)
    if s.gps_port.strip():
        out.append(gps_source(s.gps_port.strip(), s.gps_baud, clock=clock))
    if s.mcu_port.strip():
        out.append(mcu_source(s.mcu_port.strip(), s.mcu_baud, clock=clock))
    return out


__all__ = ["sources_from_ride"]

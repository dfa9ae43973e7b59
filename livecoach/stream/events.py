"""The event model shared by every source, the recording, replay and the pipeline.

Every source (BLE, serial, simulator, replay, CSV import) turns what it
receives into :class:`RawEvent` objects: the bytes exactly as they arrived,
the channel they arrived on, and the monotonic receive time. Those are what
the recording keeps and what the processing pipeline consumes, so a replay
feeds the pipeline the very same sequence the live loop saw.
"""

from __future__ import annotations

from dataclasses import dataclass

# Channels. The payload format is fixed by the channel.
#: Bluetooth SIG Cycling Power Measurement (0x2A63) notification bytes.
CH_POWER = "ble.cycling_power"
#: Bluetooth SIG CSC Measurement (0x2A5B) notification bytes (wheel-speed sensor).
CH_CSC = "ble.csc"
#: Bluetooth SIG Heart Rate Measurement (0x2A37) notification bytes.
CH_HEART_RATE = "ble.heart_rate"
#: One NMEA 0183 sentence from the GPS, ASCII bytes without the CR LF.
CH_GPS = "serial.gps"
#: One line of the livecoach microcontroller line protocol, without the LF.
CH_MCU = "serial.mcu"
#: Link state of a source, UTF-8 text "<channel> <state>" with state in
#: {"up", "down", "reconnecting"}; produced by the source adapters.
CH_LINK = "link"
#: Rider/crew control input, UTF-8 text (e.g. "marker" for a marker-button press).
CH_CONTROL = "control"
#: A tick with an empty payload: lets time-driven logic run when no sensor speaks.
CH_TICK = "tick"

ALL_CHANNELS = (CH_POWER, CH_CSC, CH_HEART_RATE, CH_GPS, CH_MCU, CH_LINK, CH_CONTROL, CH_TICK)


@dataclass(frozen=True, slots=True)
class RawEvent:
    """One received payload.

    t_s: monotonic receive time, s (``time.monotonic()`` live; the simulated
    clock in the simulator; the recorded value in replay).
    channel: one of the ``CH_*`` names above.
    payload: the bytes exactly as received (BLE value, or a serial line
    without its terminator).
    """

    t_s: float
    channel: str
    payload: bytes

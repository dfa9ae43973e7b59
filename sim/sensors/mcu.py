"""The sensor microcontroller: lines of the livecoach line protocol (lsl1).

It sends a hello line when it starts, then ``air`` lines from the optional
air-speed probe (pitot: air speed along the vehicle axis = ground speed +
wind along the course, with a calibration error and random error) and the
optional barometer/thermometer (static pressure at the vehicle's elevation),
and ``whl`` lines when the wheel's hall sensor is wired to it. Its clock is
a free-running 32-bit microsecond counter (wraps after about 71.6 min).
Lines come from :func:`livecoach.codecs.mcu_line.encode_mcu_line`.
"""

from __future__ import annotations

import math

from livecoach.codecs.mcu_line import McuAir, McuHello, McuWheel, encode_mcu_line
from livecoach.errors import EncodeError
from livecoach.stream.events import CH_MCU
from sim.randomness import Normals
from sim.scenario import AirspeedSettings, BarometerSettings
from sim.sensors.base import Outbox, SensorClock, StepInfo

_U32 = 0xFFFFFFFF
FIRMWARE = "lcsim-1.0"


class Microcontroller:
    """Emulates the microcontroller; call :meth:`advance` once per step."""

    def __init__(self, airspeed: AirspeedSettings, barometer: BarometerSettings, seed: int) -> None:
        self.airspeed = airspeed
        self.barometer = barometer
        self.noise = Normals(seed, "mcu.noise")
        setup = Normals(seed, "mcu.setup")
        # Started a few seconds to an hour before the run: exercises the 32-bit wrap sometimes.
        self.clock = SensorClock(offset_s=5.0 + 4000.0 * setup.uniform(), ppm=0.0)
        self.gain = 1.0 + airspeed.gain_error_pct / 100.0
        self.next_air_s = (1.0 / airspeed.rate_hz) * setup.uniform() if airspeed.enabled else math.inf
        self.next_baro_s = (1.0 / barometer.rate_hz) * setup.uniform() if barometer.enabled else math.inf
        self.started = False
        self.lines = 0
        self.unsendable = 0

    def t_us(self, t_s: float) -> int:
        """The microcontroller's microsecond counter at ``t_s`` (wrapped to 32 bits)."""
        return int(self.clock.sensor_s(t_s) * 1_000_000) & _U32

    def _send(self, t_s: float, record, outbox: Outbox, latency_s: float) -> None:
        try:
            line = encode_mcu_line(record)
        except EncodeError:
            # A reading the protocol cannot carry (e.g. air speed out of range): the
            # firmware would skip it too.
            self.unsendable += 1
            return
        self.lines += 1
        outbox.post(t_s + latency_s, CH_MCU, line)

    def start(self, t_s: float, outbox: Outbox) -> None:
        self.started = True
        self._send(t_s, McuHello(self.t_us(t_s), FIRMWARE), outbox, 0.001)

    def send_wheel(self, t_s: float, revolutions: int, last_event_s: float, outbox: Outbox) -> None:
        """A ``whl`` line: cumulative hall revolutions and the last one's time."""
        rec = McuWheel(self.t_us(t_s), revolutions & _U32, self.t_us(last_event_s))
        self._send(t_s, rec, outbox, 0.001)

    def advance(self, step: StepInfo, outbox: Outbox) -> None:
        """Send the air-speed and barometer lines due in the step."""
        a, b = self.airspeed, self.barometer
        while min(self.next_air_s, self.next_baro_s) <= step.t1_s:
            if self.next_air_s <= self.next_baro_s:
                t = self.next_air_s
                v_air = step.speed_at(t) + step.headwind_mps
                measured = v_air * (self.gain + a.noise_pct / 100.0 * self.noise.next())
                measured += a.noise_mps * self.noise.next()
                self._send(t, McuAir(self.t_us(t), airspeed_mps=measured), outbox, a.latency_s)
                self.next_air_s += 1.0 / a.rate_hz
            else:
                t = self.next_baro_s
                rec = McuAir(
                    self.t_us(t),
                    pressure_pa=step.pressure_pa + b.noise_pa * self.noise.next(),
                    temperature_c=step.temperature_c + b.temperature_noise_c * self.noise.next(),
                    relative_humidity_pct=step.relative_humidity_pct,
                )
                self._send(t, rec, outbox, b.latency_s)
                self.next_baro_s += 1.0 / b.rate_hz

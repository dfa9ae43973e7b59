"""The wheel-speed sensor: Bluetooth SIG CSC Measurement (0x2A5B) notifications,
or ``whl`` lines of the microcontroller's line protocol (hall sensor).

The sensor counts whole revolutions of the wheel it watches (true rolling
circumference) and keeps the time of the last one on its own clock, in
1/1024 s ticks for CSC (Bluetooth SIG CSCS v1.0) or microseconds for the
mcu hall sensor; the simulator computes each revolution's exact time from
the integrated motion (see :meth:`StepInfo.crossing_time_s`). Counters and
event times wrap in the codec (uint32 revolutions, uint16 ticks: a 64 s
period).
"""

from __future__ import annotations

from livecoach.codecs.csc import TICKS_PER_S, CscMeasurement, encode_csc
from livecoach.stream.events import CH_CSC
from sim.randomness import Normals
from sim.scenario import WheelSensorSettings
from sim.sensors.base import Outbox, SensorClock, StepInfo


class WheelSensor:
    """Emulates the wheel-speed sensor; call :meth:`advance` once per step."""

    def __init__(self, cfg: WheelSensorSettings, circumference_m: float, seed: int,
                 mcu=None) -> None:
        self.cfg = cfg
        self.circumference_m = circumference_m
        self.latency = Normals(seed, "wheel_sensor.latency")
        setup = Normals(seed, "wheel_sensor.setup")
        self.clock = SensorClock(offset_s=50.0 + 500.0 * setup.uniform(), ppm=cfg.clock_ppm)
        self.interval_s = 1.0 / cfg.rate_hz
        self.next_report_s = self.interval_s * setup.uniform()
        # The magnet is somewhere on the wheel at the start.
        self.next_event_m = circumference_m * setup.uniform()
        #: Distance of the first revolution event after the start, m.
        self.phase_m = self.next_event_m
        self.revolutions = int(setup.integers(0, 2_000_000))
        self.last_event_s = -1.0 * setup.uniform()
        self.mcu = mcu
        self.reports = 0
        self.events = 0

    def advance(self, step: StepInfo, outbox: Outbox) -> None:
        """Count the revolutions completed in the step; send the reports due."""
        pending = []
        while self.next_event_m <= step.x1_m:
            pending.append(step.crossing_time_s(self.next_event_m))
            self.next_event_m += self.circumference_m
        i = 0
        while self.next_report_s <= step.t1_s:
            tr = self.next_report_s
            while i < len(pending) and pending[i] <= tr:
                self._count(pending[i])
                i += 1
            self._report(tr, outbox)
            self.next_report_s += self.interval_s
        for t in pending[i:]:
            self._count(t)

    def _count(self, t_s: float) -> None:
        self.revolutions += 1
        self.events += 1
        self.last_event_s = t_s

    def _report(self, t_s: float, outbox: Outbox) -> None:
        self.reports += 1
        if self.mcu is not None:
            self.mcu.send_wheel(t_s, self.revolutions, self.last_event_s, outbox)
            return
        m = CscMeasurement.make(wheel=(self.revolutions, self.clock.ticks(self.last_event_s, TICKS_PER_S)))
        cfg = self.cfg
        delay = max(0.002, cfg.latency_s + cfg.latency_jitter_s * self.latency.next())
        outbox.post(t_s + delay, CH_CSC, encode_csc(m))

"""The crank power meter: Bluetooth SIG Cycling Power Measurement (0x2A63) notifications.

What a crank meter does (common practice): it measures torque and crank
angular velocity, and at each notification reports the mean power over the
interval since the previous one, rounded to whole watts, with the cumulative
crank revolutions and the time of the last crank event (1/1024 s, its own
clock) and, optionally, the accumulated torque (1/32 N*m; crank work =
2*pi * accumulated torque), which integrates the same measured (noisy) power
as the reports. It sends 0 W when the cranks have not turned.

Errors modelled: a calibration scale error ``bias_pct``, a zero offset
``offset_w`` (plus a drift when a fault asks for it), and per-report noise
N(0, (noise_pct % * P)^2 + noise_w^2). Payloads come from
:func:`livecoach.codecs.cycling_power.encode_cycling_power`.
"""

from __future__ import annotations

import math
from livecoach.codecs.cycling_power import (
    CRANK_TICKS_PER_S,
    CyclingPowerMeasurement,
    encode_cycling_power,
)
from livecoach.stream.events import CH_POWER
from sim.randomness import Normals
from sim.scenario import PowerMeterSettings
from sim.sensors.base import Outbox, SensorClock, StepInfo

TWO_PI = 2.0 * math.pi


class PowerMeter:
    """Emulates a crank power meter; call :meth:`advance` once per step."""

    def __init__(self, cfg: PowerMeterSettings, cadence_rpm: float, seed: int, faults=None) -> None:
        self.cfg = cfg
        self.cadence_rpm = cadence_rpm
        self.noise = Normals(seed, "power_meter.noise")
        self.latency = Normals(seed, "power_meter.latency")
        setup = Normals(seed, "power_meter.setup")
        self.clock = SensorClock(offset_s=100.0 + 900.0 * setup.uniform(), ppm=cfg.clock_ppm)
        self.interval_s = 1.0 / cfg.rate_hz
        self.next_report_s = self.interval_s * setup.uniform()
        self.window_start_s = 0.0
        self.window_energy_j = 0.0
        self.window_pedalled = False
        self.crank_revs = float(setup.integers(0, 60000))
        self.crank_count = int(self.crank_revs)
        self.crank_event_s = 0.0
        self.measured_work_j = 0.0
        self.faults = faults
        self.reports = 0
        self.last_payload = b""

    def _scale(self) -> float:
        return 1.0 + self.cfg.bias_pct / 100.0

    def _offset(self, t_s: float) -> float:
        extra = self.faults.power_offset_w(t_s) if self.faults is not None else 0.0
        return self.cfg.offset_w + extra

    def advance(self, step: StepInfo, outbox: Outbox) -> None:
        """Account for one step and send the reports that fall due in it."""
        t0, t1, p = step.t0_s, step.t1_s, step.power_w
        pedalling = p > 0.0
        t = t0
        while self.next_report_s <= t1:
            tr = self.next_report_s
            self._accumulate(t, tr, p, pedalling)
            self._report(tr, outbox, step)
            t = tr
            self.next_report_s += self.interval_s
        self._accumulate(t, t1, p, pedalling)

    def _accumulate(self, ta: float, tb: float, p: float, pedalling: bool) -> None:
        dt = tb - ta
        if dt <= 0.0:
            return
        self.window_energy_j += p * dt
        if pedalling:
            self.window_pedalled = True
            revs0 = self.crank_revs
            self.crank_revs += self.cadence_rpm / 60.0 * dt
            whole = int(self.crank_revs)
            if whole > self.crank_count:
                # Time of the last whole revolution in this interval (constant cadence).
                self.crank_event_s = ta + (whole - revs0) / (self.cadence_rpm / 60.0)
                self.crank_count = whole

    def _report(self, t_s: float, outbox: Outbox, step: StepInfo) -> None:
        cfg = self.cfg
        window = t_s - self.window_start_s
        mean_w = self.window_energy_j / window if window > 0.0 else 0.0
        if self.faults is not None:
            self.faults.note_offset_reports(t_s)
        if self.window_pedalled:
            value = mean_w * self._scale() + self._offset(t_s)
            value += mean_w * cfg.noise_pct / 100.0 * self.noise.next() + cfg.noise_w * self.noise.next()
            value = max(0.0, value)
        else:
            value = 0.0
        # The meter integrates the torque it measures: the same errors as the report.
        self.measured_work_j += value * window
        crank = None
        if cfg.crank_data:
            crank = (self.crank_count, self.clock.ticks(self.crank_event_s, CRANK_TICKS_PER_S))
        torque = max(0.0, self.measured_work_j) / TWO_PI if cfg.torque_data else None
        m = CyclingPowerMeasurement.make(
            min(value, 32767.0), crank=crank, accumulated_torque_nm=torque, torque_crank_based=True
        )
        payload = encode_cycling_power(m)
        self.last_payload = payload
        self.reports += 1
        self.window_start_s = t_s
        self.window_energy_j = 0.0
        self.window_pedalled = False
        delay = max(0.002, cfg.latency_s + cfg.latency_jitter_s * self.latency.next())
        outbox.post(t_s + delay, CH_POWER, payload)

"""The heart-rate strap: Bluetooth SIG Heart Rate Measurement (0x2A37) notifications.

A plain first-order model, for completeness of the stream rather than for
physiology: the heart rate approaches rest + (max - rest) * clamp(0.25 +
0.6 * P/CP + 0.3 * (1 - W'bal/W'), 0, 1) with a time constant of 30 s
(mono-exponential heart-rate kinetics of that order are common practice; the
constants are from memory). RR intervals are 60/HR. Payloads from
:func:`livecoach.codecs.heart_rate.encode_heart_rate`.
"""

from __future__ import annotations

import math

from livecoach.codecs.heart_rate import HeartRateMeasurement, encode_heart_rate
from livecoach.stream.events import CH_HEART_RATE
from sim.randomness import Normals
from sim.scenario import HeartRateSettings
from sim.sensors.base import Outbox, StepInfo

TIME_CONSTANT_S = 30.0


class HeartRateStrap:
    """Emulates a heart-rate strap; call :meth:`advance` once per step."""

    def __init__(self, cfg: HeartRateSettings, cp_w: float, w_prime_j: float, seed: int) -> None:
        self.cfg = cfg
        self.cp_w = cp_w
        self.w_prime_j = w_prime_j
        self.hr_bpm = cfg.rest_bpm
        self.latency = Normals(seed, "heart_rate.latency")
        setup = Normals(seed, "heart_rate.setup")
        self.interval_s = 1.0 / cfg.rate_hz
        self.next_report_s = self.interval_s * setup.uniform()
        self.reports = 0

    def advance(self, step: StepInfo, outbox: Outbox) -> None:
        cfg = self.cfg
        dt = step.t1_s - step.t0_s
        fatigue = 1.0 - max(0.0, step.w_prime_balance_j) / self.w_prime_j
        drive = min(1.0, max(0.0, 0.25 + 0.6 * step.power_w / self.cp_w + 0.3 * fatigue))
        target = cfg.rest_bpm + (cfg.max_bpm - cfg.rest_bpm) * drive
        self.hr_bpm += (target - self.hr_bpm) * (1.0 - math.exp(-dt / TIME_CONSTANT_S))
        while self.next_report_s <= step.t1_s:
            t = self.next_report_s
            m = HeartRateMeasurement.make(self.hr_bpm, rr_intervals_s=(60.0 / self.hr_bpm,), contact=True)
            delay = max(0.002, cfg.latency_s + 0.01 * self.latency.next())
            outbox.post(t + delay, CH_HEART_RATE, encode_heart_rate(m))
            self.reports += 1
            self.next_report_s += self.interval_s

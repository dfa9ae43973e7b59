"""Rollover unwrapping, wheel speed and cadence from sensor event times.

The speed formula is the one of the Bluetooth SIG CSCS v1.0 (speed =
delta wheel revolutions * circumference / delta last-wheel-event time);
event times are uint16 in 1/1024 s (CSC) or 1/2048 s (Cycling Power wheel
data) and wrap every 64 s / 32 s (CSCS v1.0, CPS v1.1).
"""

from __future__ import annotations

import math
import random

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from livecoach.codecs.revolutions import (
    COUNTER_BACKWARDS,
    INCONSISTENT,
    CounterUnwrapper,
    RevolutionTracker,
    cadence_rpm,
    ticks_from_time_s,
    wheel_speed_mps,
    wrap_delta,
)
from livecoach.errors import DecodeError


def test_wrap_delta():
    assert wrap_delta(5, 65530, 16) == 11
    assert wrap_delta(3, 2**32 - 2, 32) == 5
    assert wrap_delta(7, 7, 16) == 0


def test_speed_and_cadence_formulas():
    # CSCS v1.0 formula: 10 revolutions of a 2.1 m wheel in 2 s -> 10.5 m/s.
    assert wheel_speed_mps(10, 2.0, 2.1) == pytest.approx(10.5)
    assert wheel_speed_mps(0, 0.0, 2.1) == 0.0
    assert cadence_rpm(3, 2.0) == pytest.approx(90.0)
    with pytest.raises(ValueError):
        wheel_speed_mps(1, 0.0, 2.1)


def test_counter_unwrapper_across_16_bit_rollover():
    u = CounterUnwrapper(16)
    assert u.update(65534) == 65534
    assert u.update(1) == 65537
    assert u.update(10) == 65546
    with pytest.raises(DecodeError, match=COUNTER_BACKWARDS):
        u.update(5)
    assert u.update(8) == 65549  # re-based on 5


@settings(max_examples=100, deadline=None)
@given(st.integers(0, 2**32 - 1), st.lists(st.integers(0, 2**31 - 1), max_size=40))
def test_counter_unwrapper_recovers_true_count(start, steps):
    u = CounterUnwrapper(32)
    true = start
    u.update(start % 2**32)
    for s in steps:
        true += s
        assert u.update(true % 2**32) == true


def _simulate(speed_mps, circumference_m, duration_s, ticks_per_s, notify_s, t0_s=0.0):
    """Readings of a sensor on a wheel turning at a constant speed; event time
    of revolution k is k * circumference / speed (sensor clock starts at t0)."""
    tracker = RevolutionTracker(32, ticks_per_s)
    period_s = circumference_m / speed_mps
    speeds = []
    t = notify_s
    while t < duration_s:
        k = int(t / period_s)
        ev = t0_s + k * period_s
        r = tracker.update(k % 2**32, ticks_from_time_s(ev, ticks_per_s), t)
        if r.new_event:
            speeds.append(wheel_speed_mps(r.delta_revolutions, r.delta_time_s, circumference_m))
        t += notify_s
    return speeds


@pytest.mark.parametrize("ticks_per_s", [1024, 2048])
def test_constant_speed_over_many_rollovers(ticks_per_s):
    # 200 s at 24.5 m/s crosses the 16-bit event-time rollover 3-6 times.
    speeds = _simulate(24.5, 1.47, 200.0, ticks_per_s, 0.25, t0_s=50.0)
    assert len(speeds) > 700
    # each reading is off only by the tick quantisation: 1 tick over ~4 revolutions
    tol = 24.5 * (1.0 / ticks_per_s) / 0.2
    assert max(abs(s - 24.5) for s in speeds) < tol


def test_gap_longer_than_rollover_period_uses_receive_time_for_whole_periods():
    tr = RevolutionTracker(32, 1024)
    tr.update(100, ticks_from_time_s(10.0, 1024), 10.1)
    # The wheel stood still 150 s (more than two 64 s periods), then turned once.
    r = tr.update(100, ticks_from_time_s(10.0, 1024), 100.0)
    assert not r.new_event
    assert tr.stopped(100.0, timeout_s=3.0)
    r = tr.update(101, ticks_from_time_s(160.5, 1024), 160.7)
    assert r.new_event and r.delta_revolutions == 1
    assert r.delta_time_s == pytest.approx(150.5, abs=1e-3)
    assert r.event_time_s == pytest.approx(160.5, abs=1e-3)
    assert not tr.stopped(161.0, timeout_s=3.0)
    assert tr.rate_upper_bound_hz(162.7) == pytest.approx(0.5)


def test_repeated_event_time_means_no_new_event():
    tr = RevolutionTracker(16, 1024)
    tr.update(10, 1000, 1.0)
    r = tr.update(10, 1000, 2.0)
    assert not r.new_event and r.rate_hz is None


def test_inconsistent_and_backwards_data_raise_and_rebase():
    tr = RevolutionTracker(16, 1024)
    tr.update(10, 1000, 1.0)
    with pytest.raises(DecodeError, match=INCONSISTENT):
        tr.update(10, 1500, 1.5)      # event time moved without a revolution
    with pytest.raises(DecodeError, match=INCONSISTENT):
        tr.update(12, 1500, 2.0)      # revolutions without a new event time
    with pytest.raises(DecodeError, match=COUNTER_BACKWARDS):
        tr.update(3, 2000, 2.5)       # counter reset (battery change)
    r = tr.update(5, 3024, 3.5)       # continues from the re-based state
    assert r.new_event and r.delta_revolutions == 2 and r.delta_time_s == pytest.approx(1.0)


def test_crank_cadence_with_16_bit_counter_rollover():
    tr = RevolutionTracker(16, 1024)
    rng = random.Random(7)
    cadence = 95.0
    period_s = 60.0 / cadence
    base = 65500
    t = 0.3
    results = []
    while t < 90.0:
        k = int(t / period_s)
        r = tr.update((base + k) % 65536, ticks_from_time_s(k * period_s, 1024), t + rng.uniform(0, 0.05))
        if r.new_event:
            results.append(cadence_rpm(r.delta_revolutions, r.delta_time_s))
        t += 1.0
    assert r.revolutions > 65536  # crossed the counter rollover
    assert all(math.isclose(c, cadence, rel_tol=2e-3) for c in results)

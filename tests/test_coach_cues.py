"""Cue state machine: hysteresis, minimum dwell, latched phase cues."""

from __future__ import annotations

import random

from hypothesis import given, settings
from hypothesis import strategies as st

from livecoach.coach.cues import (
    CUE_DONE,
    CUE_EASE,
    CUE_GO,
    CUE_LIFT,
    CUE_READY,
    CUE_STEADY,
    CUE_TEXT,
    CUE_TRAP,
    CueMachine,
)


def _run(machine, samples, phase=None):
    changes = []
    for t, p in samples:
        if machine.update(t, rolling=True, phase_cue=phase, power_w=p, target_w=330.0):
            changes.append((t, machine.cue))
    return changes


def test_ready_then_steady_when_rolling():
    m = CueMachine()
    assert not m.update(0.0, rolling=False, phase_cue=None, power_w=None, target_w=330.0)
    assert m.cue == CUE_READY
    assert m.update(1.0, rolling=True, phase_cue=None, power_w=200.0, target_w=330.0)
    assert m.cue == CUE_STEADY


def test_enter_and_leave_bands_with_hysteresis():
    m = CueMachine(band_enter_pct=8.0, band_exit_pct=3.0, band_min_w=0.0, min_dwell_s=0.0)
    m.update(0.0, rolling=True, phase_cue=None, power_w=330.0, target_w=330.0)
    # 6 % low: inside the enter band, stays steady.
    assert not m.update(1.0, rolling=True, phase_cue=None, power_w=310.0, target_w=330.0)
    # 10 % low: lift.
    assert m.update(2.0, rolling=True, phase_cue=None, power_w=297.0, target_w=330.0)
    assert m.cue == CUE_LIFT
    # Back to 5 % low: still lift (exit band is 3 %).
    assert not m.update(3.0, rolling=True, phase_cue=None, power_w=313.5, target_w=330.0)
    assert m.update(4.0, rolling=True, phase_cue=None, power_w=322.0, target_w=330.0)
    assert m.cue == CUE_STEADY
    assert m.update(5.0, rolling=True, phase_cue=None, power_w=365.0, target_w=330.0)
    assert m.cue == CUE_EASE


def test_minimum_dwell_holds_a_cue():
    m = CueMachine(band_min_w=0.0, min_dwell_s=4.0)
    m.update(0.0, rolling=True, phase_cue=None, power_w=330.0, target_w=330.0)
    assert not m.update(1.0, rolling=True, phase_cue=None, power_w=250.0, target_w=330.0)  # dwell
    assert m.update(4.5, rolling=True, phase_cue=None, power_w=250.0, target_w=330.0)
    assert m.cue == CUE_LIFT
    assert not m.update(5.0, rolling=True, phase_cue=None, power_w=330.0, target_w=330.0)
    assert m.update(8.6, rolling=True, phase_cue=None, power_w=330.0, target_w=330.0)


def test_phase_cues_take_over_at_once_and_latch():
    m = CueMachine(min_dwell_s=10.0)
    m.update(0.0, rolling=True, phase_cue=None, power_w=330.0, target_w=330.0)
    assert m.update(0.5, rolling=True, phase_cue=CUE_GO, power_w=330.0, target_w=900.0)
    assert m.cue == CUE_GO
    # Power far off target during the closing effort: no lift/ease, and no going back.
    assert not m.update(1.0, rolling=True, phase_cue=None, power_w=100.0, target_w=900.0)
    assert m.cue == CUE_GO
    assert m.update(1.5, rolling=True, phase_cue=CUE_TRAP, power_w=700.0, target_w=700.0)
    assert not m.update(2.0, rolling=True, phase_cue=CUE_GO, power_w=700.0, target_w=700.0)
    assert m.update(2.5, rolling=True, phase_cue=CUE_DONE, power_w=0.0, target_w=0.0)
    assert m.cue == CUE_DONE
    assert all(CUE_TEXT[c] for c in (CUE_READY, CUE_LIFT, CUE_STEADY, CUE_EASE, CUE_GO, CUE_TRAP, CUE_DONE))


def test_noisy_power_around_target_does_not_flap():
    # A rider on target with 5 % power noise at 4 Hz for 5 minutes (seeded).
    rng = random.Random(5)
    m = CueMachine()
    samples = [(i * 0.25, 330.0 * (1.0 + rng.gauss(0.0, 0.05))) for i in range(1200)]
    # Smoothed as the live coach does (3 s time constant).
    smoothed, avg = [], None
    for t, p in samples:
        avg = p if avg is None else avg + (1 - 2.718281828 ** (-0.25 / 3.0)) * (p - avg)
        smoothed.append((t, avg))
    changes = _run(m, smoothed)
    assert len(changes) <= 3


@settings(max_examples=40, deadline=None)
@given(st.lists(st.floats(0.0, 900.0), min_size=10, max_size=200), st.floats(0.5, 10.0))
def test_never_faster_than_the_dwell(powers, dwell):
    m = CueMachine(min_dwell_s=dwell)
    changes = _run(m, [(i * 0.5, p) for i, p in enumerate(powers)])
    times = [t for t, _ in changes]
    # The first change (ready -> steady) may come at once; later ones respect the dwell.
    for a, b in zip(times[1:], times[2:]):
        assert b - a >= dwell - 1e-9

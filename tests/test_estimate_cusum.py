"""CUSUM change alarm (Page 1954): one alarm per step change, none on a clean run."""

from __future__ import annotations

import random

import pytest

from livecoach.estimate import LiveDragEstimator
from livecoach.estimate.cusum import Cusum
from livecoach.estimate.synthetic import example_ride, synthesize_ride

CDA, CRR = 0.032, 0.004


def test_cusum_unit_step_and_quiet():
    # Page (1954): with k = 0.5 and h = 8 the in-control run length of a two-sided
    # CUSUM on N(0, 1) is tens of thousands of steps (Siegmund's approximation gives
    # about 1e4 per side, from memory); a 1.5-sd shift is caught within ~h/(1.5-k) steps.
    rng = random.Random(42)
    c = Cusum(0.5, 8.0)
    assert all(c.update(rng.gauss(0.0, 1.0), float(i)) is None for i in range(3000))
    c.reset()
    alarm = None
    for i in range(100):
        z = rng.gauss(0.0, 1.0) + (1.5 if i >= 50 else 0.0)
        alarm = c.update(z, float(i)) or alarm
        if alarm:
            break
    assert alarm is not None and alarm.sign == 1
    assert 45 <= alarm.start_t_s <= 55
    assert i - 50 <= 20


def _alarms(ride, syn):
    est = LiveDragEstimator(ride)
    out = []
    for s in syn.samples:
        est.feed(s)
        out += est.pop_alarms()
    return est, out


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_one_alarm_per_step_and_none_on_a_clean_run(seed):
    ride = example_ride()
    clean = synthesize_ride(ride, cda_m2=CDA, crr=CRR, seed=seed, gust_rms_mps=0.2)
    _, alarms = _alarms(ride, clean)
    assert alarms == []
    # +10 % CdA at t = 150 s (a seam opens)
    step = synthesize_ride(ride, cda_m2=CDA, crr=CRR, seed=seed, gust_rms_mps=0.2,
                           cda_steps=((150.0, 1.1 * CDA),))
    est, alarms = _alarms(ride, step)
    assert len(alarms) == 1
    a = alarms[0]
    assert 130.0 <= a.start_t_s <= 165.0
    assert 150.0 < a.t_s < 210.0
    assert a.step_cda_m2 == pytest.approx(0.1 * CDA, rel=0.5)
    assert "drag changed" in a.text and a.kind == "drag_changed"
    # After the restart the estimate follows the new drag area.
    snap = est.snapshot()
    assert abs(snap.cda_m2 - 1.1 * CDA) < 3.0 * snap.cda_sd_m2


def test_two_steps_give_two_alarms():
    ride = example_ride()
    # +12 % at 110 s, back at 210 s, on a 9 km ride (past the course end it is flat)
    syn = synthesize_ride(ride, cda_m2=CDA, crr=CRR, seed=7, gust_rms_mps=0.1, distance_m=9000.0,
                          cda_steps=((110.0, 1.12 * CDA), (210.0, CDA)))
    est, alarms = _alarms(ride, syn)
    assert [a.step_cda_m2 > 0 for a in alarms] == [True, False]
    assert 95.0 <= alarms[0].start_t_s <= 125.0 and 195.0 <= alarms[1].start_t_s <= 230.0
    snap = est.snapshot()
    assert abs(snap.cda_m2 - CDA) < 3.0 * snap.cda_sd_m2

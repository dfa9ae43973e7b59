"""Every LiveState field the pipeline builds (by position, for speed) carries its own value.

The pipeline builds LiveState and SensorHealth positionally (livecoach.stream.builders);
two fields of the same type swapped at a call site would still build. This test
checks each field of real states from a simulated closed-loop run against where
that value comes from: the ride file, the plan, the coach, the estimator, the
decoded samples and the health tracker.
"""

from __future__ import annotations

import dataclasses
import math

import pytest

from livecoach.pipeline.processor import Pipeline
from livecoach.pipeline.state import LiveState
from livecoach.plan import make_plan
from livecoach.stream import samples as S
from livecoach.stream.events import CH_CSC, CH_GPS, CH_POWER
from sim.run import iter_events
from sim.scenario import load_scenario


@pytest.fixture(scope="module")
def run():
    sc = load_scenario("airspeed")
    sc = dataclasses.replace(sc, run=dataclasses.replace(sc.run, max_time_s=120.0))
    plan = make_plan(sc.ride)
    pipe = Pipeline(sc.ride, plan, keep_for_batch=False)
    checked = []
    for ev in iter_events(sc, controller=None):
        st = pipe.feed(ev).state
        checked.append((st, pipe.estimator.snapshot(), pipe.coach._output))
    return sc, plan, pipe, checked


def test_state_fields_come_from_their_sources(run):
    sc, plan, pipe, checked = run
    ride = sc.ride
    assert len(checked) > 1000
    moving = [c for c in checked if c[0].distance_m is not None and c[0].distance_m > 50.0]
    assert len(moving) > 500
    for st, snap, coach_out in moving[::50]:
        assert isinstance(st, LiveState)
        assert st.distance_m == snap.distance_m and st.speed_mps == snap.speed_mps
        assert st.distance_to_trap_m == pytest.approx(ride.course.trap_entry_m - st.distance_m)
        assert (st.cda_m2, st.cda_sd_m2, st.crr, st.crr_sd) == (snap.cda_m2, snap.cda_sd_m2, snap.crr, snap.crr_sd)
        assert st.w_prime_j == ride.rider.w_prime_j
        assert 0.0 < st.w_prime_balance_j <= ride.rider.w_prime_j
        assert st.planned_trap_speed_mps == plan.trap_speed_mps
        assert coach_out is not None and coach_out.t_s == st.t_s
        assert (st.target_power_w, st.planned_speed_mps, st.cue, st.cue_text, st.predicted_trap_speed_mps) == (
            coach_out.target_power_w, coach_out.planned_speed_mps, coach_out.cue, coach_out.cue_text,
            coach_out.predicted_trap_speed_mps)
        # Values in their own physical ranges (a swap would put one where another belongs).
        assert 30.0 < st.cadence_rpm < 150.0
        assert 40.0 < st.heart_rate_bpm < 220.0
        assert st.airspeed_mps is not None and abs(st.airspeed_mps - st.speed_mps) < 5.0
        assert 0.0 <= st.power_w < 1500.0
        assert st.phase in ("runup", "waiting")
        assert isinstance(st.speed_stale, bool) and isinstance(st.power_stale, bool)
        assert not st.speed_stale and not st.power_stale
        assert st.trap_entry_t_s is None and st.trap_exit_t_s is None and st.trap_speed_mps is None
        assert {h.channel for h in st.sensors} >= {CH_POWER, CH_GPS, CH_CSC}
        for h in st.sensors:
            assert isinstance(h.link_up, bool) and isinstance(h.stale, bool)
            assert h.channel == h.channel.lower()
        assert math.isfinite(st.t_s)


def test_sensor_fields_are_the_last_decoded_samples(run):
    sc, plan, pipe, checked = run
    # Feed the same events to a decoder alone and follow the last value of each kind.
    from livecoach.pipeline.decode import Decoder

    dec = Decoder(sc.ride)
    last = {"power": None, "cadence": None, "heart_rate": None, "airspeed": None}
    states = iter(c[0] for c in checked)
    for ev in iter_events(sc, controller=None):
        for s in dec.feed(ev):
            kind = type(s)
            if kind is S.PowerSample and math.isfinite(s.power_w) and s.power_w >= 0.0:
                last["power"] = s.power_w
            elif kind is S.CadenceSample:
                last["cadence"] = s.cadence_rpm
            elif kind is S.HeartRateSample:
                last["heart_rate"] = s.heart_rate_bpm
            elif kind is S.AirSample and s.airspeed_mps is not None:
                last["airspeed"] = s.airspeed_mps
        st = next(states)
        assert (st.power_w, st.cadence_rpm, st.heart_rate_bpm, st.airspeed_mps) == (
            last["power"], last["cadence"], last["heart_rate"], last["airspeed"])
    assert None not in last.values()

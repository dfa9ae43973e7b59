"""The live coach: targets, cues and the trap-speed prediction, fed with planned or perturbed rides."""

from __future__ import annotations

import bisect
import math

import pytest

from livecoach.coach import CUE_DONE, CUE_GO, CUE_TRAP, CoachConfig, LiveCoach
from livecoach.pipeline.state import NOTICE_CUE, NOTICE_WARNING
from livecoach.plan import build_run_model, make_plan, simulate
from tests.plan_helpers import example_ride


@pytest.fixture(scope="module")
def ride():
    return example_ride()


@pytest.fixture(scope="module")
def plan(ride):
    return make_plan(ride)


def _states(traj, powers, dt_s=0.25, tail_s=3.0):
    """(t, distance, speed, power, W'bal) at dt_s steps along a simulated trajectory."""
    ts, ds = traj.time_s, traj.distance_m
    t = ts[0]
    while t < ts[-1] + tail_s:
        if t >= ts[-1]:
            d = ds[-1] + (t - ts[-1]) * traj.speed_mps[-1]
            yield t, d, traj.speed_mps[-1], 0.0, traj.w_prime_balance_j[-1]
        else:
            k = bisect.bisect_right(ts, t) - 1
            f = (t - ts[k]) / (ts[k + 1] - ts[k])
            yield (t, ds[k] + f * (ds[k + 1] - ds[k]),
                   traj.speed_mps[k] + f * (traj.speed_mps[k + 1] - traj.speed_mps[k]), powers[k],
                   traj.w_prime_balance_j[k] + f * (traj.w_prime_balance_j[k + 1] - traj.w_prime_balance_j[k]))
        t += dt_s


def _feed(coach, ride, states, cda=None, crr=None):
    outs = []
    for t, d, v, p, w in states:
        outs.append(coach.update(t, d, v, p, w, cda or ride.vehicle.cda_m2, crr or ride.vehicle.crr))
    return outs


def test_following_the_plan(ride, plan):
    traj = simulate(build_run_model(ride), start_speed_mps=0.0, start_balance_j=ride.rider.w_prime_j,
                    powers_w=list(plan.power_w[:-1]))
    coach = LiveCoach(ride, plan)
    outs = _feed(coach, ride, _states(traj, plan.power_w))
    # The prediction equals the plan's trap speed while the rider rides the plan.
    preds = [o.predicted_trap_speed_mps for o in outs if o.replanned]
    assert len(preds) > 250
    for p in preds[:-3]:
        assert p == pytest.approx(plan.trap_speed_mps, rel=2e-4)
    cues = [(o.t_s, n.data["cue"], n.data["distance_m"]) for o in outs for n in o.notices
            if n.kind == NOTICE_CUE]
    names = [c for _, c, _ in cues]
    assert names[-3:] == [CUE_GO, CUE_TRAP, CUE_DONE]
    # On target all the way: no lift/ease cues before the closing effort.
    assert set(names[:-3]) == {"steady"}
    go_at = cues[-3][2]
    assert go_at == pytest.approx(plan.final_effort_m, abs=10.0)
    assert cues[-2][2] >= ride.course.trap_entry_m
    assert cues[-1][2] >= ride.course.trap_exit_m
    # After the trap: the measured trap time from the coach's own crossing times.
    assert outs[-1].predicted_trap_speed_mps == pytest.approx(plan.trap_speed_mps, rel=2e-3)
    assert outs[-1].target_power_w == 0.0


def test_rider_below_plan_gets_lift_and_lower_prediction(ride, plan):
    model = build_run_model(ride)
    weak = [p * 0.85 if d < 4000.0 else p for d, p in zip(model.nodes_m[:-1], plan.power_w[:-1])]
    traj = simulate(model, start_speed_mps=0.0, start_balance_j=ride.rider.w_prime_j, powers_w=weak)
    coach = LiveCoach(ride, plan)
    outs = _feed(coach, ride, _states(traj, weak))
    names = [n.data["cue"] for o in outs for n in o.notices if n.kind == NOTICE_CUE]
    assert "lift" in names
    mid = [o for o in outs if o.replanned and 3000.0 < (o.t_s or 0) * 0 + _d(o, traj) < 3500.0]
    # The re-plan holds CP there; the target aims hold_under_cp_pct (default 1.5 %) under it.
    held_w = ride.rider.cp_w * (1.0 - CoachConfig().hold_under_cp_pct / 100.0)
    assert mid and all(o.target_power_w == pytest.approx(held_w, abs=1.0) for o in mid)


def _d(out, traj):
    k = min(bisect.bisect_right(traj.time_s, out.t_s) - 1, len(traj.time_s) - 2)
    return traj.distance_m[max(k, 0)]


def test_prediction_follows_the_drag_estimate(ride, plan):
    # Re-planning with a live CdA 10 % above the prior predicts what make_plan
    # predicts for the rest of the run from the same state with that CdA.
    coach = LiveCoach(ride, plan)
    k = 150
    out = coach.update(100.0, plan.distance_m[k], plan.speed_mps[k], 330.0, plan.w_prime_balance_j[k],
                       0.033, ride.vehicle.crr)
    assert out.replanned
    assert out.predicted_trap_speed_mps < plan.trap_speed_mps * 0.985
    direct = make_plan(ride, cda_m2=0.033)
    # From this state (on the prior plan) the rest is close to a fresh plan with the new CdA.
    assert out.predicted_trap_speed_mps == pytest.approx(direct.trap_speed_mps, rel=3e-3)


def test_replans_once_per_interval_by_sample_time(ride, plan):
    coach = LiveCoach(ride, plan, CoachConfig(replan_interval_s=2.0))
    n = 0
    for i in range(40):  # 10 s at 4 Hz
        t = 50.0 + 0.25 * i
        out = coach.update(t, 1000.0 + 20.0 * 0.25 * i, 20.0, 330.0, 18000.0, 0.03, 0.0035)
        n += out.replanned
    assert n == 5
    assert coach.replans == 5


def test_deterministic_replay(ride, plan):
    traj = simulate(build_run_model(ride), start_speed_mps=0.0, start_balance_j=ride.rider.w_prime_j,
                    powers_w=[p * 1.05 for p in plan.power_w[:-1]])
    states = list(_states(traj, [p * 1.05 for p in plan.power_w], dt_s=0.5))
    a = _feed(LiveCoach(ride, plan), ride, states, cda=0.0305)
    b = _feed(LiveCoach(ride, plan), ride, states, cda=0.0305)
    assert a == b


def test_bad_samples_never_raise(ride, plan):
    coach = LiveCoach(ride, plan)
    good = coach.update(10.0, 100.0, 8.0, 330.0, 18000.0, 0.03, 0.0035)
    for bad in ((float("nan"), 100.0, 8.0), (11.0, float("inf"), 8.0), (11.0, 101.0, float("nan")),
                (5.0, 101.0, 8.0)):
        out = coach.update(*bad, 330.0, 18000.0, 0.03, 0.0035)
        assert out == good
    assert coach.rejected == 4
    # None / silly estimates fall back to the prior (clamped), power None is fine.
    out = coach.update(12.0, 130.0, 9.0, None, None, float("nan"), -1.0)
    assert math.isfinite(out.target_power_w)
    out = coach.update(13.0, 140.0, 9.0, 330.0, 18000.0, 5.0, 0.5)
    assert out.predicted_trap_speed_mps is None or out.predicted_trap_speed_mps > 0.0


def test_replan_failure_gives_one_warning(ride, plan):
    class Broken:
        def replan(self, *a, **k):
            from livecoach.errors import PlanError
            raise PlanError("no course left")

    coach = LiveCoach(ride, plan)
    coach.replanner = Broken()
    warnings = []
    for i in range(6):
        out = coach.update(20.0 + i, 200.0 + 20 * i, 20.0, 330.0, 18000.0, 0.03, 0.0035)
        warnings += [n for n in out.notices if n.kind == NOTICE_WARNING]
    assert len(warnings) == 1 and "re-plan failed" in warnings[0].text
    assert out.predicted_trap_speed_mps is None
    assert out.target_power_w == pytest.approx(coach._hold_target(plan.at(300.0).target_power_w))


def test_in_trap_prediction_uses_elapsed_time(ride, plan):
    coach = LiveCoach(ride, plan)
    entry = ride.course.trap_entry_m
    # Cross the trap entry at t = 300 s at 30 m/s, then ride on at 30 m/s.
    coach.update(299.0, entry - 30.0, 30.0, 500.0, 6000.0, 0.03, 0.0035)
    out = coach.update(301.0, entry + 30.0, 30.0, 500.0, 6000.0, 0.03, 0.0035)
    assert out.cue == CUE_TRAP
    assert out.replanned
    assert 25.0 < out.predicted_trap_speed_mps < 35.0


def test_hold_at_cp_aims_under_cp_and_other_powers_are_kept(ride, plan):
    cp = ride.rider.cp_w
    coach = LiveCoach(ride, plan, CoachConfig(hold_under_cp_pct=2.0))
    assert coach._hold_target(cp) == pytest.approx(cp * 0.98)
    assert coach._hold_target(cp * 1.015) == pytest.approx(cp * 0.98)     # within the margin
    assert coach._hold_target(cp * 1.05) == pytest.approx(cp * 1.05)      # a planned spend stays
    assert coach._hold_target(cp * 0.90) == pytest.approx(cp * 0.90)      # an easy stretch stays
    exact = LiveCoach(ride, plan, CoachConfig(hold_under_cp_pct=0.0))
    assert exact._hold_target(cp) == cp
    # In the closing effort the target is the power available, never lowered.
    d = plan.final_effort_m + 50.0
    out = coach.update(250.0, d, 28.0, 800.0, 15000.0, 0.03, 0.0035)
    available = cp + (ride.rider.pmax_w - cp) * 15000.0 / ride.rider.w_prime_j
    assert out.cue == CUE_GO
    assert out.target_power_w == pytest.approx(available * (1.0 + coach.config.final_effort_headroom_pct / 100.0))


def test_standby_gives_the_start_target_before_any_position(ride, plan):
    coach = LiveCoach(ride, plan)
    out = coach.standby(3.0)
    assert out.t_s == 3.0 and not out.replanned and out.notices == ()
    assert out.target_power_w == pytest.approx(coach._hold_target(plan.at(0.0).target_power_w))
    assert coach.replans == 0 and coach.rejected == 0


def test_pipeline_shows_the_start_target_on_the_start_line(ride, plan):
    from livecoach.pipeline.processor import Pipeline
    from livecoach.stream.events import CH_TICK, RawEvent

    pipe = Pipeline(ride, plan, keep_for_batch=False)
    st = pipe.feed(RawEvent(0.25, CH_TICK, b"")).state
    assert st.distance_m is None                      # nothing measured yet
    assert st.target_power_w == pytest.approx(pipe.coach.standby(0.25).target_power_w)
    assert st.target_power_w > 0.0
    # Without a plan there is nothing to show.
    assert Pipeline(ride, None).feed(RawEvent(0.25, CH_TICK, b"")).state.target_power_w is None

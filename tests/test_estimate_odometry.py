"""The distance and speed shown to the rider and the coach through wheel-sensor gaps.

A simulated run-up (the default scenario, invented course) with the wheel
sensor's faults: a disconnect (the sensor keeps counting, nothing arrives for
6 s), a radio dropout, a frozen sensor repeating its last notification, and a
restart (brown-out: counter and event clock start again from zero, as in
tests/test_live_faults_sim.py). The decoded samples go through the estimator
and the shown distance and speed are compared, sample by sample, with the
simulator's true distance and speed (sim.truth).

Before the fix the distance froze for 3 s in a gap, stepped back by a
circumference when GPS took over, jumped about 60 m when the wheel returned,
and the speed fell to about 1 m/s after a restart; the trap is timed on the
same distance track (livecoach.pipeline.processor), so these checks guard it too.
"""

from __future__ import annotations

import math

import pytest

from livecoach.codecs.csc import CscMeasurement, decode_csc, encode_csc
from livecoach.estimate import LiveDragEstimator
from livecoach.estimate.kinematics import WheelTrack
from livecoach.estimate.odometry import BLEND_S, MAX_SLOWDOWN, Odometer
from livecoach.pipeline.decode import Decoder
from livecoach.stream.events import CH_CSC, RawEvent
from livecoach.stream.samples import Rejected

DISCONNECT_S = (40.0, 6.0)
DROPOUT_S = (80.0, 3.0)
STUCK_S = (120.0, 3.0)
RESTART_AT_S = 160.0

FAULTS = f"""
[[fault]]
kind = "disconnect"
channel = "wheel"
start_s = {DISCONNECT_S[0]}
duration_s = {DISCONNECT_S[1]}

[[fault]]
kind = "dropout"
channel = "wheel"
start_s = {DROPOUT_S[0]}
duration_s = {DROPOUT_S[1]}

[[fault]]
kind = "stuck"
channel = "wheel"
start_s = {STUCK_S[0]}
duration_s = {STUCK_S[1]}
"""


def _restarted(events):
    """The wheel sensor restarts at RESTART_AT_S: its counter and clock begin again at zero."""
    base = None
    for ev in events:
        if ev.channel == CH_CSC and ev.t_s >= RESTART_AT_S:
            m = decode_csc(ev.payload)
            if base is None:
                base = (m.wheel_revolutions, m.last_wheel_event_ticks)
            ev = RawEvent(ev.t_s, ev.channel, encode_csc(CscMeasurement.make(
                wheel=(m.wheel_revolutions - base[0], (m.last_wheel_event_ticks - base[1]) & 0xFFFF))))
        yield ev


def _ride_through(sc, events):
    """Every shown state (t, distance, speed, source) and every new track point (t, d)."""
    dec = Decoder(sc.ride)
    est = LiveDragEstimator(sc.ride)
    shown, points = [], []
    for ev in events:
        for s in dec.feed(ev):
            if type(s) is Rejected:
                continue
            est.feed(s)
            snap = est.snapshot()
            if snap.distance_m is not None:
                shown.append((snap.t_s, snap.distance_m, snap.speed_mps, snap.speed_source))
            p = est.latest_track_point()
            if p is not None and (not points or p != points[-1]):
                points.append(p)
    return shown, points, est


@pytest.fixture(scope="module")
def faulty():
    from sim.run import simulate
    from sim.scenario import SCENARIO_DIR, parse_scenario_text

    text = (SCENARIO_DIR / "default.toml").read_text(encoding="utf-8") + FAULTS
    sc = parse_scenario_text(text, "default.toml + wheel faults", SCENARIO_DIR)
    run = simulate(sc)
    shown, points, est = _ride_through(sc, _restarted(run.events))
    return run, shown, points, est


def _moving(run, shown, lo_s=5.0):
    """Shown states from lo_s on while the vehicle really moves (true speed > 2 m/s)."""
    tr = run.truth
    return [row for row in shown if row[0] >= lo_s and tr.at("speed_mps", row[0]) > 2.0]


def test_the_faults_happened(faulty):
    run, _shown, _points, est = faulty
    touched = {r.kind: r.affected for r in run.faults}
    assert touched["disconnect"] > 0 and touched["dropout"] > 0 and touched["stuck"] > 0
    assert est.builder.wheel.resyncs >= 1  # the restart was seen as a break in the counter


def test_distance_never_steps_back_or_jumps_while_moving(faulty):
    run, shown, _points, _est = faulty
    tr = run.truth
    rows = _moving(run, shown)
    assert len(rows) > 1000
    worst_back = 0.0
    worst_excess = 0.0
    for (t0, d0, _, _), (t1, d1, _, _) in zip(rows, rows[1:]):
        worst_back = min(worst_back, d1 - d0)
        # A step is at most the true distance covered (the simulator's truth) plus a small
        # tolerance: the blending of corrections and a few per cent of speed error.
        v = max(tr.at("speed_mps", t0), tr.at("speed_mps", t1))
        worst_excess = max(worst_excess, (d1 - d0) - (1.1 * v * (t1 - t0) + 0.3))
    assert worst_back > -1e-6   # rounding only
    assert worst_excess <= 0.0


@pytest.mark.parametrize("fault_s", [DISCONNECT_S, DROPOUT_S, STUCK_S, (RESTART_AT_S, 1.5)],
                         ids=["disconnect", "dropout", "stuck", "restart"])
def test_distance_and_speed_follow_the_truth_through_a_wheel_gap(faulty, fault_s):
    run, shown, _points, _est = faulty
    tr = run.truth
    start, dur = fault_s
    rows = [r for r in shown if start - 2.0 <= r[0] <= start + dur + 8.0]
    assert rows
    # Distance error against the simulator's true distance: the wheel distance runs about
    # half a metre behind the truth before the gap (its origin is the first wheel event);
    # through the gap it stays within 2 m.
    errors = [d - tr.at("distance_m", t) for t, d, _, _ in rows]
    assert max(abs(e) for e in errors) < 2.0
    # The shown speed never falls below 80 % of the true speed (nor runs 20 % above it).
    ratios = [v / tr.at("speed_mps", t) for t, _, v, _ in rows]
    assert 0.8 < min(ratios) and max(ratios) < 1.2


def test_the_gap_is_bridged_by_gps_at_once(faulty):
    run, shown, _points, _est = faulty
    start, dur = DISCONNECT_S
    sources = [src for t, _, _, src in shown if start + 2.5 <= t <= start + dur]
    assert sources and all(s == "gps" for s in sources)   # long before the 3 s stale limit
    assert all(src == "wheel" for t, _, _, src in shown if start + dur + 3.0 <= t <= start + dur + 8.0)


def test_trap_track_points_are_continuous_through_the_gaps(faulty):
    """The trap is timed on the wheel track's points: they never step back, and their
    distance stays on the true distance at their time through every fault."""
    run, _shown, points, _est = faulty
    tr = run.truth
    assert all(b[1] >= a[1] for a, b in zip(points, points[1:]))
    assert all(b[0] > a[0] for a, b in zip(points, points[1:]))
    late = [(t, d) for t, d in points if t >= DISCONNECT_S[0] - 2.0]
    errors = [d - tr.at("distance_m", t) for t, d in late]
    assert max(abs(e) for e in errors) < 2.0


def test_clean_run_distance_is_smooth_and_on_the_truth():
    """No faults: between wheel notifications (2 Hz, about 10 m at speed) the shown
    distance runs on at the wheel speed; it used to stop one circumference ahead of
    the last wheel event and then jump."""
    from sim.run import simulate

    run = simulate("default")
    shown, _points, est = _ride_through(run.scenario, run.events)
    tr = run.truth
    rows = _moving(run, shown, lo_s=10.0)
    steps = [(b[1] - a[1]) - tr.at("speed_mps", b[0]) * (b[0] - a[0]) for a, b in zip(rows, rows[1:])]
    assert min(steps) > -0.3 and max(steps) < 0.3
    assert max(abs(d - tr.at("distance_m", t)) for t, d, _, _ in rows) < 1.5
    assert est.builder.odometer.bridges <= 2   # the start only: never left the wheel


# --------------------------------------------------------------- unit checks
def _steady_wheel(track: WheelTrack, v_mps: float, t0_s: float, t1_s: float, revs0: int = 100,
                  clock0_s: float = 5000.0, rate_hz: float = 2.0) -> int:
    """Feed a wheel at constant speed from t0_s to t1_s (receive clock); returns the last count."""
    c = track.circumference_m
    t = t0_s
    n = revs0
    while t < t1_s:
        n = revs0 + int(v_mps * (t - t0_s) / c)
        t_evt = t0_s + (n - revs0) * c / v_mps
        track.feed(t + 0.03, n, math.floor((t_evt + clock0_s) * 1024) / 1024)
        t += 1.0 / rate_hz
    return n


def test_a_restarted_counter_continues_the_distance_at_once():
    c, v = 1.47, 20.0
    track = WheelTrack(c, max_accel_mps2=5.0)
    _steady_wheel(track, v, 0.0, 20.0)
    d_before, gen = track.ds[-1], track.generation
    # Restart at 20.2 s: counter and clock from zero. The first interval holds only the
    # revolutions since the restart; the next one confirms a speed that fits.
    reasons = []
    for k in range(1, 5):
        t = 20.0 + 0.5 * k
        n = int(v * 0.5 * k / c)
        reasons.append(track.feed(t + 0.03, n, n * c / v))
    assert reasons[0] == "wheel_counter_backwards" and reasons[1:] == [None, None, None]
    assert track.generation == gen + 1 and track.resyncs == 1
    # Distance at the last point against the motion (common practice: d = v t; the last
    # event is revolution n after the restart at 20 s), within a revolution, where dropping
    # the broken interval would lose about 10 m.
    n_last = int(v * 2.0 / c)
    assert track.ds[-1] - d_before == pytest.approx(v * 20.0 + n_last * c - d_before, abs=c)
    assert d_before == pytest.approx(int(v * 19.5 / c) * c)
    t_last = track.ts[-1] + track.t_offset_s
    # The sensor's new clock was mapped afresh onto the receive clock (within the wait
    # for a notification at 2 Hz plus latency).
    assert t_last == pytest.approx(20.0 + 0.5 * 4, abs=0.6)


def test_a_lone_bad_sample_is_set_aside_without_a_restart():
    track = WheelTrack(1.47, max_accel_mps2=5.0)
    n = _steady_wheel(track, 15.0, 0.0, 10.0)
    gen = track.generation
    last = track.ts[-1]
    assert track.feed(10.1, n + 40, last + 0.3) == "wheel_implausible_speed"
    assert track.in_break
    # the next good sample fits the speed before: taken, no restart
    assert track.feed(10.6, n + 5, last + 5 * 1.47 / 15.0) is None
    assert not track.in_break and track.generation == gen


def test_offset_blending_never_moves_the_distance_backwards_and_ignores_read_times():
    track = WheelTrack(1.47, max_accel_mps2=5.0)
    odo = Odometer(track, stale_s=3.0, gps_fresh_s=1.5)
    # Ahead of the source by 40 m at 10 m/s: shrinks at most MAX_SLOWDOWN of the speed.
    odo._fed, odo._d0_m, odo._t0_s, odo._v_mps = True, 100.0, 0.0, 10.0
    odo._o_m, odo._p_m, odo._o_t_s, odo._o_v_mps = 40.0, 2.0, 0.0, 10.0
    ts = [0.05 * k for k in range(2000)]
    ds = [odo.distance_m(t) for t in ts]
    assert all(b > a for a, b in zip(ds, ds[1:]))
    assert min((b - a) / 0.05 for a, b in zip(ds, ds[1:])) >= (1.0 - MAX_SLOWDOWN) * 10.0 - 1e-9
    assert odo.offset_m(100.0) < 0.01 * 40.0           # blended out in the end
    # Closed form: reading at other times gives the same distances.
    assert odo.distance_m(37.3) == pytest.approx(100.0 + 373.0 + odo.offset_m(37.3))
    # Behind by 10 m: caught up exponentially with time constant BLEND_S.
    odo._o_m, odo._p_m = -10.0, 0.0
    assert odo.offset_m(BLEND_S) == pytest.approx(-10.0 * math.exp(-1.0))
    # Stopped and ahead: held, never moved back.
    odo._v_mps = odo._o_v_mps = 0.0
    odo._o_m = 3.0
    assert odo.distance_m(5.0) == odo.distance_m(500.0) == 103.0


def test_without_gps_a_gap_is_bridged_at_the_last_speed():
    """Constant 20 m/s, the wheel silent from 10 s to 14 s and no GPS: the distance goes on
    at the last wheel speed (dead reckoning) and the wheel takes over again without a step."""
    c, v = 1.47, 20.0
    track = WheelTrack(c, max_accel_mps2=5.0)
    odo = Odometer(track, stale_s=3.0, gps_fresh_s=1.5)
    shown = []
    t = 0.0
    while t < 20.0:
        if not 10.0 <= t < 14.0:
            n = 100 + int(v * t / c)
            track.feed(t + 0.03, n, 5000.0 + math.floor((n - 100) * c / v * 1024) / 1024)
        for k in range(5):  # other sensors' samples in between
            tk = t + 0.1 * k + 0.04
            f = track.recent_fit()
            odo.update(tk, None, None, f.c1 if f else None, 2.0 * f.c2 if f else None)
            shown.append((tk, odo.distance_m(tk), odo.speed_mps, odo.stale(tk)))
        t += 0.5
    moving = [row for row in shown if row[0] > 2.0]
    # Against the motion d = v t (common practice), origin at the first wheel event: the
    # events are mapped onto the receive clock with the notifications' 0.03 s latency,
    # which the module cannot see, so the shown distance runs v x 0.03 s behind.
    assert max(abs(d - v * (tk - 0.03)) for tk, d, _, _ in moving) < 0.2
    assert all(b[1] > a[1] for a, b in zip(moving, moving[1:]))
    assert all(abs(s - v) < 0.2 for _, _, s, _ in moving)
    # flagged stale 3 s after the last wheel notification (received at 9.53 s), not before,
    # and no more once the wheel is back
    assert not any(st for tk, _, _, st in moving if tk < 12.5)
    assert all(st for tk, _, _, st in moving if 12.6 < tk < 14.0)
    assert not any(st for tk, _, _, st in moving if tk > 14.1)


def test_standing_on_the_start_line_a_gps_at_rest_does_not_creep_the_distance():
    """A minute on the start line: the wheel sensor notifies "no new event" at 2 Hz and a
    GPS at rest reads 0.15 m/s of noise. A vehicle standing still covers no distance
    (common practice): once the wheel has said "no new event" the distance stays put (it
    used to creep 9 m at the GPS noise, and the coach took the vehicle for rolling past
    1 m); only the first notification interval runs at the GPS speed (a push-off)."""
    track = WheelTrack(1.47, max_accel_mps2=5.0)
    odo = Odometer(track, stale_s=3.0, gps_fresh_s=1.5)
    for k in range(600):
        t = 0.1 * k
        if k % 5 == 0:
            track.feed(t + 0.03, 100, 5000.0)  # same count and event time: not turning
        odo.update(t + 0.04, t + 0.04, 0.15, None, None)
        assert odo.distance_m(t + 0.04) <= 0.15 * 0.5 + 1e-9
        if k >= 5:
            assert odo.speed_mps == 0.0 and odo.source == "wheel"
    # The rider pushes off at 60 s at 5 m/s: the wheel's distance is taken up.
    for k in range(1, 9):
        t = 60.0 + 0.5 * k
        n = 100 + int(5.0 * 0.5 * k / 1.47)
        track.feed(t + 0.03, n, 5060.0 + (n - 100) * 1.47 / 5.0)
        f = track.recent_fit()
        odo.update(t + 0.04, t + 0.04, 5.0, f.c1 if f else None, 2.0 * f.c2 if f else None)
    assert odo.source == "wheel" and odo.speed_mps == pytest.approx(5.0, rel=0.05)
    assert odo.distance_m(64.04) == pytest.approx(5.0 * 4.0, abs=2.0)


def test_stopped_in_a_bridge_a_gps_at_rest_does_not_creep_the_distance():
    """The wheel sensor goes quiet (disconnected) while rolling at 10 m/s, the GPS
    bridges, and the vehicle stops; for a minute a GPS at rest reads 0.15 m/s of noise.
    A vehicle standing still covers no distance (common practice): GPS speeds below
    the stopped threshold count as 0 in a bridge (the distance used to creep 9 m)."""
    track = WheelTrack(1.47, max_accel_mps2=5.0)
    odo = Odometer(track, stale_s=3.0, gps_fresh_s=1.5)
    n = 0
    for k in range(1, 21):                      # 10 s at 10 m/s, wheel points at 2 Hz
        t = 0.5 * k
        n = int(10.0 * t / 1.47)
        track.feed(t + 0.03, n, 1000.0 + n * 1.47 / 10.0)
        f = track.recent_fit()
        odo.update(t + 0.04, t + 0.04, 10.0, f.c1 if f else None, 2.0 * f.c2 if f else None)
    assert odo.source == "wheel"
    # The wheel goes quiet; the GPS slows to a stop over 5 s, then stands.
    shown = {}
    for k in range(1, 651):
        t = 10.0 + 0.1 * k
        gps = max(10.0 - 2.0 * (t - 10.0), 0.0) if t < 15.0 else 0.15
        odo.update(t + 0.04, t + 0.04, gps, None, None)
        shown[k] = odo.distance_m(t + 0.04)
    assert odo.source == "gps" and odo.speed_mps == 0.0
    # Slowing from 10 m/s at 2 m/s^2 covers 25 m; standing still covers nothing.
    assert shown[50] - shown[1] == pytest.approx(25.0, abs=2.0)
    assert shown[650] - shown[100] < 0.5

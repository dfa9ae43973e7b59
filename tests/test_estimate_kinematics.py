"""Kinematics from the wheel sensor's own event times, and circumference calibration."""

from __future__ import annotations

import math

import pytest

from livecoach.estimate.calibration import CalibrationError, calibrate_circumference, wgs84_distance_m
from livecoach.estimate.kinematics import WheelTrack
from livecoach.estimate.synthetic import example_ride, synthesize_ride
from livecoach.stream.samples import GpsSample, MarkerSample, WheelSample


def _constant_accel_wheel(c_m, v0, a, seconds, offset_s=5000.0, rate_hz=4.0):
    """CSC-like samples of a motion d = v0 t + a t^2/2 (event times quantised to 1/1024 s)."""
    samples = []
    n = 0
    t = 0.1
    while t < seconds:
        # last event before t: largest n with d(t_n) = n c <= d(t)
        d = v0 * t + 0.5 * a * t * t
        n = int(d / c_m)
        if a == 0.0:
            tn = n * c_m / v0
        else:
            tn = (-v0 + math.sqrt(v0 * v0 + 2 * a * n * c_m)) / a if n else 0.0
        samples.append(WheelSample(t + 0.04, 100 + n, math.floor((tn + offset_s) * 1024) / 1024))
        t += 1.0 / rate_hz
    return samples


def test_speed_and_acceleration_from_event_times():
    c = 1.47
    track = WheelTrack(c, max_accel_mps2=5.0)
    for s in _constant_accel_wheel(c, 10.0, 0.5, 30.0):
        assert track.feed(s.t_s, s.wheel_revolutions, s.wheel_event_time_s) is None
    # a node in the middle: exact answer from the motion (common practice: v = v0 + a t)
    i = track.base + len(track.ts) // 2
    v, var_v, acc = track.node(i)
    t_evt = track.ts[i - track.base] - 5000.0
    assert v == pytest.approx(10.0 + 0.5 * t_evt, abs=0.01)
    assert acc == pytest.approx(0.5, abs=0.05)
    assert 0.0 < math.sqrt(var_v) < 0.01
    # the sensor clock (offset 5000 s) is mapped onto the receive clock within the
    # notification wait plus latency
    assert track.t(i) == pytest.approx(t_evt, abs=0.3)
    assert track.d(i) == pytest.approx((track.ts[i - track.base] - 5000.0) * 10.0
                                       + 0.25 * t_evt**2, abs=c)


def test_counter_and_time_faults_are_rejected_and_resynced():
    track = WheelTrack(1.47, max_accel_mps2=5.0)
    good = _constant_accel_wheel(1.47, 15.0, 0.0, 5.0)
    for s in good[:10]:
        track.feed(s.t_s, s.wheel_revolutions, s.wheel_event_time_s)
    last = good[9]
    assert track.feed(last.t_s + 0.1, last.wheel_revolutions - 3, last.wheel_event_time_s + 0.1) == "wheel_counter_backwards"
    assert track.feed(last.t_s + 0.1, last.wheel_revolutions + 2, last.wheel_event_time_s - 0.1) == "wheel_time_backwards"
    assert track.feed(last.t_s + 0.1, last.wheel_revolutions, last.wheel_event_time_s) is None  # no new event
    # a sensor restarted from zero: after three inconsistent reports in a row the
    # track restarts from the new counter and then accepts it
    reasons = [track.feed(last.t_s + 0.2 * k, k, 0.1 * k) for k in range(1, 5)]
    assert reasons[0] == "wheel_counter_backwards_resync" and track.generation == 1
    assert reasons[1:] == [None, None, None]
    assert track.ds[-1] == pytest.approx(track.ds[0] + 3 * 1.47)


def test_wgs84_distances_match_table_values():
    # Length of one degree of latitude on WGS-84 (from memory, standard table values):
    # 110 574 m at the equator, 111 132 m at 45 deg, 111 694 m at the pole.
    assert wgs84_distance_m(-0.5, 0.0, 0.5, 0.0) == pytest.approx(110574.0, abs=2.0)
    assert wgs84_distance_m(44.5, 0.0, 45.5, 0.0) == pytest.approx(111132.0, abs=2.0)
    assert wgs84_distance_m(88.5, 0.0, 89.5, 0.0) == pytest.approx(111694.0, abs=3.0)
    # one degree of longitude at the equator: 2 pi a / 360 = 111 319.49 m
    assert wgs84_distance_m(0.0, 0.0, 0.0, 1.0) == pytest.approx(111319.49, abs=0.1)


def test_circumference_from_markers_and_from_gps():
    ride = example_ride()
    true_c = 1.4655  # the ride file says 1.47: a 0.3 % error to find
    syn = synthesize_ride(ride, cda_m2=0.03, crr=0.004, seed=2, distance_m=3000.0, gps=True,
                          true_circumference_m=true_c, gust_rms_mps=0.0)
    samples = list(syn.samples)
    # two marker presses 1000 m apart (at 1200 m and 2200 m of the true course)
    ts = syn.truth_t_s
    t_a = next(t for t, d in zip(ts, syn.truth_distance_m) if d >= 1200.0)
    t_b = next(t for t, d in zip(ts, syn.truth_distance_m) if d >= 2200.0)
    samples += [MarkerSample(t_a + 0.02, "a"), MarkerSample(t_b + 0.02, "b")]
    samples.sort(key=lambda s: s.t_s)
    by_marker = calibrate_circumference(samples, surveyed_m=1000.0)
    assert by_marker.method == "markers"
    assert by_marker.circumference_m == pytest.approx(true_c, abs=3 * by_marker.sd_m)
    assert by_marker.sd_m < 0.003  # 0.05 s press timing at ~24 m/s over 1000 m
    by_gps = calibrate_circumference(samples)
    assert by_gps.method == "gps" and by_gps.reference_m > 2500.0
    assert by_gps.circumference_m == pytest.approx(true_c, abs=max(3 * by_gps.sd_m, 0.002))
    with pytest.raises(CalibrationError, match="labelled"):
        calibrate_circumference(samples, surveyed_m=1000.0, marker_labels=("x", "y"))
    with pytest.raises(CalibrationError, match="wheel"):
        calibrate_circumference([GpsSample(1.0, True, 31.0, -113.0, None, 10.0)])

"""Coast-down: CdA and Crr from stretches without pedalling.

Checks: (1) against the closed-form solution of the coast-down equation on flat
ground, m_eff dv/dt = -(A + B v^2) with A = Crr m g, B = rho CdA / 2, which by
separation of variables gives v(t) = sqrt(A/B) tan(phi0 - k t), k = sqrt(A B)/m_eff,
phi0 = atan(v0 sqrt(B/A)), and distance d(t) = (m_eff/B) ln(cos(phi0 - k t)/cos(phi0))
(the standard analytic coast-down curve; derived, not taken from the physics core);
(2) end to end through `livecoach coastdown` on a recording of the bench simulator's
coast-down scenario (sim/scenarios/coastdown.toml).
"""

from __future__ import annotations

import json
import math
import subprocess
import sys
from pathlib import Path

import pytest

from livecoach.estimate.coastdown import CoastdownError, coast_intervals, coastdown_fit
from livecoach.estimate.synthetic import example_ride
from livecoach.stream.samples import PowerSample, WheelSample

G = 9.80665


def _flat_coast_samples(ride, cda, crr, v0, seconds):
    veh = ride.vehicle
    m_eff = veh.mass_kg + veh.wheel_inertia_kgm2 / veh.wheel_radius_m**2
    rho = ride.air.density_kgpm3
    a = crr * veh.mass_kg * G
    b = 0.5 * rho * cda
    k = math.sqrt(a * b) / m_eff
    phi0 = math.atan(v0 * math.sqrt(b / a))
    c = veh.wheel_circumference_m
    events = []
    n = 1
    while True:
        arg = math.cos(phi0) * math.exp(b * n * c / m_eff)
        if arg >= 1.0:
            break
        t = (phi0 - math.acos(arg)) / k
        if t > seconds:
            break
        events.append(t)
        n += 1
    samples = []
    j = 0
    t = 0.25
    while t < seconds:
        while j < len(events) and events[j] <= t:
            j += 1
        last = events[j - 1] if j else 0.0
        samples.append(WheelSample(t + 0.02, 500 + j, math.floor((last + 77.0) * 1024) / 1024))
        samples.append(PowerSample(t + 0.03, 0.0))
        t += 0.5
    samples.sort(key=lambda s: s.t_s)
    v_end = math.sqrt(a / b) * math.tan(phi0 - k * seconds)
    return samples, v_end


def test_closed_form_flat_coast_is_recovered():
    ride = example_ride(course={"elevation": [[0, 1000.0], [20000, 1000.0]]})
    samples, v_end = _flat_coast_samples(ride, 0.031, 0.0038, 26.0, 120.0)
    assert 8.0 < v_end < 20.0
    res = coastdown_fit(samples, ride)
    # Only the 1/1024 s quantisation of the event times is noise here.
    assert res.cda_m2 == pytest.approx(0.031, rel=0.01)
    assert res.crr == pytest.approx(0.0038, rel=0.03)
    assert abs(res.cda_m2 - 0.031) < 3 * res.cda_sd_m2 + 1e-5
    assert len(res.stretches) == 1
    assert res.f2_nspm2 == pytest.approx(0.5 * ride.air.density_kgpm3 * res.cda_m2)


def test_coast_intervals_follow_the_interval_average_reports():
    reports = [(0.5, 300.0), (1.0, 310.0), (1.5, 0.0), (2.0, 0.0), (9.0, 0.0), (9.5, 200.0), (10.0, 0.0)]
    # Report at 1.5 s is the mean over (1.0, 1.5]: coasting runs from 1.0 s to 9.0 s.
    assert coast_intervals(reports, 5.0, 6.0) == [(1.0, 9.0)]
    assert coast_intervals(reports, 5.0, 9.0) == []


def test_no_coast_is_a_clear_error():
    ride = example_ride()
    samples = [PowerSample(0.5 * i, 300.0) for i in range(1, 100)]
    with pytest.raises(CoastdownError, match="no coasting stretch"):
        coastdown_fit(samples, ride)


@pytest.fixture(scope="module")
def coast_recording(tmp_path_factory) -> tuple[Path, object]:
    pytest.importorskip("sim.run")
    from livecoach.recording import Recorder, header_for_ride
    from sim.run import simulate

    run = simulate("coastdown", seed=7)
    ride = run.scenario.ride
    path = tmp_path_factory.mktemp("coast") / "coast.lcrec"
    rec = Recorder(path, header_for_ride(ride, start_wall_time_unix_s=1_900_000_000.0,
                                         start_monotonic_s=0.0), flush_interval_s=0.2)
    assert rec.start()
    for ev in run.events:
        rec.append(ev)
    rec.close()
    return path, run


def _cli(*args):
    return subprocess.run([sys.executable, "-m", "livecoach", *args], capture_output=True, text=True,
                          timeout=300)


@pytest.mark.slow
def test_coastdown_command_on_a_simulated_recording(coast_recording, tmp_path):
    path, run = coast_recording
    truth = run.scenario.truth
    out = _cli("coastdown", str(path), "--json")
    assert out.returncode == 0, out.stderr
    res = json.loads(out.stdout)
    assert len(res["stretches"]) == 2
    assert abs(res["cda_m2"] - truth.cda_m2) < 3 * res["cda_sd_m2"]
    assert abs(res["crr"] - truth.crr) < 3 * res["crr_sd"]
    # The scenario coasts only 25 -> 22 m/s twice, so CdA is known to ~10 % from it.
    assert res["cda_sd_m2"] < 0.15 * truth.cda_m2
    text = _cli("coastdown", str(path))
    assert text.returncode == 0 and "CdA" in text.stdout and "road load" in text.stdout
    # bad input: a missing file, a CSV without a ride file
    assert _cli("coastdown", str(tmp_path / "nope.lcrec")).returncode == 2
    csv = tmp_path / "ride.csv"
    csv.write_text("time_s,power_w,speed_mps\n0,0,10\n")
    bad = _cli("coastdown", str(csv))
    assert bad.returncode == 2 and "--config" in bad.stderr

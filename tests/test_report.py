"""The post-ride report: numbers from the trace, embedded figures, a self-contained page."""

from __future__ import annotations

import base64
import dataclasses
import math
import re

import numpy as np
import pytest

from livecoach.cli.commands.init import example_ride_text
from livecoach.config.ridefile import parse_ride_text
from livecoach.errors import ReportError
from livecoach.physics.power_balance import acceleration_mps2, crank_power_w
from livecoach.pipeline.state import LiveState, Notice, SensorHealth
from livecoach.report import build_report
from livecoach.report.series import (
    power_residuals,
    sensor_timelines,
    series_from_states,
    trap_result,
)

PNG_MAGIC = b"\x89PNG\r\n\x1a\n"


def example_ride():
    return parse_ride_text(example_ride_text(), "example ride file")


def simulated_trace(ride, *, cda_true=0.0285, crr_true=0.0036, power_w=420.0, dt_s=0.5, seed=7,
                    gap=(200.0, 206.0), stop_at_m=None):
    """A run on the example course, integrated with the project's physics (invented demo data).

    Returns (states, notices, summary, truth) where truth holds the exact crossing times.
    """
    rng = np.random.default_rng(seed)
    model = ride.vehicle_model(cda_true, crr_true)
    rho = ride.air.density_kgpm3
    entry_m, exit_m = ride.course.trap_entry_m, ride.course.trap_exit_m
    stop_m = exit_m + 150.0 if stop_at_m is None else stop_at_m
    t, d, v = 1000.0, 0.0, 0.0
    wbal = ride.rider.w_prime_j
    states, notices = [], []
    entry_t = exit_t = None
    cda0, cda_sd0 = ride.vehicle.cda_m2, ride.vehicle.cda_sd_m2
    crr0, crr_sd0 = ride.vehicle.crr, ride.vehicle.crr_sd
    phase = "waiting"
    while d < stop_m:
        p = power_w + rng.normal(0.0, 8.0)
        # RK2 step of the power balance (Martin et al. 1998) with the project's physics.
        a1 = acceleration_mps2(p, v, ride.course.grade(d), rho, model)
        v_mid = max(0.0, v + 0.5 * dt_s * a1)
        a2 = acceleration_mps2(p, v_mid, ride.course.grade(d + 0.5 * dt_s * v_mid), rho, model)
        v_new = max(0.0, v + dt_s * a2)
        d_new = d + 0.5 * (v + v_new) * dt_s
        t_new = t + dt_s
        for line_m, name in ((entry_m, "entry"), (exit_m, "exit")):
            if d < line_m <= d_new:
                tc = t + (line_m - d) * dt_s / (d_new - d)
                if name == "entry":
                    entry_t = tc
                    phase = "trap"
                    notices.append(Notice(t_new, "phase", "phase trap", {"phase": "trap"}))
                else:
                    exit_t = tc
                    phase = "done"
                    notices.append(Notice(t_new, "phase", "phase done",
                                          {"phase": "done", "trap_speed_mps": 200.0 / (exit_t - entry_t)}))
        t, d, v = t_new, d_new, v_new
        if phase == "waiting" and v > 1.0:
            phase = "runup"
        wbal = max(0.0, wbal - max(0.0, p - ride.rider.cp_w) * dt_s)
        k = 1.0 - math.exp(-(t - 1000.0) / 60.0)
        ride_s = t - 1000.0
        stale = gap[0] <= ride_s < gap[1]
        sensors = (
            SensorHealth("ble.csc", True, stale, 4.0 if stale else 0.3, int(ride_s * 2), 0,
                         1 if ride_s >= gap[1] - 3 else 0, 6.0 if ride_s >= gap[1] else 0.0),
            SensorHealth("ble.cycling_power", True, False, 0.2, int(ride_s * 2), 1, 0, 0.0),
        )
        states.append(LiveState(
            t_s=t, phase=phase, distance_m=d, distance_to_trap_m=entry_m - d,
            speed_mps=v + rng.normal(0.0, 0.05), speed_stale=stale, power_w=p, power_stale=False,
            target_power_w=power_w, planned_speed_mps=v * 1.003, cue="hold", cue_text="hold",
            predicted_trap_speed_mps=25.6, planned_trap_speed_mps=25.8,
            w_prime_balance_j=wbal, w_prime_j=ride.rider.w_prime_j,
            cda_m2=cda0 + (cda_true - cda0) * k, cda_sd_m2=cda_sd0 * (1 - 0.9 * k),
            crr=crr0 + (crr_true - crr0) * k, crr_sd=crr_sd0 * (1 - 0.8 * k),
            sensors=sensors, trap_entry_t_s=entry_t, trap_exit_t_s=exit_t,
            trap_speed_mps=(200.0 / (exit_t - entry_t)) if exit_t else None,
        ))
        if ride_s == 150.0:  # exact: t advances in binary-exact 0.5 s steps
            notices.append(Notice(t, "alarm", "drag changed: CdA +0.0021 m2", {"kind": "drag_changed"}))
            states[-1] = dataclasses.replace(states[-1], alarms=("drag changed: CdA +0.0021 m2",))
    summary = {
        "samples": len(states) * 2, "rejected_samples": 1, "batch_cda_m2": cda_true, "batch_crr": crr_true,
        "max_speed_mps": max(s.speed_mps for s in states),
        "sensor_gaps": {"ble.csc": {"count": 1, "longest_s": 6.0}, "ble.cycling_power": {"count": 0, "longest_s": 0.0}},
        "warnings": ["rejected 1 payload(s): bad flags"],
    }
    return states, notices, summary, {"entry_t": entry_t, "exit_t": exit_t, "cda": cda_true, "crr": crr_true}


@pytest.fixture(scope="module")
def ride():
    return example_ride()


@pytest.fixture(scope="module")
def trace(ride):
    return simulated_trace(ride)


def test_trap_result_from_the_states(ride, trace):
    states, _, _, truth = trace
    s = series_from_states(states)
    r = trap_result(states, s, ride.course.trap_entry_m, ride.course.trap_exit_m, 25.8)
    assert r.source == "pipeline"
    assert r.entry_s == pytest.approx(truth["entry_t"] - 1000.5, abs=1e-9)
    assert r.time_s == pytest.approx(truth["exit_t"] - truth["entry_t"], abs=1e-9)
    # Mean speed through the trap = trap length / time between the lines (common practice).
    assert r.mean_speed_mps == pytest.approx(200.0 / (truth["exit_t"] - truth["entry_t"]), rel=1e-12)
    assert r.predicted_at_entry_mps == 25.6 and r.planned_mps == 25.8


def test_trap_recomputed_when_the_states_lack_it(ride, trace):
    states, _, _, truth = trace
    bare = [LiveState(t_s=s.t_s, distance_m=s.distance_m, speed_mps=s.speed_mps, speed_stale=False)
            for s in states]
    s = series_from_states(bare)
    r = trap_result(bare, s, ride.course.trap_entry_m, ride.course.trap_exit_m)
    assert r.source == "trace"
    # Linear interpolation between 0.5 s states of a smooth run: within a millisecond of the truth.
    assert r.time_s == pytest.approx(truth["exit_t"] - truth["entry_t"], abs=2e-3)
    short = [st for st in bare if st.distance_m < ride.course.trap_entry_m + 50]
    r2 = trap_result(short, series_from_states(short), ride.course.trap_entry_m, ride.course.trap_exit_m)
    assert r2.entry_s is not None and r2.time_s is None and r2.mean_speed_mps is None


def test_residuals_vanish_with_the_true_drag_and_show_a_wrong_one(ride, trace):
    states, _, _, truth = trace
    s = series_from_states(states)
    right = power_residuals(s, ride, truth["cda"], truth["crr"], "truth")
    assert right.t_s.size > 50
    # Same physics on both sides: only the power noise (8 W sd) and speed jitter remain.
    assert abs(float(np.median(right.residual_w))) < 5.0
    wrong = power_residuals(s, ride, truth["cda"] * 1.10, truth["crr"], "10 % high")
    # 10 % more CdA costs 10 % of the aero power: the residual goes clearly negative.
    assert float(np.median(wrong.residual_w)) < -15.0


def test_sensor_timeline_finds_the_gap(ride, trace):
    states = trace[0]
    s = series_from_states(states)
    tls = {tl.channel: tl for tl in sensor_timelines(states, s)}
    (start, end), = tls["ble.csc"].stale
    assert start == pytest.approx(199.5, abs=0.51) and end == pytest.approx(205.5, abs=0.51)
    assert tls["ble.cycling_power"].stale == [] and tls["ble.cycling_power"].rejected == 1


def test_report_page_is_self_contained_and_has_the_numbers(tmp_path, ride, trace):
    states, notices, summary, truth = trace
    path = build_report(states, notices, summary, ride, None, tmp_path / "out", source="demo trace")
    assert path == tmp_path / "out" / "report.html" and path.is_file()
    page = path.read_text(encoding="utf-8")
    # Embedded PNG figures that decode to real PNG files.
    images = re.findall(r'src="data:image/png;base64,([A-Za-z0-9+/=]+)"', page)
    assert len(images) >= 7
    for b64 in images:
        png = base64.b64decode(b64)
        assert png.startswith(PNG_MAGIC) and len(png) > 5000
    # Nothing loaded from anywhere else.
    assert not re.search(r"https?://|//[a-z0-9.-]+\.[a-z]{2,}/|<script|<link|@import|url\(", page, re.I)
    assert not re.search(r'(src|href)="(?!data:)', page)
    # The trap result, computed independently from the generator's crossing times.
    t_trap = truth["exit_t"] - truth["entry_t"]
    assert f"{t_trap:.3f} s" in page
    assert f"{200.0 / t_trap:.3f} m/s" in page
    assert f"{200.0 / t_trap * 3.6:.2f} km/h" in page
    assert f"{truth['entry_t'] - 1000.5:.3f} s ride time" in page
    # Sensors, notices, warnings and the ride file.
    assert "wheel sensor" in page and "drag changed: CdA +0.0021 m2" in page
    assert "rejected 1 payload(s): bad flags" in page
    assert "Sable Dart (invented demo vehicle)" in page and "[vehicle]" in page
    assert "batch fit" in page


def test_report_for_a_run_that_stopped_before_the_trap(tmp_path, ride):
    states, notices, summary, _ = simulated_trace(ride, stop_at_m=3000.0, gap=(-1, -1))
    page = build_report(states, notices, summary, ride, None, tmp_path).read_text()
    assert "did not reach the trap" in page


def test_report_errors(tmp_path, ride, trace):
    with pytest.raises(ReportError, match="no states"):
        build_report([], [], {}, ride, None, tmp_path)
    blocker = tmp_path / "file"
    blocker.write_text("x")
    states, notices, summary, _ = trace
    with pytest.raises(ReportError, match="cannot write the report"):
        build_report(states[:50], notices, summary, ride, None, blocker / "sub")

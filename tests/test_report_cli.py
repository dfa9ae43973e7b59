"""``livecoach report`` end to end: a simulated ride recorded to disk (and a CSV ride)
turned into the HTML page by the real command in a subprocess."""

from __future__ import annotations

import base64
import json
import re
import subprocess
import sys
from pathlib import Path

import pytest

from livecoach.live.loop import LiveLoop
from livecoach.plan import make_plan, save_plan
from livecoach.recording import Recorder, RecordingSink, header_for_ride
from livecoach.recording.replay import PLAN_KEY

# A short run-up on the invented example course, with a wheel-sensor dropout.
SCENARIO = """
[scenario]
name = "report-short"
seed = 424242
ride = "example"
step_hz = 50
runout_m = 30
max_time_s = 400

[ride_patch.course]
runup_m = 700

[truth]
cda_m2 = 0.0285
crr = 0.0032

[rider]
mode = "scripted"
profile = [[0, 600], [150, 420]]

[[fault]]
kind = "dropout"
channel = "wheel"
start_s = 25
duration_s = 5
"""


def livecoach(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "livecoach", *args], capture_output=True, text=True,
                          timeout=300)


@pytest.fixture(scope="module")
def recorded(tmp_path_factory):
    from sim.run import simulate
    from sim.scenario import parse_scenario_text

    folder = tmp_path_factory.mktemp("report-cli")
    scenario = parse_scenario_text(SCENARIO, str(folder / "short.toml"), folder)
    run = simulate(scenario)
    ride = scenario.ride
    plan = make_plan(ride)
    plan_text = save_plan(plan, folder / "plan.csv").read_text()
    path = folder / "ride.lcrec"
    rec = Recorder(path, header_for_ride(ride, start_wall_time_unix_s=1_900_000_000.0, start_monotonic_s=0.0,
                                         extra={PLAN_KEY: plan_text}), flush_interval_s=0.2)
    assert rec.start()
    loop = LiveLoop(ride, plan, sinks=[RecordingSink(rec)])
    for ev in run.events:
        loop.handle(ev)
    rec.close()
    (folder / "ride.toml").write_text(ride.text)
    return folder, path, run


def _images(page: str) -> list[bytes]:
    return [base64.b64decode(b) for b in re.findall(r'src="data:image/png;base64,([A-Za-z0-9+/=]+)"', page)]


@pytest.mark.slow
def test_report_of_a_recording(recorded):
    folder, path, _ = recorded
    out = livecoach("report", str(path), "--out", str(folder / "rep"), "--json")
    assert out.returncode == 0, out.stderr
    info = json.loads(out.stdout)
    page_path = Path(info["report"])
    assert page_path == folder / "rep" / "report.html"
    page = page_path.read_text(encoding="utf-8")
    images = _images(page)
    assert len(images) >= 7 and all(i.startswith(b"\x89PNG\r\n\x1a\n") for i in images)
    assert not re.search(r"https?://|<script|<link|url\(", page, re.I)
    # The trap result on the page is the pipeline's: 200 m / (exit - entry).
    t_trap = info["trap_exit_t_s"] - info["trap_entry_t_s"]
    assert info["trap_speed_mps"] == pytest.approx(200.0 / t_trap, rel=1e-12)
    assert f"{t_trap:.3f} s" in page and f"{info['trap_speed_mps']:.3f} m/s" in page
    # The plan stored in the recording is drawn, the ride file is shown, the dropout is listed.
    assert "runup_m = 700" in page
    row = re.search(r"<tr><td>wheel sensor</td><td>ble.csc</td>(.*?)</tr>", page)
    gaps = re.findall(r'<td class="n">([^<]*)</td>', row.group(1))
    assert int(gaps[2]) >= 1 and float(gaps[3]) >= 4.0      # gaps, longest gap (5 s dropout)


@pytest.mark.slow
def test_report_of_a_csv_ride(recorded, tmp_path):
    folder, _, run = recorded
    # A CSV ride made from the simulator's truth log at 2 Hz (time, power, speed, distance).
    lines = ["time_s,power_w,speed_mps,distance_m"]
    t, p, v, d = (run.truth[name] for name in ("t_s", "power_w", "speed_mps", "distance_m"))
    step = max(1, int(round(0.5 / (t[1] - t[0]))))
    for i in range(0, len(t), step):
        lines.append(f"{t[i]:.3f},{p[i]:.1f},{v[i]:.4f},{d[i]:.3f}")
    csv_path = tmp_path / "ride.csv"
    csv_path.write_text("\n".join(lines) + "\n")
    out = livecoach("report", str(csv_path), "--config", str(folder / "ride.toml"), "--out", str(tmp_path / "r"))
    assert out.returncode == 0, out.stderr
    assert out.stdout.startswith(f"wrote {tmp_path / 'r' / 'report.html'}")
    page = (tmp_path / "r" / "report.html").read_text()
    assert len(_images(page)) >= 7 and "Trap result" in page
    assert "time through the trap" in page


def test_report_input_errors(tmp_path):
    missing = livecoach("report", str(tmp_path / "nope.lcrec"), "--out", str(tmp_path))
    # A missing input is a usage error (2), as in replay, export and coastdown.
    assert missing.returncode == 2 and "not found" in missing.stderr and "Traceback" not in missing.stderr
    csv_path = tmp_path / "ride.csv"
    csv_path.write_text("time_s,power_w,speed_mps\n0,100,5\n")
    no_config = livecoach("report", str(csv_path), "--out", str(tmp_path))
    assert no_config.returncode == 2 and "--config RIDE.toml" in no_config.stderr
    other = tmp_path / "notes.txt"
    other.write_text("hello")
    wrong = livecoach("report", str(other), "--out", str(tmp_path))
    assert wrong.returncode == 1 and "neither a livecoach recording nor a .csv ride" in wrong.stderr
    bad_spacing = livecoach("report", str(other), "--out", str(tmp_path), "--every-s", "0")
    assert bad_spacing.returncode == 2

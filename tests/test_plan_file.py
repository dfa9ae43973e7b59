"""Plan CSV save/load, the ride-file fit check, and the `livecoach plan` command."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from livecoach.cli.main import main
from livecoach.errors import PlanError
from livecoach.plan import CSV_COLUMNS, check_plan, load_plan, make_plan, save_plan
from tests.plan_helpers import example_ride


@pytest.fixture(scope="module")
def plan():
    return make_plan(example_ride())


def test_round_trip(tmp_path, plan):
    path = save_plan(plan, tmp_path / "plan.csv")
    lines = path.read_text().splitlines()
    assert ",".join(CSV_COLUMNS) in lines
    back = load_plan(path, example_ride())
    assert back.distance_m == plan.distance_m
    assert back.power_w == plan.power_w
    assert back.trap_speed_mps == pytest.approx(plan.trap_speed_mps, rel=1e-12)
    assert back.final_effort_m == plan.final_effort_m
    assert back.warnings == ()
    assert not (tmp_path / "plan.csv.part").exists()


def test_load_checks_the_ride(tmp_path, plan):
    path = save_plan(plan, tmp_path / "plan.csv")
    with pytest.raises(PlanError, match="cp_w is 330 W in the plan but 350 W"):
        load_plan(path, example_ride(rider={"cp_w": 350.0}))
    with pytest.raises(PlanError, match="trap_m"):
        load_plan(path, example_ride(course={"trap_m": 100.0}))
    with pytest.raises(PlanError, match="elevation profile differs"):
        load_plan(path, example_ride(course={"elevation": [[0, 1405.0], [6700, 1380.0]]}))
    warm = load_plan(path, example_ride(air={"temperature_c": 35.0, "headwind_mps": 1.0}))
    assert any("air density" in w for w in warm.warnings)
    assert any("head wind" in w for w in warm.warnings)
    errors, warnings = check_plan(plan, example_ride(vehicle={"cda_m2": 0.028}))
    assert errors == [] and "CdA" in warnings[0]


@pytest.mark.parametrize("body,message", [
    ("distance_m,power_w\n0,1\n", "header"),
    ("distance_m,power_w,speed_mps,time_s,w_prime_balance_j\n0,330,0,0,18000\n10,330,x,1,18000\n",
     ":3: a value is not a number"),
    ("distance_m,power_w,speed_mps,time_s,w_prime_balance_j\n0,330,0,0,18000\n40,330,3,1,18000\n",
     "≤ 25 m"),
    ("distance_m,power_w,speed_mps,time_s,w_prime_balance_j\n0,330,0,0,18000\n0,330,3,1,18000\n",
     "does not increase"),
    ("distance_m,power_w,speed_mps,time_s,w_prime_balance_j\n0,330,0,0,18000\n10,330,3,1,18000\n",
     "must cover 0..6700"),
    ("distance_m,power_w,speed_mps,time_s,w_prime_balance_j\n0,330,0,0,nan\n10,330,3,1,18000\n",
     "not finite"),
])
def test_bad_plan_files(tmp_path, body, message):
    path = tmp_path / "bad.csv"
    path.write_text(body)
    with pytest.raises(PlanError, match=message):
        load_plan(path, example_ride())


def test_missing_file_and_missing_header_without_ride(tmp_path):
    with pytest.raises(PlanError, match="not found"):
        load_plan(tmp_path / "nope.csv")
    path = tmp_path / "bare.csv"
    path.write_text("distance_m,power_w,speed_mps,time_s,w_prime_balance_j\n0,1,1,0,1\n10,1,1,1,1\n")
    with pytest.raises(PlanError, match="runup_m"):
        load_plan(path)


def _ride_file(tmp_path: Path, extra: str = "") -> Path:
    from livecoach.cli.commands.init import example_ride_text

    p = tmp_path / "ride.toml"
    p.write_text(example_ride_text() + extra)
    return p


def test_cli_plan_json_and_csv(tmp_path, capsys):
    ride = _ride_file(tmp_path)
    out = tmp_path / "plan.csv"
    assert main(["plan", "--config", str(ride), "--out", str(out), "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    for key in ("trap_speed_mps", "trap_time_s", "runup_time_s", "w_prime_left_j", "sensitivity",
                "strategies", "checks"):
        assert key in data
    assert data["trap_time_s"] == pytest.approx(200.0 / data["trap_speed_mps"])
    cases = {(r["parameter"], r["change"]) for r in data["sensitivity"]}
    assert cases == {("cda_m2", "-5 %"), ("cda_m2", "+5 %"), ("crr", "-10 %"), ("crr", "+10 %"),
                     ("headwind_mps", "-1 m/s"), ("headwind_mps", "+1 m/s"),
                     ("air_density_kgpm3", "-3 %"), ("air_density_kgpm3", "+3 %")}
    by = {(r["parameter"], r["change"]): r["trap_speed_mps"] for r in data["sensitivity"]}
    assert by[("cda_m2", "-5 %")] > data["trap_speed_mps"] > by[("cda_m2", "+5 %")]
    assert by[("headwind_mps", "-1 m/s")] > data["trap_speed_mps"] > by[("headwind_mps", "+1 m/s")]
    s = data["strategies"]
    assert data["trap_speed_mps"] > s["constant_power"]["trap_speed_mps"] > s["all_out"]["trap_speed_mps"]
    header = [ln for ln in out.read_text().splitlines() if not ln.startswith("#")][0]
    assert header == "distance_m,power_w,speed_mps,time_s,w_prime_balance_j"
    # The saved plan fits its ride file; a changed rider does not (exit 1).
    assert main(["plan", "--config", str(ride), "--check", str(out)]) == 0
    ride2 = tmp_path / "other.toml"
    ride2.write_text(ride.read_text().replace("cp_w = 330", "cp_w = 300"))
    assert main(["plan", "--config", str(ride2), "--check", str(out)]) == 1
    assert "does not fit" in capsys.readouterr().err


def test_cli_plan_text_and_errors(tmp_path, capsys):
    ride = _ride_file(tmp_path)
    assert main(["plan", "-c", str(ride), "--no-sensitivity"]) == 0
    text = capsys.readouterr().out
    assert "trap speed" in text and "constant" in text and "Course checks" in text
    assert main(["plan", "-c", str(tmp_path / "missing.toml")]) == 2
    steep = tmp_path / "steep.toml"
    steep.write_text(ride.read_text().replace(
        "elevation = [[0, 1405.0], [3000, 1396.0], [6700, 1381.0]]",
        "elevation = [[0, 1405.0], [1000, 1400.0], [1600, 1550.0], [6700, 1520.0]]"))
    assert main(["plan", "-c", str(steep)]) == 1
    assert "cannot reach the trap" in capsys.readouterr().err


def test_cli_plan_runs_as_a_program(tmp_path):
    # The installed entry point, in a separate process (start-up path included).
    ride = _ride_file(tmp_path)
    exe = Path(sys.executable).with_name("livecoach")
    proc = subprocess.run([str(exe), "plan", "-c", str(ride), "--json", "--no-sensitivity"],
                          capture_output=True, text=True, timeout=60)
    assert proc.returncode == 0, proc.stderr
    assert json.loads(proc.stdout)["trap_speed_mps"] > 25.0

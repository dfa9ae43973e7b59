"""`livecoach check` end to end, with the bench simulator standing in for the sensors."""

from __future__ import annotations

import json
import subprocess
import sys

import pytest

from livecoach.cli.main import main
from livecoach.config.ridefile import load_ride_file
from livecoach.plan import make_plan, save_plan

SENSORS = (
    'power_address = "C4:00:00:00:00:01"\n'
    'speed_address = "C4:00:00:00:00:02"\n'
    'gps_port = "/dev/livecoach-gps"\n'
)


@pytest.fixture
def ride_dir(tmp_path):
    """An example ride file naming three sensors, with a matching plan beside it."""
    assert main(["init", str(tmp_path)]) == 0
    ride = tmp_path / "ride.toml"
    text = ride.read_text()
    for key in ("power_address", "speed_address", "gps_port"):
        text = "\n".join(line for line in text.splitlines() if not line.startswith(f"{key} ="))
    ride.write_text(text.replace("[sensors]\n", "[sensors]\n" + SENSORS) + "\n[check]\nlisten_s = 4\n")
    save_plan(make_plan(load_ride_file(ride)), tmp_path / "plan.csv")
    return tmp_path


def _check(*args) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "livecoach", "check", *args], capture_output=True,
                          text=True, timeout=120)


def test_go_with_simulated_sensors(ride_dir):
    out = _check("--config", str(ride_dir / "ride.toml"), "--simulate", "default")
    assert out.returncode == 0, out.stdout + out.stderr
    assert out.stdout.rstrip().splitlines()[-1].startswith("GO")
    assert "NO-GO" not in out.stdout and "Traceback" not in out.stderr


def test_json_output(ride_dir, capsys):
    assert main(["check", "-c", str(ride_dir / "ride.toml"), "--simulate", "default", "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["go"] is True and data["verdict"].startswith("GO")
    statuses = {row["name"].split(" ")[0]: row["status"] for row in data["checks"]}
    assert statuses["power"] == "go" and statuses["clock"] == "go" and statuses["plan"] == "go"


def test_no_go_without_a_plan(ride_dir, capsys):
    (ride_dir / "plan.csv").unlink()
    assert main(["check", "-c", str(ride_dir / "ride.toml"), "--simulate", "default"]) == 1
    out = capsys.readouterr().out
    assert "NO-GO   plan" in out and "missing" in out and out.rstrip().endswith("NO-GO: 1 problem")


def test_no_go_when_a_sensor_is_missing_or_garbled(ride_dir, capsys):
    # A scenario of our own: no power meter, and bursts of garbage on the GPS line.
    scenario = ride_dir / "bench.toml"
    scenario.write_text(
        '[scenario]\nname = "check-bench"\n\n[power_meter]\nenabled = false\n\n'
        '[[fault]]\nkind = "garbage"\nchannel = "gps"\nstart_s = 0.5\ncount = 200\n'
    )
    code = main(["check", "-c", str(ride_dir / "ride.toml"), "--simulate", str(scenario), "--json"])
    assert code == 1
    data = json.loads(capsys.readouterr().out)
    rows = {row["name"].split(" ")[0]: row for row in data["checks"]}
    assert rows["power"]["status"] == "no-go" and "not in the simulated scenario" in rows["power"]["detail"]
    assert rows["GPS"]["status"] == "no-go" and "rejected" in rows["GPS"]["detail"]
    assert data["go"] is False


def test_invalid_ride_file_exit_2_with_table(ride_dir):
    ride = ride_dir / "ride.toml"
    ride.write_text(ride.read_text().replace("cda_m2 = 0.030", "cda_m2 = -1"))
    out = _check("--config", str(ride), "--simulate", "default")
    assert out.returncode == 2
    assert "NO-GO   ride file" in out.stdout and "[vehicle] cda_m2 = -1" in out.stdout
    assert "Traceback" not in out.stderr


def test_without_listening_sensors_are_not_probed(ride_dir, capsys):
    assert main(["check", "-c", str(ride_dir / "ride.toml"), "--no-listen", "--json"]) == 1
    data = json.loads(capsys.readouterr().out)
    power = next(r for r in data["checks"] if r["name"].startswith("power meter"))
    assert power["status"] == "no-go" and power["detail"] == "not probed"


def test_bad_listen_time_is_a_usage_error(ride_dir, capsys):
    assert main(["check", "-c", str(ride_dir / "ride.toml"), "--listen-s", "0"]) == 2
    assert "--listen-s" in capsys.readouterr().err


def test_help():
    out = subprocess.run([sys.executable, "-m", "livecoach", "check", "--help"], capture_output=True,
                         text=True, timeout=60)
    assert out.returncode == 0 and "go/no-go" in out.stdout and "--simulate" in out.stdout

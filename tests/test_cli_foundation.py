"""The foundation's commands: init, air, speed; --help; exit codes 0/1/2; no tracebacks."""

from __future__ import annotations

import json
import subprocess
import sys

import pytest

from livecoach.cli.main import main
from livecoach.config.ridefile import load_ride_file
from livecoach.physics.atmosphere import air_density_kgpm3, isa_pressure_pa
from livecoach.physics.steady import steady_power_w, steady_speed_mps


def _run(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "livecoach", *args], capture_output=True,
                          text=True, timeout=60)


@pytest.fixture
def ride_path(tmp_path):
    assert main(["init", str(tmp_path)]) == 0
    return tmp_path / "ride.toml"


def _json(capsys, argv) -> dict:
    capsys.readouterr()
    assert main(argv) == 0
    return json.loads(capsys.readouterr().out)


def test_init_writes_a_file_that_loads(tmp_path, capsys):
    target = tmp_path / "new" / "dir"
    assert main(["init", str(target)]) == 0
    assert "ride.toml" in capsys.readouterr().out
    ride = load_ride_file(target / "ride.toml")
    assert ride.vehicle.mass_kg > 0
    # Refuses to overwrite without --force (usage error), then overwrites with it.
    assert main(["init", str(target)]) == 2
    assert "--force" in capsys.readouterr().err
    assert main(["init", str(target), "--force"]) == 0


def test_init_into_a_file_path_fails_cleanly(tmp_path, capsys):
    blocker = tmp_path / "file"
    blocker.write_text("x")
    assert main(["init", str(blocker / "sub")]) == 1
    err = capsys.readouterr().err
    assert "cannot write" in err and "Traceback" not in err


@pytest.mark.parametrize("command", ["init", "air", "speed", "demo"])
def test_help_of_each_command(command):
    out = _run(command, "--help")
    assert out.returncode == 0
    assert out.stdout.startswith("usage: livecoach " + command)


def test_air_json_agrees_with_physics(capsys):
    out = _json(capsys, ["air", "--temperature-c", "25", "--pressure-pa", "85000",
                         "--humidity-pct", "30", "--json"])
    assert out["air_density_kgpm3"] == pytest.approx(air_density_kgpm3(85000.0, 25.0, 30.0), rel=1e-12)
    # psychrolib (ASHRAE Handbook formulas) gives 0.98900 kg/m^3 here; see test_atmosphere.py.
    assert out["air_density_kgpm3"] == pytest.approx(0.98900, rel=2e-3)


def test_air_from_altitude(capsys):
    out = _json(capsys, ["air", "--temperature-c", "15", "--altitude-m", "1000", "--json"])
    assert out["pressure_pa"] == pytest.approx(isa_pressure_pa(1000.0), rel=1e-12)
    # fluids.atmosphere.ATMOSPHERE_1976(1000).P = 89874.6 Pa (U.S. Standard Atmosphere 1976).
    assert out["pressure_pa"] == pytest.approx(89874.6, rel=1e-3)


def test_speed_json_agrees_with_physics(ride_path, capsys):
    ride = load_ride_file(ride_path)
    model, rho = ride.vehicle_model(), ride.air.density_kgpm3
    out = _json(capsys, ["speed", "-c", str(ride_path), "--power-w", "400", "--grade", "-0.003",
                         "--json"])
    assert out["speed_mps"] == pytest.approx(steady_speed_mps(400.0, -0.003, rho, model), rel=1e-9)
    assert out["speed_kmh"] == pytest.approx(out["speed_mps"] * 3.6)
    out = _json(capsys, ["speed", "-c", str(ride_path), "--speed-mps", "25", "--json"])
    assert out["power_w"] == pytest.approx(steady_power_w(25.0, 0.0, rho, model), rel=1e-12)


def test_speed_table_json(ride_path, capsys):
    out = _json(capsys, ["speed", "-c", str(ride_path), "--table", "--json"])
    speeds = [row["speed_mps"] for row in out["rows"]]
    assert len(speeds) >= 10 and speeds == sorted(speeds)


def test_speed_human_output(ride_path, capsys):
    assert main(["speed", "-c", str(ride_path), "--power-w", "300"]) == 0
    assert "m/s" in capsys.readouterr().out


@pytest.mark.parametrize(
    "argv, code, words",
    [
        (["air", "--temperature-c", "20", "--pressure-pa", "86000", "--humidity-pct", "120"], 2,
         "relative_humidity_pct"),
        (["air", "--temperature-c", "nan", "--pressure-pa", "86000"], 2, "temperature_c"),
        (["speed", "-c", "RIDE", "--power-w", "nan"], 2, "--power-w"),
        (["speed", "-c", "RIDE", "--speed-mps", "-3"], 2, "--speed-mps"),
        (["speed", "-c", "RIDE", "--grade", "3", "--power-w", "100"], 2, "--grade"),
        # A physically impossible request is a failed job, not a usage error.
        (["speed", "-c", "RIDE", "--power-w", "0", "--grade", "0.05"], 1, "no steady forward speed"),
    ],
)
def test_bad_options_exit_codes(ride_path, capsys, argv, code, words):
    argv = [str(ride_path) if a == "RIDE" else a for a in argv]
    capsys.readouterr()
    assert main(argv) == code
    err = capsys.readouterr().err
    assert words in err and "Traceback" not in err


def test_bad_ride_file_exit_2_without_traceback(tmp_path):
    bad = tmp_path / "ride.toml"
    assert main(["init", str(tmp_path)]) == 0
    bad.write_text(bad.read_text().replace("mass_kg = 98.0", "mass_kg = -98.0"))
    out = _run("speed", "-c", str(bad), "--power-w", "300")
    assert out.returncode == 2
    assert "[vehicle] mass_kg = -98.0" in out.stderr
    assert "Traceback" not in out.stderr and out.stdout == ""
    # --debug shows the traceback for developers.
    out = _run("speed", "--debug", "-c", str(bad), "--power-w", "300")
    assert out.returncode != 0 and "Traceback" in out.stderr


def test_missing_ride_file_and_usage_error(tmp_path):
    out = _run("speed", "-c", str(tmp_path / "none.toml"), "--power-w", "300")
    assert out.returncode == 2 and "not found" in out.stderr and "Traceback" not in out.stderr
    out = _run("speed", "--power-w", "300")  # --config missing: argparse usage error
    assert out.returncode == 2 and "--config" in out.stderr

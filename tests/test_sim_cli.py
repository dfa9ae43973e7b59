"""The simulator's commands end to end: ``livecoach bench`` and ``livecoach demo``."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from livecoach.recording.reader import RecordingReader
from sim.bench import bench_run, summarise
from sim.scenario import example_ride_path

LIVECOACH = [sys.executable, "-m", "livecoach"]


def _run(*args: str, timeout: float = 300.0) -> subprocess.CompletedProcess:
    return subprocess.run(LIVECOACH + list(args), capture_output=True, text=True, timeout=timeout)


@pytest.mark.slow
def test_bench_runs_seeds_in_parallel_and_every_fault_is_survived():
    out = _run("bench", "faults", "--runs", "2", "--workers", "2", "--no-coach", "--json")
    assert out.returncode == 0, out.stderr
    data = json.loads(out.stdout)
    assert data["seeds"] == [20310523, 20310524]
    assert data["workers"] == 2
    recs = data["records"]
    assert [r["seed"] for r in recs] == data["seeds"]
    for r in recs:
        assert r["end_reason"] == "run-out done"
        assert r["faults_injected"] == 11
        assert r["faults_survived"] == 11
        assert r["rejected_samples"] >= 17          # the garbage payloads at least
        assert 25.0 < r["trap_speed_mps"] < 35.0
        assert r["optimum_trap_speed_mps"] > r["planned_trap_speed_mps"] * 0.9
        for key in ("cda_m2", "cda_sd_m2", "crr", "crr_sd", "cda_within_2sd", "crr_within_2sd"):
            assert key in r
    s = data["summary"]
    assert s["runs"] == 2 and s["failed"] == 0
    assert s["faults"] == {"injected": 22, "survived": 22}
    # The two seeds really differ.
    assert recs[0]["trap_speed_mps"] != recs[1]["trap_speed_mps"]
    assert "bench: 2/2 runs done" in out.stderr        # progress without a terminal


def _short_scenario(tmp_path: Path, name: str) -> Path:
    """A shipped scenario cut to a 1.5 km run-up (same ride file, same truth)."""
    from sim.scenario import SCENARIO_DIR

    text = (SCENARIO_DIR / f"{name}.toml").read_text(encoding="utf-8")
    text = text.replace('ride = "example"', f'ride = "{example_ride_path()}"')
    path = tmp_path / f"{name}_short.toml"
    path.write_text(text + "\n[ride_patch.course]\nrunup_m = 1500\n", encoding="utf-8")
    return path


def test_bench_record_is_a_pure_function_of_its_arguments(tmp_path):
    short = str(_short_scenario(tmp_path, "coastdown"))
    a = bench_run(short, 4, coach=False)
    b = bench_run(short, 4, coach=False)
    assert a == b
    assert a["coached"] is False and a["cues"] == {}
    assert a["trap_speed_ratio"] == pytest.approx(a["trap_speed_mps"] / a["optimum_trap_speed_mps"])
    s = summarise([a, {"seed": 5, "error": "PlanError: test"}])
    assert s["runs"] == 2 and s["failed"] == 1
    assert s["trap_speed_mps"]["achieved"]["mean"] == pytest.approx(a["trap_speed_mps"])


def test_bench_reports_a_bad_scenario_as_a_usage_error():
    out = _run("bench", "no_such_scenario", "--runs", "1")
    assert out.returncode == 2
    assert "scenario 'no_such_scenario' is neither a shipped scenario nor a file" in out.stderr
    assert "Traceback" not in out.stderr
    out = _run("bench", "default", "--runs", "0")
    assert out.returncode == 2 and "--runs 0" in out.stderr


@pytest.mark.slow
def test_demo_runs_closed_loop_records_replays_identically_and_reports(tmp_path):
    out = _run("demo", "--out", str(tmp_path / "demo"), "--json", timeout=240.0)
    assert out.returncode == 0, out.stderr
    res = json.loads(out.stdout)
    rec = Path(res["recording"])
    assert rec.is_file() and rec.suffix == ".lcrec"
    assert Path(res["report"]).is_file() and Path(res["plan"]).is_file()
    assert res["output_check"] == "reproduced"
    assert 25.0 < res["truth_trap_speed_mps"] < 35.0
    reader = RecordingReader(rec)
    assert reader.header.extra["simulator"]["scenario"] == "default"
    assert reader.header.extra["plan_csv"].startswith(Path(res["plan"]).read_text()[:20])
    n = sum(1 for _ in reader.events())
    assert n == res["events"]
    # A second demo (a short one) never overwrites the first recording.
    short = _short_scenario(tmp_path, "default")
    out2 = _run("demo", "--out", str(tmp_path / "demo"), "--no-report", "--scenario", str(short),
                timeout=240.0)
    assert out2.returncode == 0, out2.stderr
    assert "demo-002.lcrec" in out2.stdout
    assert "cue:" in out2.stdout                       # status lines without a terminal
    assert rec.is_file()

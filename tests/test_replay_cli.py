"""Replay and export end to end: a simulated ride goes through the real live
loop with the recording sink, is written to disk, and is replayed and
exported by the real ``livecoach`` command in a subprocess."""

from __future__ import annotations

import csv
import json
import subprocess
import sys
from pathlib import Path

import pytest

from livecoach.live.loop import LiveLoop
from livecoach.pipeline.processor import Pipeline
from livecoach.recording import Recorder, RecordingReader, RecordingSink, header_for_ride
from livecoach.recording.replay import replay_recording
from livecoach.stream.events import RawEvent

#: The stable keys of the replay summary (issue 3, item 8).
SUMMARY_KEYS = {
    "samples", "duration_s", "distance_m", "cda_m2", "cda_sd_m2", "crr", "crr_sd", "batch_cda_m2",
    "batch_crr", "rejected_samples", "trap_speed_mps", "max_speed_mps", "sensor_gaps", "warnings",
}


def livecoach(*args: str) -> subprocess.CompletedProcess:
    """The real command in a fresh process."""
    return subprocess.run([sys.executable, "-m", "livecoach", *args], capture_output=True, text=False)


@pytest.fixture
def cli(capsys):
    """The command in this process (same code path as the console script, cheaper)."""
    from livecoach.cli.main import main

    def run(*args: str) -> subprocess.CompletedProcess:
        capsys.readouterr()
        code = main(list(args))
        out, err = capsys.readouterr()
        return subprocess.CompletedProcess(args, code, out.encode(), err.encode())

    return run


#: A short seeded bench run on the example ride (invented team, vehicle and
#: course): a 1.5 km run-up into the 200 m trap, with ticks as the live loop makes them.
SHORT_SCENARIO = """
[scenario]
name = "short replay test run"
seed = 7
ride = "example"
step_hz = 50
runout_m = 30
tick_hz = 4
[ride_patch.course]
runup_m = 1500
[rider]
profile = [[0, 620], [250, 420]]
[gps]
rate_hz = 2
sentences = "RMC"
"""


@pytest.fixture(scope="module")
def sim_run():
    from sim.run import simulate
    from sim.scenario import parse_scenario_text, resolve_scenario_path

    base = resolve_scenario_path("default").parent
    return simulate(parse_scenario_text(SHORT_SCENARIO, "short replay test run", base))


@pytest.fixture(scope="module")
def recording(sim_run, tmp_path_factory) -> Path:
    """The simulated ride recorded as the live loop records it (events and outputs)."""
    ride = sim_run.scenario.ride
    path = tmp_path_factory.mktemp("rec") / "ride.lcrec"
    rec = Recorder(path, header_for_ride(ride, start_wall_time_unix_s=1_900_000_000.0,
                                         start_monotonic_s=0.0), flush_interval_s=0.2)
    sink = RecordingSink(rec)
    assert rec.start()
    loop = LiveLoop(ride, None, sinks=[sink])
    for ev in sim_run.events:
        loop.handle(ev)
    rec.close()
    assert rec.events_written == len(sim_run.events) and rec.outputs_written > 20
    return path


def test_replay_json_is_byte_identical_and_has_the_stable_keys(recording):
    first, second = livecoach("replay", str(recording), "--json"), livecoach("replay", str(recording), "--json")
    assert first.returncode == 0, first.stdout + first.stderr
    assert first.stdout == second.stdout                     # byte-identical
    summary = json.loads(first.stdout)
    assert SUMMARY_KEYS <= set(summary)
    assert summary["warnings"] == [] and summary["rejected_samples"] == 0
    assert summary["samples"] > 600 and summary["trap_speed_mps"] is not None


def test_replay_reproduces_the_recorded_outputs(recording, sim_run):
    result = replay_recording(recording)
    assert result.output_check == "reproduced"
    assert result.outputs_compared == result.outputs_stored > 20 and result.output_mismatches == 0
    assert result.events == len(sim_run.events)
    # The replay matches a direct run of the pipeline over the same events.
    pipe = Pipeline(sim_run.scenario.ride, None)
    for ev in sim_run.events:
        pipe.feed(ev)
    direct = pipe.summary()
    assert json.dumps(direct, sort_keys=True) == json.dumps(result.summary, sort_keys=True)


def test_replay_detects_outputs_it_does_not_reproduce(sim_run, tmp_path, cli):
    ride = sim_run.scenario.ride
    path = tmp_path / "tampered.lcrec"
    rec = Recorder(path, header_for_ride(ride, start_wall_time_unix_s=1.9e9, start_monotonic_s=0.0))
    assert rec.start()
    sink = RecordingSink(rec)
    pipe = Pipeline(ride)
    for i, ev in enumerate(sim_run.events[:800]):
        sink.on_event(ev)
        res = pipe.feed(ev)
        state = res.state
        if i == 600:    # what the live run "showed" differs from what the pipeline computes
            state = type(state)(**{**{f: getattr(state, f) for f in state.__slots__}, "phase": "trap"})
        sink.on_state(state)
    rec.close()
    out = cli("replay", str(path))
    assert out.returncode == 1
    assert b"does not reproduce the recorded outputs" in out.stderr
    assert b"recorded by livecoach" not in out.stderr     # same version: no excuse offered
    assert b"state output" in out.stdout and b"differs" in out.stdout


def test_a_recording_from_another_version_says_so_when_it_differs(sim_run, tmp_path, cli):
    import dataclasses

    from livecoach import __version__

    ride = sim_run.scenario.ride
    path = tmp_path / "older.lcrec"
    header = header_for_ride(ride, start_wall_time_unix_s=1.9e9, start_monotonic_s=0.0)
    rec = Recorder(path, dataclasses.replace(header, software_version="0.0.9"))
    assert rec.start()
    sink = RecordingSink(rec)
    pipe = Pipeline(ride)
    for i, ev in enumerate(sim_run.events[:700]):
        sink.on_event(ev)
        state = pipe.feed(ev).state
        if i == 600:    # the older version computed something else here
            state = type(state)(**{**{f: getattr(state, f) for f in state.__slots__}, "phase": "trap"})
        sink.on_state(state)
    rec.close()
    out = cli("replay", str(path))
    assert out.returncode == 1
    assert f"recorded by livecoach 0.0.9 and this is {__version__}".encode() in out.stderr


def test_torn_tail_replays_with_a_warning(recording, tmp_path, cli):
    data = recording.read_bytes()
    cut = tmp_path / "cut.lcrec"
    cut.write_bytes(data[:len(data) * 2 // 3 + 5])
    out = cli("replay", str(cut), "--json")
    assert out.returncode == 0, out.stderr
    summary = json.loads(out.stdout)
    assert any("torn or unreadable tail" in w for w in summary["warnings"])
    assert any("no end record" in w for w in summary["warnings"])
    assert 0 < summary["samples"] < replay_recording(recording).summary["samples"]


def test_mid_file_damage_replays_around_it_or_stops_in_strict_mode(recording, tmp_path, cli):
    data = bytearray(recording.read_bytes())
    at = len(data) // 2
    data[at:at + 3] = b"\x00\x00\x00"
    bad = tmp_path / "bad.lcrec"
    bad.write_bytes(bytes(data))
    out = cli("replay", str(bad), "--json")
    assert out.returncode == 0, out.stderr
    warnings = json.loads(out.stdout)["warnings"]
    assert any("damaged data skipped" in w and "record(s) lost" in w for w in warnings)
    strict = cli("replay", str(bad), "--strict")
    assert strict.returncode == 1
    assert b"damaged record at byte" in strict.stderr and b"Traceback" not in strict.stderr


def test_replay_paces_at_n_times_real_time(recording):
    fake = {"now": 0.0}
    slept: list[float] = []

    def sleep(dt: float) -> None:
        slept.append(dt)
        fake["now"] += dt

    result = replay_recording(recording, speed=20.0, sleep=sleep, clock=lambda: fake["now"])
    # The events span duration_s of receive time; at 20x they take duration/20 of wall time.
    assert fake["now"] == pytest.approx(result.summary["duration_s"] / 20.0, rel=1e-6)
    assert result.output_check == "reproduced"


def test_bad_inputs_give_clear_errors(tmp_path, recording, cli):
    missing = cli("replay", str(tmp_path / "none.lcrec"))
    assert missing.returncode == 2 and b"not found" in missing.stderr
    text = tmp_path / "notes.txt"
    text.write_text("hello\n")
    notrec = cli("replay", str(text))
    assert notrec.returncode == 1 and b"not a livecoach recording" in notrec.stderr
    csv_path = tmp_path / "ride.csv"
    csv_path.write_text("time_s,power_w,speed_mps\n0,1,1\n")
    nocfg = cli("replay", str(csv_path))
    assert nocfg.returncode == 2 and b"--config" in nocfg.stderr
    speed = livecoach("replay", str(recording), "--speed", "0")
    assert speed.returncode == 2 and b"positive factor" in speed.stderr
    for out in (missing, notrec, nocfg, speed):
        assert b"Traceback" not in out.stderr


def test_export_csv_and_replay_it(recording, tmp_path, cli):
    header = RecordingReader(recording).header
    ride_toml = tmp_path / "ride.toml"
    ride_toml.write_text(header.ride_text, encoding="utf-8")
    out_csv = tmp_path / "ride.csv"
    exp = cli("export", str(recording), "--csv", str(out_csv))
    assert exp.returncode == 0, exp.stderr
    with open(out_csv, newline="", encoding="utf-8") as f:
        rows = list(csv.DictReader(f))
    # One row per state update with power and speed known, values as the pipeline had them.
    states = []
    replay_recording(recording, on_step=lambda r: states.append(r.state))
    known = [s for s in states if s.power_w is not None and s.speed_mps is not None]
    assert len(rows) == len(known)
    for row, st in ((rows[0], known[0]), (rows[-1], known[-1]), (rows[len(rows) // 2], known[len(known) // 2])):
        assert float(row["time_s"]) == st.t_s and float(row["speed_mps"]) == st.speed_mps
        assert float(row["power_w"]) == st.power_w and row["phase"] == st.phase
    again = cli("export", str(recording), "--csv", str(out_csv))
    assert again.returncode == 2 and b"exists already" in again.stderr
    assert cli("export", str(recording), "--csv", str(out_csv), "--force").returncode == 0

    rec_summary = replay_recording(recording).summary
    csv_run = cli("replay", str(out_csv), "--config", str(ride_toml), "--json")
    assert csv_run.returncode == 0, csv_run.stderr
    summary = json.loads(csv_run.stdout)
    assert SUMMARY_KEYS <= set(summary)
    assert summary["max_speed_mps"] == pytest.approx(rec_summary["max_speed_mps"], abs=1e-9)
    assert summary["distance_m"] == pytest.approx(rec_summary["distance_m"], abs=1.0)
    assert any("output column(s)" in w for w in summary["warnings"])


def test_csv_replay_counts_bad_rows_and_fails_on_a_missing_column(recording, tmp_path, cli):
    ride_toml = tmp_path / "ride.toml"
    ride_toml.write_text(RecordingReader(recording).header.ride_text, encoding="utf-8")
    lines = ["time_s,power_w,speed_mps"] + [f"{i * 0.5},{300 + i},{min(20.0, 1.0 + i * 0.2)}"
                                           for i in range(200)]
    lines[50] = "24.5,n/a,10"
    good = tmp_path / "good.csv"
    good.write_text("\n".join(lines) + "\n", encoding="utf-8")
    out = cli("replay", str(good), "--config", str(ride_toml), "--json")
    assert out.returncode == 0, out.stderr
    summary = json.loads(out.stdout)
    assert summary["rejected_samples"] >= 1
    assert any(f"{good}:51: column power_w: 'n/a' is not a number" in w for w in summary["warnings"])
    bad = tmp_path / "bad.csv"
    bad.write_text("time_s,watts,speed_mps\n0,1,1\n", encoding="utf-8")
    out = cli("replay", str(bad), "--config", str(ride_toml))
    assert out.returncode == 1
    assert b"required column 'power_w' is missing" in out.stderr and b"Traceback" not in out.stderr


def test_ride_file_override_skips_the_output_check(recording, tmp_path, cli):
    header = RecordingReader(recording).header
    ride_toml = tmp_path / "ride.toml"
    ride_toml.write_text(header.ride_text.replace("cda_m2 = 0.03\n", "cda_m2 = 0.032\n"), encoding="utf-8")
    from livecoach.config.ridefile import load_ride_file

    result = replay_recording(recording, ride=load_ride_file(ride_toml))
    assert result.output_check.startswith("skipped")
    out = cli("replay", str(recording), "--config", str(ride_toml), "--json")
    assert out.returncode == 0
    assert any("used instead of the one in the recording" in w for w in json.loads(out.stdout)["warnings"])


def test_marker_events_only(tmp_path):
    # A recording of control events alone (no sensors) replays without error.
    from livecoach.cli.commands.init import example_ride_text
    from livecoach.config.ridefile import parse_ride_text

    ride = parse_ride_text(example_ride_text(), "example")
    path = tmp_path / "m.lcrec"
    rec = Recorder(path, header_for_ride(ride, start_wall_time_unix_s=1.9e9, start_monotonic_s=0.0))
    assert rec.start()
    for i in range(20):
        rec.append(RawEvent(float(i), "control", f"marker m{i}".encode()))
    rec.close()
    result = replay_recording(path)
    assert result.events == 20 and result.summary["rejected_samples"] == 0


def test_live_ride_recording_with_a_plan_replays_the_same_cues(sim_run, tmp_path):
    import asyncio

    from livecoach.config.ridefile import load_ride_file
    from livecoach.plan import make_plan
    from livecoach.recording.session import open_ride_recording

    ride_file = tmp_path / "ride.toml"
    ride_file.write_text(sim_run.scenario.ride.text, encoding="utf-8")
    ride = load_ride_file(ride_file)
    plan = make_plan(ride)
    warnings: list[str] = []
    sink = open_ride_recording(ride, plan=plan, on_warning=warnings.append,
                               clock=lambda: 0.0, wall_clock=lambda: 1_900_000_000.0)
    # The file goes to [recording] directory, relative to the ride file, named by the UTC start.
    assert sink.recorder.path == tmp_path / "recordings" / "ride-20300317-174640.lcrec"
    loop = LiveLoop(ride, plan, sinks=[sink])
    asyncio.run(sink.start())
    for ev in sim_run.events:
        loop.handle(ev)
    asyncio.run(sink.stop())
    assert warnings == [] and sink.recorder.status == "closed"

    reader = RecordingReader(sink.recorder.path)
    assert "plan_csv" in reader.header.extra
    stored = [json.loads(o.value_json) for o in reader.outputs() if o.kind == "notice"]
    assert any(n["kind"] == "cue" for n in stored)            # coaching was recorded ...
    result = replay_recording(sink.recorder.path)               # ... and comes out again
    assert result.output_check == "reproduced" and result.outputs_compared == result.outputs_stored


def test_disk_full_mid_ride_stops_recording_never_the_coaching(sim_run, tmp_path):
    import errno
    import os
    import time

    class FullDisk:
        """A real file on a "card" that fills up after 40 kB (ENOSPC, as write(2) reports it)."""

        def __init__(self, path):
            self.real, self.room = open(path, "xb", buffering=0), 40_000

        def write(self, data):
            if self.room <= 0:
                raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
            n = self.real.write(data[:self.room])
            self.room -= n
            return n

        def fileno(self):
            return self.real.fileno()

        def close(self):
            self.real.close()

    ride = sim_run.scenario.ride
    warnings: list[str] = []
    rec = Recorder(tmp_path / "full.lcrec", header_for_ride(ride, start_wall_time_unix_s=1.9e9,
                                                             start_monotonic_s=0.0),
                   flush_interval_s=0.05, on_warning=warnings.append, opener=FullDisk)
    assert rec.start()
    with_rec = LiveLoop(ride, None, sinks=[RecordingSink(rec)])
    without = LiveLoop(ride, None)
    for i, ev in enumerate(sim_run.events):
        a, b = with_rec.handle(ev), without.handle(ev)
        assert a.state == b.state and a.notices == b.notices      # coaching unchanged throughout
        if i % 100 == 0:
            time.sleep(0.06)                                      # let the writer reach the full disk
    rec.close()
    assert rec.status == "failed" and any("disk is full" in w for w in warnings)
    assert with_rec.stats.sink_errors == {}                        # the sink never raised into the loop
    got = list(RecordingReader(tmp_path / "full.lcrec").events())
    assert got == sim_run.events[:rec.events_written] and 0 < len(got) < len(sim_run.events)

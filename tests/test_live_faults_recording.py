"""The recording under fire, in the real live job: ``livecoach ride`` as a child process.

A feeder thread plays a simulated run-up (the ``airspeed`` scenario: NMEA
GPS at 10 Hz and lsl1 air-speed lines) in real time into two
pseudo-terminals that the ride file names as the GPS and microcontroller
ports, so the child reads them through its real serial sources, pipeline,
sinks and recorder. Then the child is killed with SIGKILL, or the card under
its recording fills up or turns read-only. Issue 3's promises, checked here:
the file replays, at most the last second is lost, the coaching never
stops, a full or read-only card is reported loudly. The corrupt-file cases
check that a replay stops at the damage with exactly the outputs of the
records before it.

Clock: receive times are CLOCK_MONOTONIC, shared by every process on Linux
(clock_gettime(2)), so the parent can compare them with its own readings.
"""

from __future__ import annotations

import dataclasses
import json
import os
import random
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import pytest

from live_rig import PtyDevice
from livecoach.recording import RecordingReader
from livecoach.recording.replay import replay_recording
from livecoach.stream.events import CH_GPS, CH_MCU

#: The promise of issue 3: after a kill or a power cut at most the last second is lost.
MAX_LOSS_S = 1.0


class Feeder:
    """Plays the scenario's GPS and mcu lines in real time into two ptys (a thread)."""

    def __init__(self, folder: Path) -> None:
        from sim.scenario import load_scenario

        sc = load_scenario("airspeed")
        self.scenario = dataclasses.replace(sc, rider=dataclasses.replace(sc.rider, mode="scripted"))
        self.gps = PtyDevice(folder / "gps")
        self.mcu = PtyDevice(folder / "mcu")
        self.gps.plug()
        self.mcu.plug()
        self.last_write_t = 0.0
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, daemon=True)

    def _run(self) -> None:
        from sim.run import iter_events

        t0 = time.monotonic()
        for ev in iter_events(self.scenario):
            if self._stop.is_set():
                return
            wait = t0 + ev.t_s - time.monotonic()
            if wait > 0 and self._stop.wait(wait):
                return
            if ev.channel == CH_GPS:
                ok = self.gps.write(ev.payload + b"\r\n")
            elif ev.channel == CH_MCU:
                ok = self.mcu.write(ev.payload + b"\n")
            else:
                continue
            if ok:
                self.last_write_t = time.monotonic()

    def ride_file(self, folder: Path, recordings: Path) -> Path:
        text = self.scenario.ride.text
        text = text.replace('gps_port = ""', f'gps_port = "{self.gps.link}"')
        text = text.replace('mcu_port = ""', f'mcu_port = "{self.mcu.link}"')
        assert self.gps.link in text and self.mcu.link in text
        path = folder / "ride.toml"
        path.write_text(text + "\n[web]\nenabled = false\n", encoding="utf-8")
        return path

    def __enter__(self) -> "Feeder":
        self._thread.start()
        return self

    def __exit__(self, *exc) -> None:
        self._stop.set()
        self._thread.join(5.0)
        self.gps.unplug()
        self.mcu.unplug()


def _start_ride(folder: Path, feeder: Feeder, recordings: Path, duration_s: float | None = None):
    from livecoach.plan import make_plan, save_plan

    ride_path = feeder.ride_file(folder, recordings)
    plan_path = folder / "plan.csv"
    if not plan_path.exists():
        save_plan(make_plan(feeder.scenario.ride), plan_path)
    exe = Path(sys.executable).with_name("livecoach")
    argv = [str(exe), "ride", "--config", str(ride_path), "--plan", str(plan_path), "--no-display", "--mute",
            "--no-web", "--recordings", str(recordings)]
    if duration_s is not None:
        argv += ["--duration", str(duration_s)]
    return subprocess.Popen(argv, stdout=subprocess.PIPE, stderr=subprocess.PIPE)


def _wait_for_recording(folder: Path, timeout_s: float = 30.0) -> Path:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        files = sorted(folder.glob("*.lcrec"))
        if files and files[0].stat().st_size > 4096:       # header and a first batch of events
            return files[0]
        time.sleep(0.02)
    raise AssertionError(f"no recording with events appeared in {folder}")


@pytest.mark.slow
def test_sigkill_of_the_live_job_loses_at_most_one_second(tmp_path):
    rng = random.Random(20310607)
    for k in range(2):
        folder = tmp_path / f"run{k}"
        folder.mkdir()
        recordings = folder / "recordings"
        with Feeder(folder) as feeder:
            child = _start_ride(folder, feeder, recordings)
            try:
                path = _wait_for_recording(recordings)
                time.sleep(rng.uniform(1.0, 2.5))
                t_kill = time.monotonic()
                last_line = feeder.last_write_t
                os.kill(child.pid, signal.SIGKILL)
            finally:
                child.wait(10)
        assert child.returncode == -signal.SIGKILL
        reader = RecordingReader(path)
        events = list(reader.events())
        assert events and reader.end is None            # no end record: it was killed
        # everything received up to a second before the kill is on disk
        assert events[-1].t_s >= min(t_kill, last_line) - MAX_LOSS_S, (t_kill - events[-1].t_s)
        result = replay_recording(path)
        assert result.events == len(events)
        assert any("no end record" in w for w in result.summary["warnings"])
        # the replay coaches with the plan from the header and gives the very outputs stored
        assert result.output_check == "reproduced" and result.outputs_compared > 0


def _ride_until_done(folder: Path, recordings: Path, duration_s: float, during=None):
    with Feeder(folder) as feeder:
        child = _start_ride(folder, feeder, recordings, duration_s=duration_s)
        if during is not None:
            path = _wait_for_recording(recordings)
            during(path)
        out, err = child.communicate(timeout=duration_s + 60.0)
    return child.returncode, out.decode(), err.decode()


def _check_kept_and_replays(path: Path, err: str) -> None:
    reader = RecordingReader(path)
    events = list(reader.events())
    assert len(events) >= 10                            # what was written before the failure is there
    result = replay_recording(path)
    assert result.events == len(events)
    assert result.output_check in ("reproduced", "skipped: the recording is damaged")
    assert "Traceback" not in err
    n = int(err.rsplit("livecoach ride: ", 1)[1].split()[0])
    assert n > len(events)                              # the job went on processing after the failure


@pytest.mark.slow
def test_disk_full_during_the_live_job(tmp_path, mounted):
    mnt = mounted("small", ["-t", "tmpfs", "-o", "size=1m", "tmpfs"])

    def fill_card(_path: Path) -> None:
        time.sleep(0.5)
        with open(mnt / "other-files.bin", "wb", buffering=0) as f:    # something else fills the card
            try:
                while True:
                    f.write(b"\0" * 4096)
            except OSError:
                pass

    code, out, err = _ride_until_done(tmp_path, mnt, 5.0, during=fill_card)
    assert code == 0, err
    assert "disk is full (ENOSPC)" in err and "coaching goes on" in err
    _check_kept_and_replays(sorted(mnt.glob("*.lcrec"))[0], err)


@pytest.mark.slow
def test_card_turns_read_only_during_the_live_job(tmp_path, failing_card):
    # ext4 mounted errors=remount-ro turns read-only on a storage error, as a
    # failing SD card does; the kernel's trigger_fs_error file raises one
    # (Linux ext4 sysfs interface, Documentation/ABI/testing/sysfs-fs-ext4).
    mnt, trigger = failing_card

    def fail_card(_path: Path) -> None:
        time.sleep(1.5)
        trigger.write_text("livecoach test: card failure during a ride")

    code, out, err = _ride_until_done(tmp_path, mnt, 5.0, during=fail_card)
    assert code == 0, err
    # the first write after the error may fail with EIO (the journal aborts) or,
    # once the kernel has remounted, EROFS: both stop the recording loudly
    assert "read-only (EROFS)" in err or "input/output error on the storage device (EIO)" in err
    assert "coaching goes on" in err
    _check_kept_and_replays(sorted(mnt.glob("*.lcrec"))[0], err)


# ------------------------------------------------------------------ damaged files
@pytest.fixture(scope="module")
def recorded(tmp_path_factory):
    """A minute of the closed-loop default run through the live loop, recorded."""
    import asyncio

    from livecoach.live.loop import LiveLoop
    from livecoach.plan import make_plan
    from livecoach.recording.session import open_ride_recording
    from sim.scenario import load_scenario
    from sim.source import SimSource

    sc = load_scenario("default")
    sc = dataclasses.replace(sc, run=dataclasses.replace(sc.run, max_time_s=60.0))
    plan = make_plan(sc.ride)
    path = tmp_path_factory.mktemp("rec") / "minute.lcrec"
    sink = open_ride_recording(sc.ride, plan=plan, path=path, clock=lambda: 0.0,
                               wall_clock=lambda: 1_937_000_000.0)
    holder = {}
    source = SimSource(sc, speed=None, target_fn=lambda: holder["loop"].pipeline.state.target_power_w)
    loop = LiveLoop(sc.ride, plan, [source], [sink], clock=source.clock, tick_s=1e9)
    holder["loop"] = loop
    asyncio.run(loop.run())
    return path, sc.ride, plan


def _frame_offsets(path: Path) -> list[int]:
    """Byte offsets where each record after the header starts (format: docs/recording_format.md)."""
    import struct

    data = path.read_bytes()
    pos = 8
    offsets = []
    while pos + 12 <= len(data):
        n = struct.unpack_from("<I", data, pos + 4)[0]
        offsets.append(pos)
        pos += 12 + n + 4
    return offsets[1:]


def test_truncated_recording_replays_exactly_the_records_before_the_cut(recorded, tmp_path, capsys):
    from livecoach.cli.main import main
    from livecoach.pipeline.run import replay_events

    path, ride, plan = recorded
    data = path.read_bytes()
    events = list(RecordingReader(path).events())
    offsets = _frame_offsets(path)
    rng = random.Random(5)
    for k in sorted(rng.sample(range(100, len(offsets) - 1), 2)):
        cut_at = offsets[k] + rng.randrange(1, offsets[k + 1] - offsets[k])   # inside record k
        cut = tmp_path / f"cut{k}.lcrec"
        cut.write_bytes(data[:cut_at])
        kept = list(RecordingReader(cut).events())
        assert kept == events[:len(kept)] and len(kept) >= k * 0.9
        assert main(["replay", str(cut), "--json"]) == 0
        summary = json.loads(capsys.readouterr().out)
        assert any("torn or unreadable tail" in w for w in summary["warnings"])
        reference = replay_events(ride, kept, plan).summary
        for key in ("samples", "distance_m", "cda_m2", "crr", "rejected_samples", "max_speed_mps",
                    "predicted_trap_speed_mps"):
            assert summary[key] == reference[key], key


@pytest.mark.parametrize("damage, words", [
    (lambda d: d[:8] + bytes([d[8] ^ 0xFF]) + d[9:], "header"),
    (lambda d: d[:8] + d[8:40], "header"),
    (lambda d: d[:5], "recording"),
])
def test_damaged_header_is_a_clear_error_naming_the_file(recorded, tmp_path, damage, words):
    path, _ride, _plan = recorded
    bad = tmp_path / "bad.lcrec"
    bad.write_bytes(damage(path.read_bytes()))
    r = subprocess.run([str(Path(sys.executable).with_name("livecoach")), "replay", str(bad)],
                       capture_output=True, text=True, timeout=120)
    assert r.returncode == 1
    assert str(bad) in r.stderr and words in r.stderr and "Traceback" not in r.stderr


@pytest.mark.slow
def test_a_full_card_reaches_every_sink_as_a_warning_and_coaching_goes_on(tmp_path, mounted):
    """In process, so the sinks can be watched: the recorder's warning (from its
    writer thread) is posted to the loop and reaches the sinks as a Notice;
    the states before and after it carry a target power and a cue."""
    import asyncio

    from live_rig import Collector
    from livecoach.live.loop import LiveLoop
    from livecoach.plan import make_plan
    from livecoach.recording.session import open_ride_recording
    from sim.scenario import load_scenario
    from sim.source import SimSource

    mnt = mounted("small", ["-t", "tmpfs", "-o", "size=1m", "tmpfs"])
    sc = load_scenario("default")
    sc = dataclasses.replace(sc, run=dataclasses.replace(sc.run, max_time_s=150.0))
    plan = make_plan(sc.ride)
    holder = {}
    sink = open_ride_recording(sc.ride, plan=plan, path=mnt / "ride.lcrec",
                               on_warning=lambda text: holder["loop"].post_warning(text),
                               clock=lambda: 0.0, wall_clock=lambda: 1_937_000_000.0)
    col = Collector()

    class FillTheCard:
        """Something else fills the card 40 s into the ride."""

        done = False

        def on_state(self, st) -> None:
            if st.t_s >= 40.0 and not self.done:
                self.done = True
                with open(mnt / "other-files.bin", "wb", buffering=0) as f:
                    try:
                        while True:
                            f.write(b"\0" * 4096)
                    except OSError:
                        pass

    source = SimSource(sc, speed=20.0, target_fn=lambda: holder["loop"].pipeline.state.target_power_w)
    loop = LiveLoop(sc.ride, plan, [source], [sink, col, FillTheCard()], clock=source.clock, tick_s=1e9)
    holder["loop"] = loop
    asyncio.run(asyncio.wait_for(loop.run(), 120.0))
    warned = [n for n in col.notices if n.kind == "warning" and "disk is full" in n.text]
    assert len(warned) == 1 and 40.0 <= warned[0].t_s < 45.0
    assert sink.recorder.status == "failed" and loop.stats.sink_errors == {}
    after = col.between(warned[0].t_s, 150.0)
    assert len(after) > 2000 and all(s.target_power_w is not None and s.cue for s in after)
    result = replay_recording(mnt / "ride.lcrec")
    assert 0 < result.events < loop.stats.events + loop.stats.ticks

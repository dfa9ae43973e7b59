"""Sound cues: tone synthesis, WAV files, the timing rules, the worker thread, players."""

from __future__ import annotations

import shutil
import subprocess
import threading
import time
import wave
from pathlib import Path

import numpy as np
import pytest

from livecoach.errors import ConfigError, SinkError
from livecoach.pipeline.state import Notice
from livecoach.sinks.audio import (
    PRIORITY_SAFETY,
    SAMPLE_RATE_HZ,
    TONE_PATTERNS,
    AudioCueSink,
    ClipMaker,
    CommandPlayer,
    Cue,
    CueScheduler,
    FilePlayer,
    Tone,
    cue_from_notice,
    find_player,
    pattern_duration_s,
    pattern_for,
    read_wav,
    synthesize,
    wav_duration_s,
    write_wav,
)


# ------------------------------------------------------------------ synthesis
def test_tone_frequency_length_and_level(tmp_path):
    samples = synthesize((Tone(880.0, 0.5, 0.1),), volume_pct=50.0)
    # Length: (0.5 + 0.1) s at 22 050 Hz.
    assert samples.dtype == np.int16 and samples.size == round(0.6 * SAMPLE_RATE_HZ)
    tone = samples[: round(0.5 * SAMPLE_RATE_HZ)].astype(float)
    # The spectral peak is at 880 Hz: numpy.fft as the reference DFT (bin width 2 Hz).
    spectrum = np.abs(np.fft.rfft(tone))
    freqs = np.fft.rfftfreq(tone.size, 1.0 / SAMPLE_RATE_HZ)
    assert abs(freqs[np.argmax(spectrum)] - 880.0) <= 2.0
    # Peak: 50 % of 0.8 of full scale; silent gap; soft start (fade-in, no click).
    assert np.max(np.abs(tone)) == pytest.approx(0.5 * 0.8 * 32767, rel=1e-3)
    assert np.all(samples[round(0.5 * SAMPLE_RATE_HZ):] == 0)
    assert abs(int(samples[0])) <= 1 and np.max(np.abs(samples[:20])) < 0.05 * 32767
    # Round trip through a real file, read back with the standard library's wave module.
    path = write_wav(tmp_path / "t.wav", samples)
    with wave.open(str(path), "rb") as w:
        assert (w.getnchannels(), w.getsampwidth(), w.getframerate()) == (1, 2, SAMPLE_RATE_HZ)
        assert w.getnframes() == samples.size
    back, rate = read_wav(path)
    assert rate == SAMPLE_RATE_HZ and np.array_equal(back, samples)
    assert wav_duration_s(path) == pytest.approx(0.6, abs=1e-4)


def test_every_pattern_is_short_and_distinct():
    shapes = set()
    for name, tones in TONE_PATTERNS.items():
        assert 0.1 < pattern_duration_s(tones) <= 1.0, name   # short enough to not mask the words
        shapes.add(tuple((t.freq_hz, t.duration_s) for t in tones))
    assert len(shapes) == len(TONE_PATTERNS)
    # Rising for more power, falling for ease (our own convention).
    more = [t.freq_hz for t in TONE_PATTERNS["more"]]
    ease = [t.freq_hz for t in TONE_PATTERNS["ease"]]
    assert more == sorted(more) and ease == sorted(ease, reverse=True)


def test_bad_inputs_are_clear_errors(tmp_path):
    with pytest.raises(ConfigError, match="volume_pct"):
        synthesize(TONE_PATTERNS["hold"], volume_pct=120.0)
    with pytest.raises(ConfigError, match="bad tone"):
        synthesize((Tone(-5.0, 0.1),))
    with pytest.raises(SinkError, match="cannot read sound file"):
        (tmp_path / "junk.wav").write_bytes(b"RIFF not really")
        read_wav(tmp_path / "junk.wav")
    with pytest.raises(ConfigError, match="player = 'gramophone'"):
        find_player("gramophone")
    with pytest.raises(SinkError, match="not installed"):
        CommandPlayer(("no-such-player-program-xyz", "{wav}"))
    with pytest.raises(ConfigError, match="min_interval_s"):
        CueScheduler(min_interval_s=-1.0)
    assert find_player("none") is None


def test_cue_names_and_notices():
    assert pattern_for("More power") == "more" and pattern_for("stand-down") == "stand_down"
    assert pattern_for("something new") == "other"
    # The live coach's cue names (livecoach/coach/cues.py).
    assert [pattern_for(n) for n in ("ready", "lift", "steady", "ease", "go", "trap", "done")] == [
        "hold", "more", "hold", "ease", "final", "trap", "stand_down"]
    cue = cue_from_notice(Notice(1.0, "cue", "ease", {"cue": "ease", "text": "ease to 300 watts"}), 9.0)
    assert cue == Cue("ease", "ease to 300 watts", 9.0, 0)
    alarm = cue_from_notice(Notice(1.0, "alarm", "drag changed: CdA +0.003", {"kind": "drag_changed"}), 9.0)
    assert alarm.pattern == "alarm" and alarm.priority == PRIORITY_SAFETY
    lost = cue_from_notice(Notice(1.0, "warning", "ble.csc stale", {"channel": "ble.csc", "state": "stale"}), 9.0)
    assert lost.words == "wheel sensor lost"
    assert cue_from_notice(Notice(1.0, "warning", "back", {"channel": "ble.csc", "state": "recovered"}), 9.0) is None
    # 25 m/s = 90.0 km/h (1 km/h = 1/3.6 m/s by definition).
    done = cue_from_notice(Notice(1.0, "phase", "phase done", {"phase": "done", "trap_speed_mps": 25.0}), 9.0)
    assert done.words == "trap 90.0 kilometres per hour"


# ------------------------------------------------------------- timing rules
def test_scheduler_interval_replacement_age_repeat_and_mute():
    s = CueScheduler(min_interval_s=2.0, repeat_after_s=8.0, max_age_s=3.0)
    assert s.offer(Cue("more", "more power", 0.0)) == "queued"
    assert s.take(0.0).words == "more power"
    # Two newer cues within the interval: the later replaces the earlier.
    assert s.offer(Cue("hold", "hold 330", 0.5)) == "queued"
    assert s.offer(Cue("ease", "ease to 310", 0.8)) == "replaced"
    assert s.take(1.9) is None and s.wait_s(1.9) == pytest.approx(0.1)
    assert s.take(2.0).words == "ease to 310"
    # Identical words inside repeat_after_s are not repeated; after it they are.
    assert s.offer(Cue("ease", "ease to 310", 5.0)) == "repeat"
    assert s.offer(Cue("ease", "ease to 310", 10.5)) == "queued"
    # A cue that waited longer than max_age_s is dropped as out of date.
    assert s.take(14.0) is None and s.pending is None and s.counts["too_old"] == 1
    # A safety cue is not replaced by a lesser cue, and skips the interval wait.
    assert s.offer(Cue("hold", "hold", 20.0)) == "queued"
    assert s.take(20.0) is not None
    assert s.offer(Cue("stand_down", "stand down", 20.1, PRIORITY_SAFETY)) == "queued"
    assert s.offer(Cue("more", "more power", 20.2)) == "kept"
    assert s.take(20.3).words == "stand down"
    # At the end of a run the trap result and the stand-down cue become one clip, safety first.
    assert s.offer(Cue("result", "trap 110.5 kilometres per hour", 25.0, 1)) == "queued"
    assert s.offer(Cue("stand_down", "Done — stand down, brake gently", 25.0, PRIORITY_SAFETY)) == "merged"
    assert s.take(25.0).words == "Done — stand down, brake gently. trap 110.5 kilometres per hour"
    # Mute drops what waits and all that comes.
    s.offer(Cue("hold", "hold now", 30.0))
    s.set_muted(True)
    assert s.pending is None and s.offer(Cue("hold", "hold again", 30.1)) == "muted"
    assert s.take(40.0) is None


class RecordingPlayer:
    """A test player: notes start/end of each clip and sleeps ``play_s`` per clip."""

    name = "recording"

    def __init__(self, play_s: float = 0.15, block: threading.Event | None = None) -> None:
        self.play_s = play_s
        self.block = block
        self.log: list[tuple[float, float, str]] = []
        self.active = 0
        self.max_active = 0
        self.lock = threading.Lock()

    def play(self, wav: Path, timeout_s: float) -> None:
        with self.lock:
            self.active += 1
            self.max_active = max(self.max_active, self.active)
        start = time.monotonic()
        assert wav.is_file()
        if self.block is not None:
            self.block.wait(10.0)
        time.sleep(self.play_s)
        with self.lock:
            self.active -= 1
        self.log.append((start, time.monotonic(), wav.name))

    def stop(self) -> None:
        pass


def _cue(name: str, text: str) -> Notice:
    return Notice(0.0, "cue", name, {"cue": name, "text": text})


def _wait(pred, timeout_s: float = 10.0) -> None:
    deadline = time.monotonic() + timeout_s
    while not pred():
        if time.monotonic() > deadline:
            raise AssertionError("timed out waiting for the audio thread")
        time.sleep(0.01)


def test_sink_plays_one_at_a_time_with_interval(tmp_path):
    player = RecordingPlayer(play_s=0.15)
    sink = AudioCueSink(player=player, voice=False, min_interval_s=0.4, repeat_after_s=0.0,
                        max_age_s=5.0, cache_dir=tmp_path)
    sink.start_thread()
    try:
        sink.on_notice(_cue("more", "more power"))
        _wait(lambda: len(player.log) == 1)
        # A burst while the interval runs: only the newest survives.
        for text in ("hold 1", "hold 2", "hold 3", "hold 4"):
            sink.on_notice(_cue("hold", text))
        _wait(lambda: len(player.log) == 2)
        time.sleep(0.5)
    finally:
        sink.stop_thread()
    assert player.max_active == 1                                    # never overlapping
    (s1, e1, _), (s2, _, _) = player.log
    assert s2 >= e1 and s2 - s1 >= 0.4 - 0.02                         # interval between starts
    assert [p.cue.words for p in sink.history] == ["more power", "hold 4"]
    stats = sink.stats()
    assert stats["replaced"] == 3 and stats["played"] == 2 and stats["errors"] == 0


def test_on_notice_never_waits_for_the_player(tmp_path):
    gate = threading.Event()
    player = RecordingPlayer(play_s=0.0, block=gate)
    sink = AudioCueSink(player=player, voice=False, min_interval_s=0.0, max_age_s=60.0, cache_dir=tmp_path)
    sink.start_thread()
    try:
        sink.on_notice(_cue("hold", "first"))
        _wait(lambda: player.active == 1)       # the player is now stuck
        for i in range(500):                    # the loop keeps going regardless
            sink.on_notice(_cue("hold", f"cue {i}"))
        assert player.active == 1 and not player.log
        gate.set()
        _wait(lambda: len(player.log) == 2)
    finally:
        sink.stop_thread()
    assert [p.cue.words for p in sink.history] == ["first", "cue 499"]


def test_mute_and_player_failures_do_not_stop_the_sink(tmp_path):
    class FailingPlayer(RecordingPlayer):
        def play(self, wav, timeout_s):
            raise SinkError("no sound card")

    sink = AudioCueSink(player=FailingPlayer(), voice=False, min_interval_s=0.0, cache_dir=tmp_path)
    sink.start_thread()
    try:
        sink.on_notice(_cue("hold", "a"))
        _wait(lambda: len(sink.history) == 1)
        sink.on_notice(_cue("ease", "b"))
        _wait(lambda: len(sink.history) == 2)
        sink.set_muted(True)
        sink.on_notice(_cue("more", "c"))
        time.sleep(0.1)
    finally:
        sink.stop_thread()
    assert sink.errors == 2 and "no sound card" in sink.last_error
    assert len(sink.history) == 2 and sink.stats()["muted"] == 1


def test_file_player_and_a_real_command_player(tmp_path):
    clips = ClipMaker(tmp_path / "cache", voice=False)
    wav = clips.clip(Cue("final", "", 0.0))
    assert wav_duration_s(wav) == pytest.approx(pattern_duration_s(TONE_PATTERNS["final"]), abs=1e-3)
    assert clips.clip(Cue("final", "", 5.0)) == wav                  # cached
    fp = FilePlayer(tmp_path / "out")
    fp.play(wav, 5.0)
    assert fp.played[0].read_bytes() == wav.read_bytes()
    if shutil.which("sox") is None:
        pytest.skip("sox not installed: no real command player to run here")
    # sox reads the real file and writes to its null output: a real subprocess player.
    CommandPlayer(("sox", "-q", "{wav}", "-n")).play(wav, timeout_s=10.0)
    (tmp_path / "bad.wav").write_bytes(b"not a wav")
    with pytest.raises(SinkError, match="failed on bad.wav"):
        CommandPlayer(("sox", "-q", "{wav}", "-n")).play(tmp_path / "bad.wav", timeout_s=10.0)


# ---------------------------------------------------------------- espeak-ng
@pytest.mark.skipif(shutil.which("espeak-ng") is None, reason="espeak-ng not installed")
def test_real_espeak_render_and_full_clip(tmp_path):
    from livecoach.sinks.audio import speak_to_wav

    path = speak_to_wav("hold three hundred and thirty watts", tmp_path / "w.wav", words_per_minute=185)
    duration_s = wav_duration_s(path)
    # Six words at 185 words per minute is about 2 s; espeak-ng adds a short final pause.
    assert 1.0 < duration_s < 4.0
    with wave.open(str(path), "rb") as w:
        assert (w.getnchannels(), w.getsampwidth()) == (1, 2)
        samples = np.frombuffer(w.readframes(w.getnframes()), dtype="<i2")
    assert np.sqrt(np.mean(samples.astype(float) ** 2)) > 300     # speech, not silence
    if shutil.which("soxi"):
        # sox's own reading of the header agrees with the wave module.
        soxi = float(subprocess.run(["soxi", "-D", str(path)], capture_output=True, text=True).stdout)
        assert soxi == pytest.approx(duration_s, abs=1e-3)
    clips = ClipMaker(tmp_path / "cache", voice=True)
    clip = clips.clip(Cue("hold", "hold three hundred and thirty watts", 0.0))
    expected = pattern_duration_s(TONE_PATTERNS["hold"]) + 0.12 + duration_s
    assert wav_duration_s(clip) == pytest.approx(expected, abs=0.01)
    assert clips.speech_errors == 0


def test_sink_from_ride_file_settings(tmp_path):
    from livecoach.cli.commands.init import example_ride_text
    from livecoach.config.ridefile import parse_ride_text

    text = example_ride_text() + '\n[audio]\nmuted = true\nmin_interval_s = 4.5\nplayer = "none"\n' \
        '\n[display]\nspeed_unit = "mph"\n'
    ride = parse_ride_text(text, "ride.toml")
    sink = AudioCueSink.from_ride(ride, cache_dir=tmp_path)
    assert sink.player is None and sink.muted and sink.scheduler.min_interval_s == 4.5
    assert sink.speed_unit == "mph"
    with pytest.raises(ConfigError, match=r"\[audio\] player = 'kazoo'"):
        parse_ride_text(example_ride_text() + '\n[audio]\nplayer = "kazoo"\n', "ride.toml")


def test_sink_to_file_player_with_words(tmp_path):
    """The whole path: notice -> scheduler -> clip (tone, and words when espeak-ng is
    installed) -> a player that writes WAV files."""
    player = FilePlayer(tmp_path / "played")
    sink = AudioCueSink(player=player, min_interval_s=0.0, cache_dir=tmp_path / "cache")
    sink.start_thread()
    try:
        sink.on_notice(Notice(0.0, "phase", "phase done", {"phase": "done", "trap_speed_mps": 30.5}))
        _wait(lambda: len(sink.history) == 1, timeout_s=30.0)
    finally:
        sink.stop_thread()
    assert sink.errors == 0, sink.last_error
    (wav,) = player.played
    tone_s = pattern_duration_s(TONE_PATTERNS["result"])
    if shutil.which("espeak-ng"):
        # "trap 109.8 kilometres per hour" spoken after the tone: well over a second more.
        assert wav_duration_s(wav) > tone_s + 1.0
    else:
        assert wav_duration_s(wav) == pytest.approx(tone_s, abs=1e-3)

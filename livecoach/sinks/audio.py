"""Sound cues for the rider: a short tone pattern per cue, then the cue's words.

* Tone patterns are this project's own: each cue family has a recognisable
  shape (rising = more power, level = hold, falling = ease, rapid high beeps
  = final effort, a long high tone = in the trap, a low falling pair = stand
  down). They are synthesised with numpy as 16-bit mono PCM and written as
  WAV files with the standard library's :mod:`wave`.
* Spoken words come from espeak-ng (``espeak-ng --stdin -w FILE``) when it is
  installed; without it the tone alone plays.
* One clip (tone + words) plays at a time through a subprocess player
  (``aplay`` from ALSA, ``paplay`` from PulseAudio, or sox's ``play``), or a
  :class:`FilePlayer` that only writes the clips to a folder.

Rules (:class:`CueScheduler`): never two clips at once; at most one cue
waits, and a newer cue replaces it (a safety cue — stand down, drag alarm —
is not replaced by a lesser one); cues start no closer than
``min_interval_s`` apart (safety cues may start as soon as the player is
free); the same words are not repeated within ``repeat_after_s``; a cue that
waited longer than ``max_age_s`` is dropped as out of date; mute drops all.

:class:`AudioCueSink` is the shell: ``on_notice`` only hands the cue to the
scheduler under a lock held for microseconds; a worker thread makes the clip
and runs the player, so nothing here can block the event loop.

Cues are advisory: the rider's judgement and the event's safety rules come first.
"""

from __future__ import annotations

import collections
import hashlib
import math
import shutil
import subprocess
import tempfile
import threading
import time
import wave
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable, Protocol

import numpy as np

from livecoach.errors import ConfigError, SinkError
from livecoach.pipeline.state import NOTICE_ALARM, NOTICE_CUE, NOTICE_PHASE, NOTICE_WARNING, Notice

#: Sample rate of every clip, Hz. espeak-ng writes 22 050 Hz mono 16-bit WAV
#: (its native rate), so tones and words join without resampling.
SAMPLE_RATE_HZ = 22050
#: Raised-cosine fade at each end of a tone, s (avoids clicks; common practice).
RAMP_S = 0.008
#: Silence between the tone pattern and the words, s.
WORD_GAP_S = 0.12
#: Peak amplitude of a tone at 100 % volume, as a fraction of full scale.
FULL_SCALE_FRACTION = 0.8

#: Priorities: a waiting cue is replaced only by one of equal or higher priority.
PRIORITY_NORMAL = 0
PRIORITY_HIGH = 1      # final effort, in the trap
PRIORITY_SAFETY = 2    # stand down, drag alarm, sensor lost: may skip the interval wait


@dataclass(frozen=True, slots=True)
class Tone:
    """One beep: ``freq_hz`` (Hz) for ``duration_s`` (s), then ``gap_after_s`` (s) of silence."""

    freq_hz: float
    duration_s: float
    gap_after_s: float = 0.05


#: The tone pattern of each cue family (our own design).
TONE_PATTERNS: dict[str, tuple[Tone, ...]] = {
    "more": (Tone(660, 0.09), Tone(880, 0.09), Tone(1175, 0.15, 0.0)),
    "hold": (Tone(880, 0.20, 0.0),),
    "ease": (Tone(1175, 0.09), Tone(880, 0.09), Tone(660, 0.15, 0.0)),
    "final": (Tone(1320, 0.06), Tone(1320, 0.06), Tone(1320, 0.06), Tone(1760, 0.12, 0.0)),
    "trap": (Tone(990, 0.45, 0.0),),
    "stand_down": (Tone(523, 0.25, 0.08), Tone(392, 0.40, 0.0)),
    "alarm": (Tone(740, 0.11), Tone(1480, 0.11), Tone(740, 0.11), Tone(1480, 0.11, 0.0)),
    "warning": (Tone(440, 0.12, 0.08), Tone(440, 0.12, 0.0)),
    "result": (Tone(784, 0.10), Tone(988, 0.10), Tone(1175, 0.10), Tone(1568, 0.25, 0.0)),
    "other": (Tone(784, 0.10), Tone(1047, 0.10, 0.0)),
}

#: Cue names (normalised: lower case, '_' for spaces and dashes) -> pattern.
CUE_ALIASES: dict[str, str] = {
    "more": "more", "more_power": "more", "push": "more", "up": "more", "harder": "more", "lift": "more",
    "hold": "hold", "steady": "hold", "on_target": "hold", "ready": "hold",
    "ease": "ease", "ease_off": "ease", "less": "ease", "easier": "ease", "down": "ease",
    "final": "final", "final_effort": "final", "all_out": "final", "sprint": "final", "go": "final",
    "trap": "trap", "in_trap": "trap", "in_the_trap": "trap",
    "stand_down": "stand_down", "stop": "stand_down", "abort": "stand_down", "done": "stand_down",
}

_PRIORITY_OF_PATTERN = {"stand_down": PRIORITY_SAFETY, "alarm": PRIORITY_SAFETY,
                        "warning": PRIORITY_SAFETY, "final": PRIORITY_HIGH, "trap": PRIORITY_HIGH,
                        "result": PRIORITY_HIGH}

#: Spoken names of the sensor channels for "... lost" warnings.
CHANNEL_WORDS = {
    "ble.cycling_power": "power meter",
    "ble.csc": "wheel sensor",
    "ble.heart_rate": "heart rate",
    "serial.gps": "GPS",
    "serial.mcu": "air data",
}

#: Player programs: name -> argv template ("{wav}" is replaced by the file).
PLAYER_COMMANDS: dict[str, tuple[str, ...]] = {
    "aplay": ("aplay", "-q", "{wav}"),       # ALSA
    "paplay": ("paplay", "{wav}"),           # PulseAudio / PipeWire
    "play": ("play", "-q", "{wav}"),         # sox
}


def normalise_cue(name: str | None) -> str:
    return (name or "").strip().lower().replace(" ", "_").replace("-", "_")


def pattern_for(cue_name: str | None) -> str:
    """The tone-pattern name for a coach cue name (``"other"`` when unknown)."""
    return CUE_ALIASES.get(normalise_cue(cue_name), "other")


# ------------------------------------------------------------------ synthesis
def pattern_duration_s(tones: tuple[Tone, ...]) -> float:
    """Length of a pattern, s (tones plus their gaps)."""
    return sum(t.duration_s + t.gap_after_s for t in tones)


def synthesize(tones: tuple[Tone, ...], volume_pct: float = 80.0,
               sample_rate_hz: int = SAMPLE_RATE_HZ) -> np.ndarray:
    """A tone pattern as 16-bit PCM samples (numpy int16, mono).

    Each tone is a sine of ``freq_hz`` with a raised-cosine fade of
    :data:`RAMP_S` at both ends; peak = ``volume_pct`` % of
    :data:`FULL_SCALE_FRACTION` of full scale.
    """
    if not (math.isfinite(volume_pct) and 0.0 <= volume_pct <= 100.0):
        raise ConfigError(f"audio volume_pct = {volume_pct!r}: expected 0..100 %")
    amp = 32767.0 * FULL_SCALE_FRACTION * volume_pct / 100.0
    parts: list[np.ndarray] = []
    for tone in tones:
        if not (tone.freq_hz > 0 and tone.duration_s > 0 and tone.gap_after_s >= 0):
            raise ConfigError(f"bad tone {tone!r}: frequency and duration must be positive")
        n = int(round(tone.duration_s * sample_rate_hz))
        t = np.arange(n) / sample_rate_hz
        wave_ = np.sin(2.0 * np.pi * tone.freq_hz * t)
        ramp_n = min(int(round(RAMP_S * sample_rate_hz)), n // 2)
        if ramp_n > 0:
            ramp = 0.5 - 0.5 * np.cos(np.pi * np.arange(ramp_n) / ramp_n)
            wave_[:ramp_n] *= ramp
            wave_[n - ramp_n:] *= ramp[::-1]
        parts.append(np.round(amp * wave_).astype(np.int16))
        parts.append(np.zeros(int(round(tone.gap_after_s * sample_rate_hz)), dtype=np.int16))
    return np.concatenate(parts) if parts else np.zeros(0, dtype=np.int16)


def write_wav(path: Path, samples: np.ndarray, sample_rate_hz: int = SAMPLE_RATE_HZ) -> Path:
    """Write mono 16-bit PCM ``samples`` to a WAV file (atomically: temp file + rename)."""
    path = Path(path)
    tmp = path.with_name(path.name + ".part")
    data = np.asarray(samples, dtype="<i2").tobytes()
    try:
        with wave.open(str(tmp), "wb") as w:
            w.setnchannels(1)
            w.setsampwidth(2)
            w.setframerate(sample_rate_hz)
            w.writeframes(data)
        tmp.replace(path)
    except OSError as exc:
        raise SinkError(f"cannot write sound file {path}: {exc}") from None
    return path


def read_wav(path: Path) -> tuple[np.ndarray, int]:
    """Mono int16 samples and the sample rate (Hz) of a 16-bit PCM WAV file
    (a stereo file is mixed down)."""
    try:
        with wave.open(str(path), "rb") as w:
            channels, width, rate = w.getnchannels(), w.getsampwidth(), w.getframerate()
            raw = w.readframes(w.getnframes())
    except (OSError, EOFError, wave.Error) as exc:
        raise SinkError(f"cannot read sound file {path}: {exc}") from None
    if width != 2:
        raise SinkError(f"sound file {path}: {8 * width}-bit samples, expected 16-bit PCM")
    samples = np.frombuffer(raw, dtype="<i2")
    if channels > 1:
        samples = samples.reshape(-1, channels).mean(axis=1).astype(np.int16)
    return samples.astype(np.int16), rate


def wav_duration_s(path: Path) -> float:
    """Length of a WAV file, s (frames / rate, from its header)."""
    try:
        with wave.open(str(path), "rb") as w:
            return w.getnframes() / float(w.getframerate())
    except (OSError, EOFError, wave.Error) as exc:
        raise SinkError(f"cannot read sound file {path}: {exc}") from None


def _resample(samples: np.ndarray, from_hz: int, to_hz: int) -> np.ndarray:
    """Linear-interpolation resampling (speech only; adequate for a voice prompt)."""
    if from_hz == to_hz or samples.size == 0:
        return samples
    n_out = int(round(samples.size * to_hz / from_hz))
    x_out = np.arange(n_out) * (from_hz / to_hz)
    return np.round(np.interp(x_out, np.arange(samples.size), samples.astype(float))).astype(np.int16)


# --------------------------------------------------------------------- speech
def find_espeak() -> str | None:
    """Path of espeak-ng (or espeak), or None when neither is installed."""
    return shutil.which("espeak-ng") or shutil.which("espeak")


def speak_to_wav(text: str, path: Path, *, voice: str = "en", words_per_minute: int = 185,
                 espeak: str | None = None, timeout_s: float = 15.0) -> Path:
    """Render ``text`` to a WAV file with espeak-ng (text on stdin, never a shell).

    Raises :class:`SinkError` when espeak-ng is missing, fails, or writes no
    sound (with no sound device it still exits 0, so the file is checked).
    """
    exe = espeak or find_espeak()
    if exe is None:
        raise SinkError("espeak-ng is not installed (apt-get install espeak-ng); cues play as tones only")
    path = Path(path)
    argv = [exe, "-v", voice, "-s", str(int(words_per_minute)), "-w", str(path), "--stdin"]
    try:
        out = subprocess.run(argv, input=text.encode("utf-8"), capture_output=True,
                             timeout=timeout_s, check=False)
    except (OSError, subprocess.TimeoutExpired) as exc:
        raise SinkError(f"espeak-ng failed for {text!r}: {exc}") from None
    if out.returncode != 0 or not path.is_file() or path.stat().st_size <= 44:
        err = out.stderr.decode("utf-8", "replace").strip()[-300:]
        raise SinkError(f"espeak-ng made no sound for {text!r} (exit {out.returncode}): {err}")
    return path


# ----------------------------------------------------------------------- cues
@dataclass(frozen=True, slots=True)
class Cue:
    """A sound to play: tone ``pattern``, spoken ``words``, offered at ``t_s``
    (the sink's clock, s), with a ``priority`` (``PRIORITY_*``)."""

    pattern: str
    words: str
    t_s: float
    priority: int = PRIORITY_NORMAL


def cue_from_notice(notice: Notice, t_s: float, speed_unit: str = "km/h") -> Cue | None:
    """The cue to sound for a pipeline notice, or None for notices that stay silent."""
    if notice.kind == NOTICE_CUE:
        name = notice.data.get("cue") or notice.text
        words = notice.data.get("text") or notice.text or ""
        pattern = pattern_for(name)
        return Cue(pattern, str(words), t_s, _PRIORITY_OF_PATTERN.get(pattern, PRIORITY_NORMAL))
    if notice.kind == NOTICE_ALARM:
        return Cue("alarm", "drag alarm", t_s, PRIORITY_SAFETY)
    if notice.kind == NOTICE_WARNING and notice.data.get("state") in ("stale", "down"):
        ch = str(notice.data.get("channel", ""))
        return Cue("warning", f"{CHANNEL_WORDS.get(ch, 'sensor')} lost", t_s, PRIORITY_SAFETY)
    if notice.kind == NOTICE_PHASE and notice.data.get("phase") == "done":
        v = notice.data.get("trap_speed_mps")
        if isinstance(v, (int, float)) and math.isfinite(v):
            if speed_unit == "mph":
                words = f"trap {v / 0.44704:.1f} miles per hour"
            elif speed_unit == "m/s":
                words = f"trap {v:.2f} metres per second"
            else:
                words = f"trap {v * 3.6:.1f} kilometres per hour"
            return Cue("result", words, t_s, PRIORITY_HIGH)
    return None


def _merge_result(waiting: Cue, new: Cue) -> Cue | None:
    """The stand-down cue and the trap result come together at the end of a
    run: play them as one clip, the safety words first, so neither is lost."""
    pair = {waiting.pattern, new.pattern}
    if pair != {"result", "stand_down"}:
        return None
    first, second = (waiting, new) if waiting.pattern == "stand_down" else (new, waiting)
    return Cue("stand_down", f"{first.words.rstrip('. ')}. {second.words}", new.t_s, PRIORITY_SAFETY)


class CueScheduler:
    """The timing rules, on an injected clock (pure bookkeeping, no threads).

    ``offer(cue)`` when a cue arrives; ``take(now_s, busy)`` when the player
    could start one; ``wait_s(now_s)`` says how long until a waiting cue may start.
    """

    def __init__(self, *, min_interval_s: float = 2.0, repeat_after_s: float = 8.0,
                 max_age_s: float = 3.0) -> None:
        for name, v in (("min_interval_s", min_interval_s), ("repeat_after_s", repeat_after_s),
                        ("max_age_s", max_age_s)):
            if not (math.isfinite(v) and v >= 0.0):
                raise ConfigError(f"audio {name} = {v!r}: expected a number >= 0 s")
        self.min_interval_s = min_interval_s
        self.repeat_after_s = repeat_after_s
        self.max_age_s = max_age_s
        self.pending: Cue | None = None
        self.muted = False
        self._last_start_s: float | None = None
        self._last_words: dict[tuple[str, str], float] = {}
        self.counts = collections.Counter()

    def offer(self, cue: Cue) -> str:
        """Returns what happened: "queued", "replaced", "kept" (a safety cue
        waits and this one is lesser), "merged" (stand-down and trap result
        joined), "repeat" or "muted"."""
        self.counts["offered"] += 1
        if self.muted:
            self.counts["muted"] += 1
            return "muted"
        last = self._last_words.get((cue.pattern, cue.words))
        if last is not None and cue.t_s - last < self.repeat_after_s:
            self.counts["repeat"] += 1
            return "repeat"
        if self.pending is not None:
            merged = _merge_result(self.pending, cue)
            if merged is not None:
                self.counts["merged"] += 1
                self.pending = merged
                return "merged"
            if cue.priority < self.pending.priority:
                self.counts["lesser"] += 1
                return "kept"
            self.counts["replaced"] += 1
            self.pending = cue
            return "replaced"
        self.pending = cue
        return "queued"

    def _expire(self, now_s: float) -> None:
        if self.pending is not None and now_s - self.pending.t_s > self.max_age_s:
            self.counts["too_old"] += 1
            self.pending = None

    def wait_s(self, now_s: float) -> float | None:
        """Seconds until the waiting cue may start (0 = now), None if none waits."""
        self._expire(now_s)
        if self.pending is None:
            return None
        if self._last_start_s is None or self.pending.priority >= PRIORITY_SAFETY:
            return 0.0
        return max(0.0, self._last_start_s + self.min_interval_s - now_s)

    def take(self, now_s: float, busy: bool = False) -> Cue | None:
        """The cue to start now (and mark it started), or None."""
        w = self.wait_s(now_s)
        if busy or w is None or w > 0.0:
            return None
        cue, self.pending = self.pending, None
        self._last_start_s = now_s
        self._last_words[(cue.pattern, cue.words)] = now_s
        if len(self._last_words) > 256:
            cutoff = now_s - self.repeat_after_s
            self._last_words = {k: v for k, v in self._last_words.items() if v >= cutoff}
        self.counts["started"] += 1
        return cue

    def set_muted(self, muted: bool) -> None:
        self.muted = bool(muted)
        if self.muted and self.pending is not None:
            self.counts["muted"] += 1
            self.pending = None


# -------------------------------------------------------------------- players
class Player(Protocol):
    name: str

    def play(self, wav: Path, timeout_s: float) -> None:  # blocks until played
        ...

    def stop(self) -> None:
        ...


class CommandPlayer:
    """Plays a WAV file with a program (argv template with ``{wav}``), one at a time."""

    def __init__(self, argv: tuple[str, ...], name: str | None = None) -> None:
        if not argv or shutil.which(argv[0]) is None:
            raise SinkError(f"sound player {argv[0] if argv else '?'!r} is not installed")
        if "{wav}" not in argv:
            raise ConfigError(f"player command {argv!r} has no {{wav}} placeholder")
        self.argv = tuple(argv)
        self.name = name or argv[0]
        self._proc: subprocess.Popen | None = None
        self._lock = threading.Lock()

    def play(self, wav: Path, timeout_s: float) -> None:
        argv = [str(wav) if a == "{wav}" else a for a in self.argv]
        try:
            with self._lock:
                self._proc = subprocess.Popen(argv, stdin=subprocess.DEVNULL,
                                              stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
            proc = self._proc
            try:
                _, err = proc.communicate(timeout=timeout_s)
            except subprocess.TimeoutExpired:
                proc.kill()
                proc.communicate()
                raise SinkError(f"{self.name} did not finish playing {wav.name} within {timeout_s:.1f} s") from None
        except OSError as exc:
            raise SinkError(f"{self.name} could not start: {exc}") from None
        finally:
            with self._lock:
                self._proc = None
        if proc.returncode != 0:
            text = err.decode("utf-8", "replace").strip()[-200:]
            raise SinkError(f"{self.name} failed on {wav.name} (exit {proc.returncode}): {text}")

    def stop(self) -> None:
        with self._lock:
            if self._proc is not None and self._proc.poll() is None:
                self._proc.kill()


class FilePlayer:
    """Plays nothing: copies each clip to ``out_dir`` as ``NNNN-<pattern>.wav``
    (for tests, demos and boards without a sound device)."""

    name = "file"

    def __init__(self, out_dir: Path) -> None:
        self.out_dir = Path(out_dir)
        try:
            self.out_dir.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise SinkError(f"cannot create the sound folder {self.out_dir}: {exc}") from None
        self.played: list[Path] = []

    def play(self, wav: Path, timeout_s: float) -> None:
        target = self.out_dir / f"{len(self.played) + 1:04d}-{Path(wav).name}"
        try:
            shutil.copyfile(wav, target)
        except OSError as exc:
            raise SinkError(f"cannot write {target}: {exc}") from None
        self.played.append(target)

    def stop(self) -> None:
        pass


def find_player(choice: str = "auto") -> Player | None:
    """The player named by ``choice`` ("aplay", "paplay", "play"), the first
    installed one for "auto", or None for "none" (or "auto" with none installed)."""
    if choice == "none":
        return None
    if choice == "auto":
        for name, argv in PLAYER_COMMANDS.items():
            if shutil.which(argv[0]):
                return CommandPlayer(argv, name)
        return None
    if choice not in PLAYER_COMMANDS:
        raise ConfigError(f"[audio] player = {choice!r}: expected auto, none or one of {', '.join(PLAYER_COMMANDS)}")
    return CommandPlayer(PLAYER_COMMANDS[choice], choice)


# ------------------------------------------------------------------ clip maker
class ClipMaker:
    """Makes (and caches) the WAV clip for a cue: tone pattern, gap, spoken words."""

    def __init__(self, cache_dir: Path, *, volume_pct: float = 80.0, voice: bool = True,
                 speech_voice: str = "en", words_per_minute: int = 185,
                 espeak: str | None = None, max_cached: int = 64) -> None:
        self.cache_dir = Path(cache_dir)
        self.cache_dir.mkdir(parents=True, exist_ok=True)
        self.volume_pct = volume_pct
        self.speech_voice = speech_voice
        self.words_per_minute = words_per_minute
        self.espeak = (espeak or find_espeak()) if voice else None
        self.max_cached = max_cached
        self._tones: dict[str, np.ndarray] = {}
        self._clips: collections.OrderedDict[tuple[str, str], Path] = collections.OrderedDict()
        self.speech_errors = 0
        self.last_speech_error: str | None = None

    def tone(self, pattern: str) -> np.ndarray:
        if pattern not in self._tones:
            self._tones[pattern] = synthesize(TONE_PATTERNS.get(pattern, TONE_PATTERNS["other"]),
                                              self.volume_pct)
        return self._tones[pattern]

    def speech(self, words: str) -> np.ndarray | None:
        """The words as samples at :data:`SAMPLE_RATE_HZ`, or None (no espeak / failed)."""
        if not words.strip() or self.espeak is None:
            return None
        key = hashlib.sha1(f"{self.speech_voice}|{self.words_per_minute}|{words}".encode()).hexdigest()[:16]
        path = self.cache_dir / f"words-{key}.wav"
        try:
            if not path.is_file():
                speak_to_wav(words, path, voice=self.speech_voice,
                             words_per_minute=self.words_per_minute, espeak=self.espeak)
            samples, rate = read_wav(path)
        except SinkError as exc:
            self.speech_errors += 1
            self.last_speech_error = str(exc)
            return None
        samples = _resample(samples, rate, SAMPLE_RATE_HZ)
        return np.round(samples.astype(float) * self.volume_pct / 100.0).astype(np.int16)

    def clip(self, cue: Cue) -> Path:
        """Path of the WAV clip for ``cue`` (made on first use, then reused)."""
        key = (cue.pattern, cue.words)
        if key in self._clips and self._clips[key].is_file():
            self._clips.move_to_end(key)
            return self._clips[key]
        parts = [self.tone(cue.pattern)]
        speech = self.speech(cue.words)
        if speech is not None:
            parts += [np.zeros(int(WORD_GAP_S * SAMPLE_RATE_HZ), dtype=np.int16), speech]
        digest = hashlib.sha1(f"{cue.pattern}|{cue.words}|{speech is not None}".encode()).hexdigest()[:12]
        path = write_wav(self.cache_dir / f"cue-{cue.pattern}-{digest}.wav", np.concatenate(parts))
        self._clips[key] = path
        while len(self._clips) > self.max_cached:
            _, old = self._clips.popitem(last=False)
            old.unlink(missing_ok=True)
        return path


# ----------------------------------------------------------------------- sink
@dataclass(frozen=True, slots=True)
class Played:
    """One clip that was played: start/end on the sink clock (s), the cue, the file."""

    start_s: float
    end_s: float
    cue: Cue
    wav: Path
    error: str | None = None


class AudioCueSink:
    """Sound cues from pipeline notices: a worker thread plays one clip at a time.

    ``player``: a :class:`Player` (None: no sound, cues are only counted);
    ``cache_dir``: where clips are made (default: a private temp folder).
    """

    def __init__(self, *, player: Player | None = None, muted: bool = False, voice: bool = True,
                 min_interval_s: float = 2.0, repeat_after_s: float = 8.0, max_age_s: float = 3.0,
                 volume_pct: float = 80.0, speech_voice: str = "en", words_per_minute: int = 185,
                 speed_unit: str = "km/h", cache_dir: Path | None = None,
                 clock: Callable[[], float] = time.monotonic, espeak: str | None = None) -> None:
        self.player = player
        self.scheduler = CueScheduler(min_interval_s=min_interval_s, repeat_after_s=repeat_after_s,
                                      max_age_s=max_age_s)
        self.scheduler.set_muted(muted)
        self.speed_unit = speed_unit
        self._tmp: tempfile.TemporaryDirectory | None = None
        if cache_dir is None:
            self._tmp = tempfile.TemporaryDirectory(prefix="livecoach-sound-")
            cache_dir = Path(self._tmp.name)
        self.clips = ClipMaker(Path(cache_dir), volume_pct=volume_pct, voice=voice,
                               speech_voice=speech_voice, words_per_minute=words_per_minute,
                               espeak=espeak)
        self._clock = clock
        self._cond = threading.Condition()
        self._busy = False
        self._stop = False
        self._thread: threading.Thread | None = None
        self.history: collections.deque[Played] = collections.deque(maxlen=200)
        self.errors = 0
        self.last_error: str | None = None

    @classmethod
    def from_ride(cls, ride: Any, *, player: Player | None | str = "from-ride", **kw: Any) -> "AudioCueSink":
        """A sink set up from the ride file's ``[audio]`` (and ``[display]`` speed unit)."""
        cfg = ride.section("audio")
        if player == "from-ride":
            player = find_player(cfg.player)
        return cls(player=player, muted=cfg.muted, voice=cfg.voice, min_interval_s=cfg.min_interval_s,
                   repeat_after_s=cfg.repeat_after_s, max_age_s=cfg.max_age_s, volume_pct=cfg.volume_pct,
                   speech_voice=cfg.speech_voice, words_per_minute=cfg.words_per_minute,
                   speed_unit=ride.section("display").speed_unit, **kw)

    # -- sink interface (event loop side: never blocks beyond a short lock)
    def on_state(self, state: Any) -> None:
        """States carry no sound; cues come as notices."""

    def on_notice(self, notice: Notice) -> None:
        cue = cue_from_notice(notice, self._clock(), self.speed_unit)
        if cue is None:
            return
        with self._cond:
            self.scheduler.offer(cue)
            self._cond.notify()

    @property
    def muted(self) -> bool:
        return self.scheduler.muted

    def set_muted(self, muted: bool) -> None:
        with self._cond:
            self.scheduler.set_muted(muted)
            self._cond.notify()

    async def start(self) -> None:
        self.start_thread()

    async def stop(self) -> None:
        import asyncio

        await asyncio.to_thread(self.stop_thread)

    def stats(self) -> dict[str, int]:
        with self._cond:
            out = dict(self.scheduler.counts)
        out["played"] = sum(1 for p in self.history if p.error is None)
        out["errors"] = self.errors
        return out

    # -- worker thread
    def start_thread(self) -> None:
        if self._thread is not None:
            return
        self._stop = False
        self._thread = threading.Thread(target=self._run, name="livecoach-audio", daemon=True)
        self._thread.start()

    def stop_thread(self, timeout_s: float = 5.0) -> None:
        with self._cond:
            self._stop = True
            self._cond.notify()
        if self.player is not None:
            self.player.stop()
        if self._thread is not None:
            self._thread.join(timeout_s)
            self._thread = None
        if self._tmp is not None and self._thread is None:
            self._tmp.cleanup()
            self._tmp = None

    def _next_cue(self) -> Cue | None:
        with self._cond:
            while not self._stop:
                now = self._clock()
                cue = self.scheduler.take(now, busy=False)
                if cue is not None:
                    return cue
                wait = self.scheduler.wait_s(now)
                self._cond.wait(timeout=1.0 if wait is None else min(1.0, max(0.005, wait)))
        return None

    def _run(self) -> None:
        while True:
            cue = self._next_cue()
            if cue is None:
                return
            start = self._clock()
            wav = Path("-")
            error = None
            try:
                wav = self.clips.clip(cue)
                if self.player is not None:
                    self.player.play(wav, timeout_s=wav_duration_s(wav) + 5.0)
            except Exception as exc:  # a sound failure must never stop the ride: count it
                error = f"{type(exc).__name__}: {exc}"
                self.errors += 1
                self.last_error = error
            self.history.append(Played(start, self._clock(), cue, wav, error))

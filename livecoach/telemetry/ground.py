"""The ground station: receive telemetry frames from a serial radio modem,
decode and record them, and keep what the chase vehicle's screen shows.

The receiving never dies from bad bytes (the :class:`FrameReader` counts
them) nor from the modem disappearing (the port is reopened every
``reopen_interval_s`` until it is back). The recording is JSON Lines,
appended and flushed line by line so a crash loses at most the line being
written:

* first a header ``{"format": "livecoach-ground-log", "version": 1, ...}``;
* one line per good frame ``{"rx_unix_s": ..., "ok": true, "raw_hex": ..., "frame": {...}}``;
* one line per rejected packet ``{"rx_unix_s": ..., "ok": false, "fault": kind,
  "reason": ..., "raw_hex": ...}`` (the bytes are kept, nothing is thrown away);
* one line per port event ``{"rx_unix_s": ..., "port": "lost" | "back", "reason": ...}``.
"""

from __future__ import annotations

import collections
import json
import math
import time
from pathlib import Path
from typing import Any, Callable, TextIO

from livecoach.errors import RecordingError, SourceError
from livecoach.telemetry.frame import Frame, NoticeFrame, StateFrame, frame_to_dict
from livecoach.telemetry.reader import FrameFault, FrameReader

LOG_FORMAT = "livecoach-ground-log"
LOG_VERSION = 1


def _clean(value: Any) -> Any:
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, dict):
        return {k: _clean(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_clean(v) for v in value]
    return value


def json_line(obj: dict[str, Any]) -> str:
    """One compact JSON line (non-finite numbers as null, keys sorted)."""
    return json.dumps(_clean(obj), sort_keys=True, separators=(",", ":"), allow_nan=False)


class GroundLog:
    """Append-only JSON Lines record of everything received (see the module docstring)."""

    def __init__(self, path: str | Path, header: dict[str, Any]) -> None:
        self.path = Path(path)
        try:
            self._fh: TextIO | None = open(self.path, "a", encoding="utf-8")
        except OSError as exc:
            raise RecordingError(f"cannot open ground record '{self.path}' for writing: {exc}") from None
        self.lines = 0
        self.write({"format": LOG_FORMAT, "version": LOG_VERSION, **header})

    def write(self, obj: dict[str, Any]) -> None:
        if self._fh is None:
            return
        try:
            self._fh.write(json_line(obj) + "\n")
            self._fh.flush()
        except OSError as exc:
            raise RecordingError(f"cannot write ground record '{self.path}': {exc}") from None
        self.lines += 1

    def close(self) -> None:
        if self._fh is not None:
            self._fh.close()
            self._fh = None


def read_ground_log(path: str | Path) -> list[dict[str, Any]]:
    """Read a ground record back. Raises :class:`RecordingError` naming the line
    of a damaged record; a torn last line (crash while writing) is skipped."""
    p = Path(path)
    try:
        lines = p.read_text(encoding="utf-8").splitlines()
    except (OSError, UnicodeDecodeError) as exc:
        raise RecordingError(f"cannot read ground record '{p}': {exc}") from None
    out = []
    for n, line in enumerate(lines, 1):
        try:
            out.append(json.loads(line))
        except json.JSONDecodeError as exc:
            if n == len(lines):
                break
            raise RecordingError(f"{p}:{n}: not a JSON line ({exc.msg} at column {exc.colno})") from None
    if not out or out[0].get("format") != LOG_FORMAT:
        raise RecordingError(f"{p}:1: not a livecoach ground record (no '{LOG_FORMAT}' header)")
    return out


class GroundStation:
    """Receive from ``port``; call :meth:`poll` in a loop.

    open_port: optional factory returning an open pyserial-like object with
    ``read(n)``, ``in_waiting`` and ``close()`` (default: pyserial).
    clock: monotonic seconds (frame ages); wall: Unix seconds (record stamps).
    """

    def __init__(
        self,
        port: str,
        baud: int = 57600,
        *,
        record: str | Path | None = None,
        reopen_interval_s: float = 1.0,
        read_timeout_s: float = 0.1,
        open_port: Callable[[], Any] | None = None,
        clock: Callable[[], float] = time.monotonic,
        wall: Callable[[], float] = time.time,
        keep_notices: int = 50,
    ) -> None:
        self.port = port
        self.baud = baud
        self.reopen_interval_s = reopen_interval_s
        self.read_timeout_s = read_timeout_s
        self._open_port = open_port or self._open_serial
        self._clock = clock
        self._wall = wall
        self.reader = FrameReader()
        self.latest: StateFrame | None = None
        self.latest_rx_t_s: float | None = None
        self.notices: collections.deque[NoticeFrame] = collections.deque(maxlen=keep_notices)
        self.faults: collections.deque[FrameFault] = collections.deque(maxlen=keep_notices)
        self.port_drops = 0
        self.port_error: str | None = None
        self._ser: Any = None
        self._next_open_t = 0.0
        self.log: GroundLog | None = None
        if record is not None:
            self.log = GroundLog(record, {"port": port, "baud": baud,
                                          "started_unix_s": wall()})

    # -------------------------------------------------------------- the port
    def _open_serial(self) -> Any:
        import serial

        return serial.Serial(self.port, self.baud, timeout=self.read_timeout_s)

    def open(self) -> None:
        """Open the port now; raises :class:`SourceError` when it cannot be opened."""
        try:
            self._ser = self._open_port()
        except Exception as exc:
            raise SourceError(f"cannot open radio port '{self.port}': {exc}") from None

    @property
    def port_up(self) -> bool:
        return self._ser is not None

    def _lost_port(self, exc: BaseException) -> None:
        ser, self._ser = self._ser, None
        try:
            ser.close()
        except Exception:  # the device is gone; closing may fail too
            pass
        self.port_drops += 1
        self.port_error = f"{type(exc).__name__}: {exc}"
        self.reader.resync()
        self._next_open_t = self._clock() + self.reopen_interval_s
        if self.log is not None:
            self.log.write({"rx_unix_s": self._wall(), "port": "lost", "reason": self.port_error})

    def close(self) -> None:
        if self._ser is not None:
            try:
                self._ser.close()
            except Exception:
                pass
            self._ser = None
        if self.log is not None:
            self.log.close()

    # -------------------------------------------------------------- receiving
    def poll(self) -> list[Frame | FrameFault]:
        """Read what has arrived (waits up to ``read_timeout_s``) and decode it.
        Never raises for bad data or a lost port (it is counted and reopened)."""
        if self._ser is None:
            if self._clock() < self._next_open_t:
                time.sleep(min(self.read_timeout_s, max(0.0, self._next_open_t - self._clock())))
                return []
            try:
                self._ser = self._open_port()
            except Exception as exc:
                self.port_error = f"{type(exc).__name__}: {exc}"
                self._next_open_t = self._clock() + self.reopen_interval_s
                return []
            self.port_error = None
            if self.log is not None:
                self.log.write({"rx_unix_s": self._wall(), "port": "back"})
        try:
            waiting = self._ser.in_waiting
            data = self._ser.read(max(1, min(int(waiting or 0), 4096)))
        except Exception as exc:  # SerialException, OSError: the modem went away
            self._lost_port(exc)
            return []
        if not data:
            return []
        return self.take(data)

    def take(self, data: bytes) -> list[Frame | FrameFault]:
        """Decode received bytes (what :meth:`poll` does after reading)."""
        pairs = self.reader.feed_raw(bytes(data))
        rx_t = self._clock()
        for item, raw in pairs:
            if isinstance(item, FrameFault):
                self.faults.append(item)
                if self.log is not None:
                    self.log.write({"rx_unix_s": self._wall(), "ok": False, "fault": item.kind,
                                    "reason": item.reason, "raw_hex": item.raw.hex()})
                continue
            if isinstance(item, NoticeFrame):
                self.notices.append(item)
            else:
                self.latest = item
                self.latest_rx_t_s = rx_t
            if self.log is not None:
                self.log.write({"rx_unix_s": self._wall(), "ok": True,
                                "raw_hex": raw.hex(),
                                "frame": frame_to_dict(item)})
        return [item for item, _ in pairs]

    def age_s(self) -> float | None:
        """Seconds since the last good state frame arrived (ground clock)."""
        if self.latest_rx_t_s is None:
            return None
        return self._clock() - self.latest_rx_t_s

    def summary(self) -> dict[str, Any]:
        out: dict[str, Any] = dict(self.reader.stats.to_dict())
        out["port"] = self.port
        out["port_drops"] = self.port_drops
        out["port_up"] = self.port_up
        out["last_seq"] = self.reader.last_seq
        if self.log is not None:
            out["record"] = str(self.log.path)
            out["record_lines"] = self.log.lines
        return out

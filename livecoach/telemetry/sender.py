"""The radio sink: state frames at 1-2 Hz and notices to the chase vehicle.

A sink of the pipeline (``on_state`` / ``on_notice`` return at once: they
only keep a reference or append to a bounded queue). A background thread owns
the serial port (pyserial): it sends the newest state every ``1/rate_hz``
seconds, sends notices as they come, and survives the modem disappearing:
a failed write closes the port, counts the error and reopens it every
``reopen_interval_s`` until the modem is back. A modem that stalls (flow
control, full buffer) costs a dropped frame after ``write_timeout_s``, never
a blocked loop.

Every frame goes out as ``0x00 + COBS(body + CRC) + 0x00`` (see
:mod:`livecoach.telemetry.frame`): the leading delimiter ends any torn write
so the receiver resynchronises at once.

Radio use: the modem's band, transmit power and duty cycle must follow the
local radio rules and any licence they require.
"""

from __future__ import annotations

import asyncio
import collections
import threading
import time
from typing import Any, Callable

from livecoach.errors import ConfigError
from livecoach.pipeline.state import LiveState, Notice
from livecoach.telemetry.frame import notice_frame, pack_frame, state_frame


class RadioSink:
    """Send telemetry frames over a serial radio modem without ever blocking the caller.

    port: serial device path; baud: bit/s; rate_hz: state frames per second.
    open_port: optional factory returning an open pyserial-like object (with
    ``write``, ``flush``, ``close``); the default opens ``port`` with pyserial.
    """

    def __init__(
        self,
        port: str,
        baud: int = 57600,
        rate_hz: float = 1.0,
        *,
        reopen_interval_s: float = 2.0,
        write_timeout_s: float = 0.5,
        max_pending_notices: int = 32,
        open_port: Callable[[], Any] | None = None,
    ) -> None:
        if not rate_hz > 0.0:
            raise ConfigError(f"radio rate_hz = {rate_hz}: expected a number of frames per second > 0")
        self.port = port
        self.baud = baud
        self.period_s = 1.0 / rate_hz
        self.reopen_interval_s = reopen_interval_s
        self.write_timeout_s = write_timeout_s
        self._open_port = open_port or self._open_serial
        self._latest: LiveState | None = None
        self._version = 0
        self._sent_version = 0
        self._notices: collections.deque[Notice] = collections.deque()
        self._max_notices = max_pending_notices
        self._wake = threading.Event()
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        self._ser: Any = None
        self._seq = 0
        self.frames_sent = 0
        self.states_sent = 0
        self.notices_sent = 0
        self.bytes_sent = 0
        self.frames_dropped = 0
        self.notices_dropped = 0
        self.write_errors = 0
        self.opens = 0
        self.open_failures = 0
        self.last_error: str | None = None

    @classmethod
    def from_ride(cls, ride: Any, **kwargs: Any) -> "RadioSink":
        """A sink configured by the ride file's ``[radio]`` section."""
        cfg = ride.section("radio")
        return cls(cfg.port, cfg.baud, cfg.rate_hz, **kwargs)

    # ------------------------------------------------------------ sink API
    def on_state(self, state: LiveState) -> None:
        """Keep the newest state (sent at the next tick). O(1), never blocks."""
        self._latest = state
        self._version += 1

    def on_notice(self, notice: Notice) -> None:
        """Queue a notice for sending; when the queue is full the oldest is dropped."""
        if len(self._notices) >= self._max_notices:
            try:
                self._notices.popleft()
                self.notices_dropped += 1
            except IndexError:
                pass
        self._notices.append(notice)
        self._wake.set()

    async def start(self) -> None:
        self.start_thread()

    async def stop(self) -> None:
        await asyncio.to_thread(self.close)

    # ------------------------------------------------------------ lifecycle
    def start_thread(self) -> None:
        """Start the sending thread (idempotent)."""
        if self._thread is not None and self._thread.is_alive():
            return
        self._stop.clear()
        self._thread = threading.Thread(target=self._run, name="livecoach-radio", daemon=True)
        self._thread.start()

    def close(self, timeout_s: float = 5.0) -> None:
        """Stop the thread (after a last send of what is pending) and close the port."""
        self._stop.set()
        self._wake.set()
        if self._thread is not None:
            self._thread.join(timeout_s)
            self._thread = None
        self._close_port()

    @property
    def link_up(self) -> bool:
        return self._ser is not None

    def stats(self) -> dict[str, Any]:
        """Counters for health displays and tests."""
        return {
            "link_up": self.link_up,
            "frames_sent": self.frames_sent,
            "states_sent": self.states_sent,
            "notices_sent": self.notices_sent,
            "bytes_sent": self.bytes_sent,
            "frames_dropped": self.frames_dropped,
            "notices_dropped": self.notices_dropped,
            "write_errors": self.write_errors,
            "opens": self.opens,
            "open_failures": self.open_failures,
            "last_error": self.last_error,
        }

    # ------------------------------------------------------------ the thread
    def _open_serial(self) -> Any:
        import serial

        return serial.Serial(self.port, self.baud, timeout=0, write_timeout=self.write_timeout_s)

    def _close_port(self) -> None:
        ser, self._ser = self._ser, None
        if ser is not None:
            try:
                ser.close()
            except Exception:  # a vanished device may fail to close; it is gone either way
                pass

    def _try_open(self) -> None:
        try:
            self._ser = self._open_port()
            self.opens += 1
        except Exception as exc:  # SerialException, OSError, ...: retry later
            self._ser = None
            self.open_failures += 1
            self.last_error = f"open {self.port}: {exc}"

    def _send(self, wire: bytes) -> bool:
        ser = self._ser
        if ser is None:
            self.frames_dropped += 1
            return False
        import serial

        try:
            n = ser.write(b"\x00" + wire)
            ser.flush()
        except serial.SerialTimeoutException as exc:
            self.frames_dropped += 1
            self.last_error = f"write to {self.port} timed out: {exc}"
            return False
        except (serial.SerialException, OSError, ValueError) as exc:
            self.write_errors += 1
            self.frames_dropped += 1
            self.last_error = f"write to {self.port}: {exc}"
            self._close_port()
            return False
        self.frames_sent += 1
        self.bytes_sent += int(n or 0)
        return True

    def _next_seq(self) -> int:
        seq = self._seq
        self._seq = (self._seq + 1) & 0xFFFF
        return seq

    def _pump(self, now: float, next_state_t: float) -> float:
        while self._notices:
            try:
                notice = self._notices.popleft()
            except IndexError:
                break
            if not self._send(pack_frame(notice_frame(notice, self._next_seq()))):
                return max(next_state_t, now)  # stalled or lost: try again next tick
            self.notices_sent += 1
        if now >= next_state_t:
            version, state = self._version, self._latest
            if state is not None and version != self._sent_version:
                self._sent_version = version
                if self._send(pack_frame(state_frame(state, self._next_seq()))):
                    self.states_sent += 1
            next_state_t = max(next_state_t + self.period_s, now)
        return next_state_t

    def _run(self) -> None:
        next_open_t = 0.0
        next_state_t = time.monotonic()
        while True:
            now = time.monotonic()
            if self._ser is None and now >= next_open_t:
                self._try_open()
                next_open_t = now + self.reopen_interval_s
            if self._ser is None:
                # No modem: keep the newest state only; notices wait (bounded).
                if now >= next_state_t:
                    next_state_t = now + self.period_s
            else:
                next_state_t = self._pump(now, next_state_t)
            if self._stop.is_set():
                if self._ser is not None:
                    self._pump(time.monotonic(), float("-inf"))
                return
            wait_s = max(0.0, min(next_state_t, next_open_t if self._ser is None else next_state_t)
                         - time.monotonic())
            self._wake.wait(wait_s)
            self._wake.clear()

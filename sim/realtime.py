"""Real-time output: the simulated GPS and microcontroller over serial ports.

Another process -- or the on-board computer on a USB-serial cable -- reads
the lines as if they came from the hardware: NMEA 0183 sentences (CR LF
terminated) on the GPS port and lsl1 lines (LF terminated) on the
microcontroller port, each written when the simulated clock (scaled by
``speed``) reaches its receive time. Bluetooth payloads have no serial
equivalent and are not sent (the wheel sensor can be put on the
microcontroller with ``[wheel_sensor] link = "mcu"``).

A port given by name is opened with pyserial; without one a pseudo-terminal
pair is created and the name of its slave side is reported, so the reader
opens that. As on real hardware, bytes nobody reads are lost: writes never
block the simulation (a full buffer drops the line and counts it).
"""

from __future__ import annotations

import errno
import os
import time
from dataclasses import dataclass, field
from typing import Callable

from livecoach.errors import SourceError
from livecoach.stream.events import CH_GPS, CH_MCU
from sim.engine import Simulation
from sim.scenario import Scenario


class LineOutput:
    """One output port: a pyserial port by name, or a new pseudo-terminal pair."""

    def __init__(self, label: str, port: str | None, baud: int) -> None:
        self.label = label
        self.lines = 0
        self.dropped = 0
        self._serial = None
        self._master_fd: int | None = None
        self._slave_fd: int | None = None
        if port:
            import serial

            try:
                self._serial = serial.Serial(port, baudrate=baud, timeout=0, write_timeout=0)
            except (serial.SerialException, OSError, ValueError) as exc:
                raise SourceError(f"{label} port '{port}' cannot be opened: {exc}") from None
            self.name = port
        else:
            import tty

            master, slave = os.openpty()
            tty.setraw(slave)              # no echo, no line editing: bytes pass as they are
            os.set_blocking(master, False)
            self._master_fd, self._slave_fd = master, slave
            self.name = os.ttyname(slave)

    def write(self, data: bytes) -> None:
        """Send ``data`` now; count it as dropped when the port cannot take it."""
        try:
            if self._serial is not None:
                import serial

                try:
                    n = self._serial.write(data)
                except serial.SerialTimeoutException:
                    n = 0
            else:
                n = os.write(self._master_fd, data)
        except BlockingIOError:
            n = 0
        except OSError as exc:
            if exc.errno in (errno.EIO, errno.EAGAIN):
                n = 0
            else:
                raise SourceError(f"{self.label} port '{self.name}': write failed: {exc}") from None
        if n == len(data):
            self.lines += 1
        else:
            self.dropped += 1

    def pending(self) -> int:
        """Bytes written but not yet read by the other side (pty), or 0."""
        if self._slave_fd is None:
            return 0
        import fcntl
        import struct
        import termios

        raw = fcntl.ioctl(self._slave_fd, termios.FIONREAD, b"\0\0\0\0")
        return struct.unpack("i", raw)[0]

    def drain(self, timeout_s: float) -> None:
        """Give the reader up to ``timeout_s`` (wall time) to take the last bytes."""
        if self._serial is not None:
            try:
                self._serial.flush()
            except Exception:  # a port that went away: nothing left to drain
                pass
            return
        deadline = time.monotonic() + timeout_s
        while self.pending() > 0 and time.monotonic() < deadline:
            time.sleep(0.01)

    def close(self) -> None:
        if self._serial is not None:
            self._serial.close()
        for fd in (self._master_fd, self._slave_fd):
            if fd is not None:
                os.close(fd)
        self._master_fd = self._slave_fd = None


@dataclass
class RealtimeStats:
    """What a real-time run sent."""

    sim_t_s: float = 0.0
    lines: dict[str, int] = field(default_factory=dict)
    dropped: dict[str, int] = field(default_factory=dict)
    late_s: float = 0.0            # worst lag behind the schedule, s of wall time
    end_reason: str = ""


def run_realtime(
    scenario: Scenario,
    *,
    seed: int | None = None,
    gps_port: str | None = None,
    mcu_port: str | None = None,
    speed: float = 1.0,
    duration_s: float | None = None,
    announce: Callable[[str], None] = print,
    status_every_s: float = 10.0,
    clock: Callable[[], float] = time.monotonic,
    sleep: Callable[[float], None] = time.sleep,
    linger_s: float = 1.0,
) -> RealtimeStats:
    """Play ``scenario`` in real time (``speed`` x) to the serial outputs.

    ``announce`` gets one line per port ("gps /dev/pts/5") before the first
    byte is sent, then a status line every ``status_every_s`` simulated
    seconds. ``duration_s`` stops after that much simulated time. At the end
    the ports stay open up to ``linger_s`` (wall time) until a reader has
    taken the bytes still buffered (closing a pty hangs up its reader).
    """
    if not speed > 0.0:
        raise SourceError(f"speed {speed!r} must be > 0")
    sensors = scenario.ride.sensors
    outputs: dict[str, LineOutput] = {}
    uses_mcu = (scenario.airspeed.enabled or scenario.barometer.enabled
                or (scenario.wheel_sensor.enabled and scenario.wheel_sensor.link == "mcu"))
    try:
        if scenario.gps.enabled:
            outputs[CH_GPS] = LineOutput("gps", gps_port, sensors.gps_baud)
        if uses_mcu or mcu_port:
            outputs[CH_MCU] = LineOutput("mcu", mcu_port, sensors.mcu_baud)
        for ch, out in outputs.items():
            announce(f"{out.label} {out.name}")
        sim = Simulation(scenario, seed, keep_truth=False)
        stats = RealtimeStats()
        start = clock()
        next_status = status_every_s
        for ev in sim.events():
            if duration_s is not None and ev.t_s > duration_s:
                stats.end_reason = "duration"
                break
            out = outputs.get(ev.channel)
            if out is None:
                continue
            due = start + ev.t_s / speed
            now = clock()
            if due > now:
                sleep(due - now)
            else:
                stats.late_s = max(stats.late_s, now - due)
            out.write(ev.payload + (b"\r\n" if ev.channel == CH_GPS else b"\n"))
            stats.sim_t_s = ev.t_s
            if ev.t_s >= next_status:
                next_status += status_every_s
                st = sim.state
                announce(f"t {ev.t_s:7.1f} s  distance {st.distance_m:7.1f} m  speed {st.speed_mps:5.2f} m/s  "
                         + "  ".join(f"{o.label} {o.lines} lines" for o in outputs.values()))
        else:
            stats.end_reason = sim.summary.end_reason
        for ch, out in outputs.items():
            stats.lines[out.label] = out.lines
            stats.dropped[out.label] = out.dropped
            out.drain(linger_s)
        return stats
    finally:
        for out in outputs.values():
            out.close()

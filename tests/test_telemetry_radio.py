"""The radio sink over a real pseudo-terminal: rate, content, a stalled modem,
and a modem that disappears and comes back."""

from __future__ import annotations

import errno
import fcntl
import os
import select
import time
import tty

import pytest

from livecoach.errors import ConfigError
from livecoach.pipeline.state import LiveState, Notice
from livecoach.telemetry.frame import NoticeFrame, StateFrame
from livecoach.telemetry.reader import FrameReader
from livecoach.telemetry.sender import RadioSink


class Pty:
    """A pseudo-terminal pair in raw mode: the sink writes the slave, the test reads the master."""

    def __init__(self) -> None:
        self.master, self.slave = os.openpty()
        tty.setraw(self.slave)
        self.path = os.ttyname(self.slave)
        self.reader = FrameReader()
        self.items: list = []

    def drain(self, wait_s: float = 0.0) -> list:
        end = time.monotonic() + wait_s
        while True:
            r, _, _ = select.select([self.master], [], [], max(0.0, min(0.05, end - time.monotonic())))
            if r:
                try:
                    data = os.read(self.master, 4096)
                except OSError:
                    break
                self.items += self.reader.feed(data)
            elif time.monotonic() >= end:
                break
        return self.items

    def close(self) -> None:
        for fd in (self.master, self.slave):
            try:
                os.close(fd)
            except OSError:
                pass


def _wait_for(pred, timeout_s=10.0, step=None):
    end = time.monotonic() + timeout_s
    while time.monotonic() < end:
        if step:
            step()
        if pred():
            return True
        time.sleep(0.02)
    return pred()


def _state(i: int) -> LiveState:
    return LiveState(t_s=i * 0.02, phase="runup", distance_m=i * 0.4, speed_mps=20.0 + i * 0.001,
                     speed_stale=False, power_w=400.0 + (i % 50), power_stale=False)


def test_sends_newest_state_at_the_configured_rate_and_every_notice():
    pty = Pty()
    sink = RadioSink(pty.path, 57600, rate_hz=5.0)
    try:
        sink.start_thread()
        t0 = time.monotonic()
        i = 0
        while time.monotonic() - t0 < 2.0:  # the pipeline runs at 50 Hz
            sink.on_state(_state(i))
            if i in (20, 60):
                sink.on_notice(Notice(i * 0.02, "cue", f"cue number {i}"))
            i += 1
            pty.drain(0.02)
        last = _state(i - 1)
        sink.close()
        items = pty.drain(0.5)
    finally:
        sink.close()
        pty.close()
    states = [x for x in items if isinstance(x, StateFrame)]
    notices = [x for x in items if isinstance(x, NoticeFrame)]
    # 5 Hz for 2 s: about 10 state frames (thread start and the final flush add at most 2).
    assert 8 <= len(states) <= 13
    assert [n.text for n in notices] == ["cue number 20", "cue number 60"]
    assert [x.seq for x in items] == list(range(len(items)))  # one counter, no gaps
    assert pty.reader.stats.lost == 0 and pty.reader.stats.corrupt == 0
    # the last frame is the newest state (sent by close())
    assert states[-1].t_s == pytest.approx(last.t_s, abs=1e-3)
    assert states[-1].power_w == last.power_w
    assert sink.stats()["states_sent"] == len(states) and sink.stats()["notices_sent"] == 2


def test_a_stalled_modem_drops_frames_and_never_blocks_the_caller():
    pty = Pty()
    # Fill the pseudo-terminal's buffer so every write stalls (as a modem holding CTS would).
    fd = os.open(pty.path, os.O_WRONLY | os.O_NONBLOCK | os.O_NOCTTY)
    fl = fcntl.fcntl(fd, fcntl.F_GETFL)
    fcntl.fcntl(fd, fcntl.F_SETFL, fl | os.O_NONBLOCK)
    # The kernel moves data between its pty buffers in the background: keep
    # writing until the writes have been refused for a while.
    refused_since = None
    while refused_since is None or time.monotonic() - refused_since < 0.3:
        try:
            os.write(fd, b"\x55" * 64)
            refused_since = None
        except OSError as exc:
            assert exc.errno == errno.EAGAIN
            if refused_since is None:
                refused_since = time.monotonic()
            time.sleep(0.01)
    sink = RadioSink(pty.path, 57600, rate_hz=5.0, write_timeout_s=0.2)
    try:
        sink.start_thread()
        assert _wait_for(lambda: sink.opens == 1)
        t0 = time.monotonic()
        for i in range(3000):
            sink.on_state(_state(i))
            sink.on_notice(Notice(i * 0.02, "warning", "x"))
        calls_s = time.monotonic() - t0
        assert _wait_for(lambda: sink.frames_dropped >= 3)
    finally:
        sink.close()
        os.close(fd)
        pty.close()
    # 6000 calls while the writer is stuck in a 0.2 s write timeout: they never waited on it.
    assert calls_s < 0.2 * 3
    assert sink.notices_dropped >= 2900  # the bounded notice queue kept only the newest
    assert sink.notices_sent == 0 and sink.states_sent == 0
    assert sink.write_errors == 0  # a stall is not a lost modem


def test_survives_the_modem_disappearing_and_reopens_it(tmp_path):
    link = tmp_path / "livecoach-radio"
    first = Pty()
    os.symlink(first.path, link)
    sink = RadioSink(str(link), 57600, rate_hz=10.0, reopen_interval_s=0.2)
    second = None
    try:
        sink.start_thread()
        i = 0

        def feed():
            nonlocal i
            sink.on_state(_state(i))
            i += 1

        assert _wait_for(lambda: len(first.drain()) >= 3, step=feed)
        first.close()  # the modem is unplugged: its device node goes away
        assert _wait_for(lambda: sink.write_errors >= 1 and not sink.link_up, step=feed)
        assert _wait_for(lambda: sink.open_failures >= 1, step=feed)
        second = Pty()  # plugged in again (a new device behind the same name)
        os.unlink(link)
        os.symlink(second.path, link)
        assert _wait_for(lambda: len(second.drain()) >= 3, step=feed)
        assert sink.link_up and sink.opens == 2
    finally:
        sink.close()
        first.close()
        if second is not None:
            second.close()
    got = [x for x in second.items if isinstance(x, StateFrame)]
    assert got and all(g.speed_mps is not None for g in got)
    assert second.reader.stats.corrupt == 0


def test_rejects_a_non_positive_rate():
    with pytest.raises(ConfigError, match="rate_hz"):
        RadioSink("/dev/null", rate_hz=0.0)

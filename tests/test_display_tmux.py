"""The display sink on a real terminal: a tmux pane of the board's screen size.

tmux runs a small program that starts :class:`DisplaySink` on its own terminal
and feeds it states; the test reads the screen with ``tmux capture-pane``.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import textwrap
import time
import uuid
from pathlib import Path

import pytest

from livecoach.sinks.display import STALE_FILL, big_text_lines


def _tmux() -> str:
    path = shutil.which("tmux")
    if path:
        return path
    if hasattr(os, "geteuid") and os.geteuid() == 0 and shutil.which("apt-get"):
        subprocess.run(["apt-get", "install", "-y", "-qq", "tmux"], capture_output=True, timeout=300,
                       env={**os.environ, "DEBIAN_FRONTEND": "noninteractive"})
        path = shutil.which("tmux")
        if path:
            return path
    pytest.skip("tmux is not installed and cannot be installed here (not root or no apt-get)")


PROGRAM = textwrap.dedent(
    """
    import sys, time
    from pathlib import Path
    from rich.console import Console
    from livecoach.pipeline.state import LiveState, SensorHealth
    from livecoach.sinks.display import DisplaySink

    step = Path(sys.argv[1])
    ok = (SensorHealth("ble.csc", True, False, 0.3, 50, 0, 0, 0.0),
          SensorHealth("ble.cycling_power", True, False, 0.2, 50, 0, 0, 0.0))
    stale = (SensorHealth("ble.csc", True, True, 5.4, 50, 0, 1, 5.4),
             SensorHealth("ble.cycling_power", True, False, 0.2, 50, 0, 0, 0.0))
    common = dict(phase="runup", distance_to_trap_m=1480.0, power_w=318.0, power_stale=False,
                  target_power_w=320.0, cue="hold", cue_text="hold 320 watts",
                  predicted_trap_speed_mps=24.4, w_prime_balance_j=9000.0, w_prime_j=18000.0,
                  cda_m2=0.0305, cda_sd_m2=0.0009, crr=0.0035, crr_sd=0.0002)
    sink = DisplaySink(Console(), refresh_hz=10.0)
    sink.start_thread()
    t = 0.0
    while not step.exists():
        t += 0.1
        sink.on_state(LiveState(t_s=t, speed_mps=22.5, speed_stale=False, sensors=ok, **common))
        time.sleep(0.1)
    while True:
        sink.on_state(LiveState(t_s=t, speed_mps=22.5, speed_stale=True, sensors=stale, **common))
        time.sleep(0.1)
    """
)


@pytest.mark.slow
def test_display_in_a_real_terminal(tmp_path: Path):
    tmux = _tmux()
    script = tmp_path / "screen.py"
    script.write_text(PROGRAM)
    step = tmp_path / "go-stale"
    name = f"livecoach-test-{uuid.uuid4().hex[:8]}"
    socket = ["-L", name]  # a private tmux server, so no user session is touched
    cmd = f"{sys.executable} {script} {step} 2> {tmp_path / 'err.txt'}"
    subprocess.run([tmux, *socket, "new-session", "-d", "-s", name, "-x", "50", "-y", "16", cmd],
                   check=True, timeout=20, env={**os.environ, "TERM": "xterm-256color"})
    t = [tmux, *socket]
    try:
        live = _wait_for(t, name, "HOLD 320 WATTS")
        # 22.5 m/s = 81.0 km/h, drawn in the solid block font on a 50 x 16 screen.
        for row in big_text_lines("81.0"):
            assert row.rstrip() in live
        assert "PWR 318 W" in live and "GPS" not in live and "WHL ok" in live
        lines = live.splitlines()
        assert len(lines) <= 16 and all(len(line) <= 50 for line in lines)

        step.touch()
        stale = _wait_for(t, name, "WHL STALE 5s")
        for row in big_text_lines("81.0", fill=STALE_FILL):
            assert row.rstrip() in stale
        assert big_text_lines("81.0")[0].rstrip() not in stale
        assert "STALE" in stale.splitlines()[0]
    finally:
        subprocess.run([*t, "kill-server"], capture_output=True, timeout=10)
    err = (tmp_path / "err.txt").read_text() if (tmp_path / "err.txt").exists() else ""
    assert "Traceback" not in err, err


def _wait_for(t: list[str], name: str, needle: str, timeout_s: float = 20.0) -> str:
    deadline = time.monotonic() + timeout_s
    screen = ""
    while time.monotonic() < deadline:
        screen = subprocess.run([*t, "capture-pane", "-p", "-t", name], capture_output=True,
                                text=True, timeout=10).stdout
        if needle in screen:
            return screen
        time.sleep(0.2)
    raise AssertionError(f"{needle!r} never appeared on the tmux screen; last screen:\n{screen}")

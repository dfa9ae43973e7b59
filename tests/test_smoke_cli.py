"""The CLI entry point starts and lists its commands."""

import subprocess
import sys


def test_help_lists_commands():
    out = subprocess.run([sys.executable, "-m", "livecoach", "--help"], capture_output=True, text=True)
    assert out.returncode == 0
    for name in ("init", "air", "speed", "demo"):
        assert name in out.stdout

"""Test-suite settings shared by every test module.

Property tests (hypothesis) are derandomized by default, so the suite is
repeatable: the same examples run on every machine and in CI. For a longer,
exploring run (e.g. before a release), choose another profile:

    HYPOTHESIS_PROFILE=explore .venv/bin/python -m pytest tests/

A failure found while exploring becomes an ``@example`` regression in its test.
"""

from __future__ import annotations

import os
import subprocess
from pathlib import Path

import pytest

from hypothesis import HealthCheck, settings

settings.register_profile(
    "repeatable", derandomize=True, suppress_health_check=[HealthCheck.too_slow], deadline=None
)
settings.register_profile(
    "explore", max_examples=2000, suppress_health_check=[HealthCheck.too_slow], deadline=None
)
settings.load_profile(os.environ.get("HYPOTHESIS_PROFILE", "repeatable"))


def _mount(args: list[str]) -> bool:
    if os.geteuid() != 0:
        return False
    return subprocess.run(["mount", *args], capture_output=True).returncode == 0


@pytest.fixture
def mounted(tmp_path):
    """Mount helper (root only, for disk-full and read-only tests): yields
    make(name, mount args) -> mount point; unmounts everything afterwards.
    Skips the test where mounting is not allowed."""
    points: list[Path] = []

    def make(name: str, args: list[str]) -> Path:
        mnt = tmp_path / name
        mnt.mkdir()
        if not _mount([*args, str(mnt)]):
            pytest.skip("cannot mount a test file system here (needs root and mount rights)")
        points.append(mnt)
        return mnt

    yield make
    for mnt in reversed(points):
        subprocess.run(["umount", "-l", str(mnt)], capture_output=True)


@pytest.fixture
def failing_card(tmp_path, mounted):
    """An 8 MiB ext4 card image mounted ``errors=remount-ro`` (as an SD card that
    turns read-only on a storage error): yields (mount point, trigger file).
    Writing to the trigger raises a file-system error on purpose (Linux ext4
    sysfs interface, Documentation/ABI/testing/sysfs-fs-ext4). Skips where
    mkfs.ext4, mounting or the trigger is not available."""
    image = tmp_path / "card.img"
    with open(image, "wb") as f:
        f.truncate(8 << 20)
    if subprocess.run(["mkfs.ext4", "-q", "-F", str(image)], capture_output=True).returncode != 0:
        pytest.skip("mkfs.ext4 not available")
    mnt = mounted("card", ["-o", "loop,errors=remount-ro", str(image)])
    device = subprocess.run(["findmnt", "-n", "-o", "SOURCE", str(mnt)], capture_output=True,
                            text=True).stdout.strip()
    trigger = Path("/sys/fs/ext4") / Path(device).name / "trigger_fs_error"
    if not trigger.exists():
        pytest.skip("this kernel has no ext4 trigger_fs_error")
    return mnt, trigger

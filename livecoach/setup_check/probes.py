"""Thin probes that read facts from the real board (imperative shell).

Each probe reads one thing (sysfs, a device node, the file system, the
clocks, a file) and returns a plain record from
:mod:`livecoach.setup_check.facts`; none of them decides go or no-go. Probes
never raise for what they find: a missing adapter or an unreadable file is a
fact, reported in the record's ``error``.
"""

from __future__ import annotations

import os
import shutil
import stat
import subprocess
import time
from pathlib import Path

from livecoach.errors import LivecoachError
from livecoach.setup_check.facts import (
    BluetoothAdapter,
    BluetoothFacts,
    ClockFacts,
    DeviceFacts,
    DiskFacts,
    PlanFacts,
    RideFacts,
)

#: Longest wait for a helper program (bluetoothctl, timedatectl), s.
HELPER_TIMEOUT_S = 5.0


def probe_ride(path: str | Path) -> RideFacts:
    """Load and validate the ride file."""
    from livecoach.config.ridefile import load_ride_file

    try:
        return RideFacts(str(path), load_ride_file(path))
    except LivecoachError as exc:
        return RideFacts(str(path), None, str(exc))


def _read(path: Path) -> str | None:
    try:
        return path.read_text(encoding="ascii", errors="replace").strip()
    except OSError:
        return None


def parse_bluetoothctl_show(text: str) -> dict[str, str]:
    """``Controller`` address and ``Powered`` state from ``bluetoothctl show`` output."""
    out: dict[str, str] = {}
    for line in text.splitlines():
        line = line.strip()
        if line.startswith("Controller "):
            parts = line.split()
            if len(parts) >= 2:
                out["address"] = parts[1].upper()
        elif line.startswith("Powered:"):
            out["powered"] = line.split(":", 1)[1].strip().lower()
    return out


def _run_helper(argv: list[str]) -> str | None:
    if shutil.which(argv[0]) is None:
        return None
    try:
        done = subprocess.run(argv, capture_output=True, text=True, timeout=HELPER_TIMEOUT_S,
                              stdin=subprocess.DEVNULL)
    except (OSError, subprocess.TimeoutExpired):
        return None
    return done.stdout if done.returncode == 0 else None


def probe_bluetooth(sys_class: str | Path = "/sys/class", use_bluetoothctl: bool = True) -> BluetoothFacts:
    """Bluetooth controllers from sysfs (``bluetooth/hci*``), their rfkill state, and the
    powered state BlueZ reports (``bluetoothctl show``) when that tool is installed."""
    root = Path(sys_class)
    bt_dir = root / "bluetooth"
    if not bt_dir.is_dir():
        return BluetoothFacts((), f"no {bt_dir} (no Bluetooth support in this kernel or container)")
    names = sorted(p.name for p in bt_dir.iterdir() if p.name.startswith("hci") and ":" not in p.name)
    if not names:
        return BluetoothFacts((), "no Bluetooth controller (no hci device)")
    rfkill: dict[str, tuple[bool, bool]] = {}
    rf_dir = root / "rfkill"
    if rf_dir.is_dir():
        for entry in rf_dir.iterdir():
            if _read(entry / "type") == "bluetooth":
                rfkill[_read(entry / "name") or ""] = (_read(entry / "soft") == "1", _read(entry / "hard") == "1")
    shown = parse_bluetoothctl_show(_run_helper(["bluetoothctl", "show"]) or "") if use_bluetoothctl else {}
    adapters = []
    for name in names:
        address = (_read(bt_dir / name / "address") or "").upper()
        soft, hard = rfkill.get(name, (None, None))
        powered = None
        if shown.get("address") and shown["address"] == address:
            powered = shown.get("powered") == "yes"
        adapters.append(BluetoothAdapter(name, address, powered, soft, hard))
    return BluetoothFacts(tuple(adapters))


def probe_device(role: str, path: str) -> DeviceFacts:
    """A serial device node: exists, is a character device, may be read and written."""
    try:
        st = os.stat(path)
    except FileNotFoundError:
        return DeviceFacts(role, path, False)
    except OSError as exc:
        return DeviceFacts(role, path, False, error=exc.strerror or str(exc))
    return DeviceFacts(
        role, path, True,
        is_char_device=stat.S_ISCHR(st.st_mode),
        readable=os.access(path, os.R_OK),
        writable=os.access(path, os.W_OK),
        target=os.path.realpath(path),
    )


def probe_disk(folder: str | Path) -> DiskFacts:
    """Free space and writability where recordings go (the nearest existing folder
    when it does not exist yet: the recorder creates it)."""
    p = Path(folder)
    existing = p
    while not existing.exists() and existing != existing.parent:
        existing = existing.parent
    if existing.exists() and not existing.is_dir():
        return DiskFacts(str(p), False, error=f"{existing} is a file, not a folder")
    try:
        usage = shutil.disk_usage(existing)
    except OSError as exc:
        return DiskFacts(str(p), p.exists(), error=f"cannot read free space: {exc.strerror or exc}")
    writable = os.access(existing, os.W_OK | os.X_OK)
    return DiskFacts(str(p), p.exists(), writable, usage.free, usage.total)


def probe_clock() -> ClockFacts:
    """Wall and monotonic clocks read together, and whether the system says it is
    synchronised over the network (``timedatectl``; unknown without systemd)."""
    best = None
    for _ in range(5):  # the pair read closest together
        m0 = time.monotonic()
        wall = time.time()
        m1 = time.monotonic()
        if best is None or m1 - m0 < best[0]:
            best = (m1 - m0, wall, 0.5 * (m0 + m1))
    _, wall, mono = best  # type: ignore[misc]
    info = time.get_clock_info("monotonic")
    synced = None
    out = _run_helper(["timedatectl", "show", "--property=NTPSynchronized", "--value"])
    if out is not None and out.strip() in ("yes", "no"):
        synced = out.strip() == "yes"
    return ClockFacts(wall, wall - mono, info.adjustable, info.resolution, synced)


def probe_plan(path: str | Path) -> PlanFacts:
    """Read the plan file with the planner's own reader (:func:`livecoach.plan.load_plan`)."""
    from livecoach.plan import load_plan

    p = Path(path)
    if not p.exists():
        return PlanFacts(str(p), False)
    try:
        return PlanFacts(str(p), True, load_plan(p))
    except LivecoachError as exc:
        return PlanFacts(str(p), True, None, str(exc))


def set_wall_clock(correction_s: float, settime=None) -> float:
    """Step the wall clock by ``correction_s`` (s); returns the new wall time (s since 1970).

    Needs the CAP_SYS_TIME capability (run as root). ``settime`` defaults to
    ``time.clock_settime(time.CLOCK_REALTIME, t)``.
    """
    if settime is None:
        def settime(t: float) -> None:
            time.clock_settime(time.CLOCK_REALTIME, t)
    new = time.time() + correction_s
    try:
        settime(new)
    except PermissionError:
        raise LivecoachError("setting the clock needs root (run with sudo)") from None
    except OSError as exc:
        raise LivecoachError(f"cannot set the clock: {exc.strerror or exc}") from None
    return new

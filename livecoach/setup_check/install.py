"""Installing livecoach as a boot-time service: the systemd unit and the udev rules.

The unit and rules live in :mod:`livecoach.data` as templates with
``@FIELD@`` placeholders. :func:`render_unit` and :func:`render_rules` are
pure; :func:`install` writes the files under a prefix (``/`` on the board, a
temporary folder in tests) and, on the real root only, asks systemd and udev
to reload. Everything it does is returned as a list of steps for the CLI to
print.

References: systemd.service(5), systemd.exec(5), systemd.unit(5) for the
unit's keys; udev(7) for the rules' syntax.
"""

from __future__ import annotations

import os
import re
import shlex
import shutil
import subprocess
from dataclasses import dataclass
from importlib import resources
from pathlib import Path

from livecoach.errors import ConfigError, LivecoachError

UNIT_NAME = "livecoach.service"
RULES_NAME = "99-livecoach-serial.rules"
UNIT_DIR = "etc/systemd/system"
RULES_DIR = "etc/udev/rules.d"
#: Roles a serial device may have, and the stable link each gets (/dev/livecoach-ROLE).
SERIAL_ROLES = ("gps", "mcu", "radio")
#: Groups the service's user needs: serial ports and BlueZ over D-Bus (Debian).
SERVICE_GROUPS = ("dialout", "bluetooth")

_SAFE_VALUE = re.compile(r'[^"\\\n]*\Z')


def template(name: str) -> str:
    """Text of a packaged template in ``livecoach/data``."""
    return resources.files("livecoach.data").joinpath(name).read_text(encoding="utf-8")


def _fill(text: str, fields: dict[str, str]) -> str:
    for key, value in fields.items():
        text = text.replace(f"@{key}@", value)
    left = re.findall(r"@[A-Z_]+@", text)
    if left:
        raise LivecoachError(f"template field(s) {', '.join(sorted(set(left)))} not filled")
    return text


def _unit_path_value(what: str, value: str) -> str:
    """A path for a unit file: absolute, no newline, no characters systemd would expand."""
    if not value.startswith("/"):
        raise ConfigError(f"{what} '{value}' must be an absolute path")
    if any(c in value for c in "\n%$\\\"'") or any(c.isspace() for c in value):
        raise ConfigError(f"{what} '{value}' has spaces, quotes, % or $; choose a plain path")
    return value


def render_unit(*, exec_argv: list[str], user: str, group: str, data_dir: str,
                log_file: str, groups: tuple[str, ...] = SERVICE_GROUPS) -> str:
    """The systemd unit text for the ride loop (systemd.service(5))."""
    for what, value in (("user", user), ("group", group)):
        if not re.fullmatch(r"[a-z_][a-z0-9_-]*\$?", value):
            raise ConfigError(f"{what} '{value}' is not a valid user or group name")
    argv = [_unit_path_value("program", exec_argv[0])] + [str(a) for a in exec_argv[1:]]
    for a in argv[1:]:
        if any(c in a for c in "\n%$\\\"'") or any(c.isspace() for c in a):
            raise ConfigError(f"service argument '{a}' has spaces, quotes, % or $; choose a plain path")
    return _fill(template(UNIT_NAME), {
        "USER": user,
        "GROUP": group,
        "GROUPS": " ".join(groups),
        "DATA_DIR": _unit_path_value("data folder", data_dir),
        "LOG_FILE": _unit_path_value("log file", log_file),
        "EXEC_START": " ".join(argv),
    })


def parse_udev_properties(text: str) -> dict[str, str]:
    """``KEY=value`` lines of ``udevadm info --query=property`` as a dict."""
    out: dict[str, str] = {}
    for line in text.splitlines():
        key, sep, value = line.partition("=")
        if sep and key.strip():
            out[key.strip()] = value.strip()
    return out


def _quoted(value: str, what: str) -> str:
    if not _SAFE_VALUE.match(value):
        raise LivecoachError(f"{what} '{value}' cannot be used in a udev rule (quote or newline)")
    return f'"{value}"'


def device_rule(role: str, device: str, props: dict[str, str]) -> str:
    """A udev rule (udev(7)) giving the serial device described by ``props`` the
    link ``/dev/livecoach-ROLE``.

    USB devices with a serial number are matched by vendor, product and
    serial number (any socket); without one, by the physical USB socket
    (ID_PATH), so the device must stay in that socket. A board UART is matched
    by its kernel name.
    """
    if role not in SERIAL_ROLES:
        raise ConfigError(f"--serial role '{role}': expected one of {', '.join(SERIAL_ROLES)}")
    link = f"livecoach-{role}"
    tail = f'SYMLINK+="{link}", GROUP="dialout", MODE="0660"'
    what = props.get("ID_MODEL_FROM_DATABASE") or props.get("ID_MODEL") or props.get("DEVNAME", device)
    if props.get("ID_BUS") == "usb" and props.get("ID_VENDOR_ID") and props.get("ID_MODEL_ID"):
        match = (f'SUBSYSTEM=="tty", ENV{{ID_VENDOR_ID}}=={_quoted(props["ID_VENDOR_ID"], "vendor id")}, '
                 f'ENV{{ID_MODEL_ID}}=={_quoted(props["ID_MODEL_ID"], "model id")}')
        serial = props.get("ID_SERIAL_SHORT", "")
        if serial:
            note = f"# {role}: {what}, serial number {serial} (from {device}; any USB socket)"
            match += f', ENV{{ID_SERIAL_SHORT}}=={_quoted(serial, "serial number")}'
        elif props.get("ID_PATH"):
            note = (f"# {role}: {what} without a serial number (from {device}): matched by its USB "
                    "socket - keep it plugged into the same socket")
            match += f', ENV{{ID_PATH}}=={_quoted(props["ID_PATH"], "USB path")}'
        else:
            raise LivecoachError(f"{device}: USB device without serial number or path; cannot name it stably")
        return f"{note}\n{match}, {tail}"
    kernel = Path(props.get("DEVNAME", device)).name
    if not re.fullmatch(r"tty[A-Za-z]+[0-9]+", kernel):
        raise LivecoachError(f"{device}: not a serial device udev knows (DEVNAME {kernel!r})")
    return f"# {role}: board serial port {kernel} (from {device})\nSUBSYSTEM==\"tty\", KERNEL==\"{kernel}\", {tail}"


def render_rules(device_rules: list[str]) -> str:
    """The rules file: the packaged rules plus one generated rule per device."""
    body = "\n\n".join(device_rules) if device_rules else (
        "# No per-device lines yet: plug the devices in and run\n"
        "#   sudo livecoach install-service --config RIDE --serial gps=/dev/ttyUSB0 --serial radio=/dev/ttyUSB1"
    )
    return _fill(template(RULES_NAME), {"DEVICE_RULES": body})


def udev_properties(device: str) -> dict[str, str]:
    """What udev knows about a device node (``udevadm info --query=property``)."""
    if shutil.which("udevadm") is None:
        raise LivecoachError("udevadm is not installed: cannot read the device's identity")
    if not os.path.exists(device):
        raise ConfigError(f"--serial device '{device}' does not exist (is it plugged in?)")
    done = subprocess.run(["udevadm", "info", "--query=property", f"--name={device}"],
                          capture_output=True, text=True, timeout=10)
    if done.returncode != 0:
        raise LivecoachError(f"udevadm info {device}: {done.stderr.strip() or 'failed'}")
    return parse_udev_properties(done.stdout)


@dataclass(frozen=True)
class Step:
    """One thing the installer did (or, in a dry run, would do)."""

    action: str  # "write", "mkdir", "run", "note"
    text: str


def verify_unit(path: Path) -> tuple[bool, str]:
    """``systemd-analyze verify`` on a unit file: (clean, its messages).

    Clean means exit code 0 and no message at all (systemd reports bad
    values as warnings with exit code 0).
    """
    if shutil.which("systemd-analyze") is None:
        return True, "systemd-analyze not installed: unit not verified"
    done = subprocess.run(["systemd-analyze", "verify", str(path)], capture_output=True, text=True,
                          timeout=60)
    messages = (done.stdout + done.stderr).strip()
    return done.returncode == 0 and not messages, messages


def install(*, prefix: Path, unit_text: str, rules_text: str, data_dir: str, user: str,
            dry_run: bool, enable: bool = True) -> list[Step]:
    """Write the unit and rules under ``prefix`` and, on the real root, reload systemd and udev.

    ``data_dir``: the absolute data folder on the target (its ``logs`` folder
    is created). Returns the steps taken; with ``dry_run`` nothing is written
    or run.
    """
    real_root = prefix.resolve() == Path("/")
    if real_root and not dry_run and os.geteuid() != 0:
        raise LivecoachError("installing the service needs root: run it with sudo "
                             "(or use --dry-run to see what it would do)")
    steps: list[Step] = []
    target_data = prefix / data_dir.lstrip("/")
    unit_path = prefix / UNIT_DIR / UNIT_NAME
    rules_path = prefix / RULES_DIR / RULES_NAME
    for folder in (target_data / "logs", target_data / "recordings"):
        steps.append(Step("mkdir", str(folder)))
        if not dry_run:
            folder.mkdir(parents=True, exist_ok=True)
            if real_root:
                shutil.chown(folder, user=user)
    if real_root and not dry_run:
        shutil.chown(target_data, user=user)
    for path, text in ((unit_path, unit_text), (rules_path, rules_text)):
        steps.append(Step("write", str(path)))
        if not dry_run:
            path.parent.mkdir(parents=True, exist_ok=True)
            tmp = path.with_name(path.name + ".tmp")
            tmp.write_text(text, encoding="utf-8")
            os.chmod(tmp, 0o644)
            tmp.replace(path)
    if not dry_run:
        ok, messages = verify_unit(unit_path)
        steps.append(Step("note", "systemd-analyze verify: " + ("clean" if ok else messages)))
        if not ok and "not installed" not in messages:
            raise LivecoachError(f"the written unit {unit_path} does not verify:\n{messages}")
    commands = [["systemctl", "daemon-reload"]]
    if enable:
        commands.append(["systemctl", "enable", UNIT_NAME])
    commands += [["udevadm", "control", "--reload-rules"],
                 ["udevadm", "trigger", "--subsystem-match=tty", "--action=add"]]
    for argv in commands:
        if real_root and not dry_run:
            done = subprocess.run(argv, capture_output=True, text=True, timeout=60)
            if done.returncode != 0:
                raise LivecoachError(f"{shlex.join(argv)} failed: {done.stderr.strip()}")
            steps.append(Step("run", shlex.join(argv)))
        else:
            steps.append(Step("note", f"not run ({'dry run' if dry_run else 'prefix'}): {shlex.join(argv)}"))
    return steps

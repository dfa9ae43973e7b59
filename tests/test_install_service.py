"""`livecoach install-service`: the unit verifies with systemd, the rules follow udev(7)."""

from __future__ import annotations

import json
import re
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from livecoach.cli.main import main
from livecoach.errors import ConfigError, LivecoachError
from livecoach.setup_check import install as inst

# udev(7) rule syntax: comma-separated KEY[{attr}] OP "value" pairs. Match keys take == or !=,
# assignment keys =, +=, -= or := (some keys may do both).
_MATCH_KEYS = {"ACTION", "DEVPATH", "KERNEL", "KERNELS", "NAME", "SYMLINK", "SUBSYSTEM", "SUBSYSTEMS",
               "DRIVER", "DRIVERS", "ATTR", "ATTRS", "SYSCTL", "TAG", "TAGS", "ENV", "CONST", "TEST",
               "PROGRAM", "RESULT"}
_ASSIGN_KEYS = {"NAME", "SYMLINK", "OWNER", "GROUP", "MODE", "SECLABEL", "ATTR", "SYSCTL", "ENV", "TAG",
                "RUN", "LABEL", "GOTO", "IMPORT", "OPTIONS"}
_PAIR = re.compile(r'\s*([A-Z]+)(\{[^}]+\})?\s*(==|!=|\+=|-=|:=|=)\s*"([^"]*)"\s*')


def udev_syntax_errors(text: str) -> list[str]:
    """Lines of a rules file that do not follow udev(7)'s grammar (empty list: all good)."""
    errors = []
    for n, line in enumerate(text.splitlines(), start=1):
        if not line.strip() or line.lstrip().startswith("#"):
            continue
        pos, matches = 0, 0
        for part in line.split(","):
            m = _PAIR.fullmatch(part)
            if not m:
                errors.append(f"line {n}: cannot parse '{part.strip()}'")
                break
            key, _, op, _ = m.groups()
            if op in ("==", "!="):
                matches += 1
                ok = key in _MATCH_KEYS
            else:
                ok = key in _ASSIGN_KEYS
            if not ok:
                errors.append(f"line {n}: key {key} cannot take {op}")
            pos += 1
        if matches == 0:
            errors.append(f"line {n}: a rule without a match key applies to every device")
    return errors


@pytest.fixture
def ride_path(tmp_path):
    assert main(["init", str(tmp_path / "data")]) == 0
    return tmp_path / "data" / "ride.toml"


def _install(ride_path, prefix, *extra, capsys=None):
    code = main(["install-service", "-c", str(ride_path), "--prefix", str(prefix), "--json", *extra])
    return code


def test_install_under_a_prefix_writes_unit_and_rules(ride_path, tmp_path, capsys):
    prefix = tmp_path / "root"
    assert _install(ride_path, prefix) == 0
    data = json.loads(capsys.readouterr().out)
    unit = prefix / "etc/systemd/system/livecoach.service"
    rules = prefix / "etc/udev/rules.d/99-livecoach-serial.rules"
    assert unit.read_text() == data["unit"] and rules.read_text() == data["rules"]
    text = unit.read_text()
    assert "Restart=always" in text and "WantedBy=multi-user.target" in text
    assert f"--config {ride_path.resolve()}" in text
    assert f"StandardOutput=append:{ride_path.parent.resolve()}/logs/livecoach.log" in text
    assert (prefix / str(ride_path.parent.resolve()).lstrip("/") / "logs").is_dir()
    # On a prefix nothing is run on the host.
    assert all(s["action"] != "run" for s in data["steps"])
    assert any("not run (prefix): systemctl enable livecoach.service" in s["text"] for s in data["steps"])


@pytest.mark.skipif(shutil.which("systemd-analyze") is None,
                    reason="systemd-analyze is not installed (Debian package 'systemd')")
def test_unit_verifies_with_systemd_analyze(ride_path, tmp_path, capsys):
    # Source: systemd-analyze verify (systemd's own unit-file checker); it reports bad keys and
    # values as messages, so a clean unit gives no output at all.
    prefix = tmp_path / "root"
    assert _install(ride_path, prefix) == 0
    unit = prefix / "etc/systemd/system/livecoach.service"
    done = subprocess.run(["systemd-analyze", "verify", str(unit)], capture_output=True, text=True,
                          timeout=60)
    assert done.returncode == 0 and (done.stdout + done.stderr).strip() == ""
    # The checker does catch mistakes: a misspelt restart policy is reported.
    broken = tmp_path / "broken.service"
    broken.write_text(unit.read_text().replace("Restart=always", "Restart=allways"))
    ok, messages = inst.verify_unit(broken)
    assert not ok and "restart" in messages.lower()


def test_packaged_and_generated_rules_follow_udev_syntax():
    usb_with_serial = inst.parse_udev_properties(
        # Invented properties of a USB serial adapter, in `udevadm info --query=property` form.
        "DEVNAME=/dev/ttyUSB0\nSUBSYSTEM=tty\nID_BUS=usb\nID_VENDOR_ID=1234\nID_MODEL_ID=5678\n"
        "ID_MODEL=Serial_Adapter\nID_SERIAL_SHORT=A1B2C3\nID_PATH=platform-usb-0:1.2:1.0\n"
    )
    usb_no_serial = {k: v for k, v in usb_with_serial.items() if k != "ID_SERIAL_SHORT"}
    board_uart = {"DEVNAME": "/dev/ttyS0", "SUBSYSTEM": "tty"}
    rules = [
        inst.device_rule("gps", "/dev/ttyUSB0", usb_with_serial),
        inst.device_rule("radio", "/dev/ttyUSB1", usb_no_serial),
        inst.device_rule("mcu", "/dev/serial0", board_uart),
    ]
    assert 'ENV{ID_SERIAL_SHORT}=="A1B2C3"' in rules[0] and 'SYMLINK+="livecoach-gps"' in rules[0]
    assert 'ENV{ID_PATH}=="platform-usb-0:1.2:1.0"' in rules[1] and "same socket" in rules[1]
    assert 'KERNEL=="ttyS0"' in rules[2] and 'SYMLINK+="livecoach-mcu"' in rules[2]
    for text in (inst.render_rules([]), inst.render_rules(rules)):
        assert udev_syntax_errors(text) == []
        assert "@DEVICE_RULES@" not in text
    # The checker itself rejects a malformed rule.
    assert udev_syntax_errors('SUBSYSTEM=="tty", SYMLINK=="x" GROUP="y"')


@pytest.mark.skipif(
    shutil.which("udevadm") is None
    or subprocess.run(["udevadm", "verify", "--help"], capture_output=True).returncode != 0,
    reason="udevadm verify needs systemd >= 254 (Debian 12 has 252)",
)
def test_rules_verify_with_udevadm(tmp_path):
    path = tmp_path / "99-livecoach-serial.rules"
    path.write_text(inst.render_rules([inst.device_rule("mcu", "/dev/ttyS0", {"DEVNAME": "/dev/ttyS0"})]))
    done = subprocess.run(["udevadm", "verify", str(path)], capture_output=True, text=True, timeout=60)
    assert done.returncode == 0, done.stdout + done.stderr


def test_dry_run_writes_and_runs_nothing(ride_path, tmp_path, capsys):
    prefix = tmp_path / "root"
    assert _install(ride_path, prefix, "--dry-run") == 0
    data = json.loads(capsys.readouterr().out)
    assert not prefix.exists()
    actions = [s["action"] for s in data["steps"] if s["action"] != "note"]
    assert actions == ["mkdir", "mkdir", "write", "write"]
    # The plain-text dry run prints the unit and the rules.
    assert main(["install-service", "-c", str(ride_path), "--dry-run"]) == 0
    out = capsys.readouterr().out
    assert "--- livecoach.service ---" in out and "--- 99-livecoach-serial.rules ---" in out


def test_serial_device_identity_comes_from_udevadm(ride_path, tmp_path, capsys):
    import os

    if shutil.which("udevadm") is None:
        pytest.skip("udevadm is not installed")
    master, slave = os.openpty()
    try:
        # A pseudo-terminal is not a device udev manages: a clear error, exit code 1.
        code = main(["install-service", "-c", str(ride_path), "--prefix", str(tmp_path / "r"),
                     "--serial", f"gps={os.ttyname(slave)}"])
    finally:
        os.close(master)
        os.close(slave)
    assert code == 1 and "udevadm info" in capsys.readouterr().err
    with pytest.raises(LivecoachError, match="not a serial device"):
        inst.device_rule("gps", "/dev/null", inst.udev_properties("/dev/null"))


@pytest.mark.parametrize(
    "args, words",
    [
        (["--serial", "gps"], "ROLE=DEVICE"),
        (["--serial", "speedo=/dev/ttyUSB0"], "is not one of gps, mcu, radio"),
        (["--serial", "gps=/dev/no-such-tty"], "does not exist"),
        (["--user", "no-such-user-here"], "no such user"),
        (["--ride-command", "../x"], "--ride-command"),
    ],
)
def test_bad_options_are_usage_errors(ride_path, tmp_path, capsys, args, words):
    code = main(["install-service", "-c", str(ride_path), "--prefix", str(tmp_path / "r"), *args])
    err = capsys.readouterr().err
    assert code == 2 and words in err
    assert "Traceback" not in err


def test_render_unit_refuses_unsafe_paths():
    with pytest.raises(ConfigError, match="absolute"):
        inst.render_unit(exec_argv=["livecoach", "ride"], user="pi", group="pi", data_dir="/srv/x",
                         log_file="/srv/x/l.log")
    with pytest.raises(ConfigError, match="spaces"):
        inst.render_unit(exec_argv=["/usr/bin/livecoach", "ride"], user="pi", group="pi",
                         data_dir="/srv/my data", log_file="/srv/x/l.log")
    with pytest.raises(ConfigError, match="user"):
        inst.render_unit(exec_argv=["/usr/bin/livecoach"], user="Pi; rm", group="pi",
                         data_dir="/srv/x", log_file="/srv/x/l.log")


def test_help():
    out = subprocess.run([sys.executable, "-m", "livecoach", "install-service", "--help"],
                         capture_output=True, text=True, timeout=60)
    assert out.returncode == 0 and "--dry-run" in out.stdout and "--prefix" in out.stdout
    assert Path(inst.__file__).exists()

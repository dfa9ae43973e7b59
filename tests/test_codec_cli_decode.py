"""``livecoach decode``: JSON keys fixed by issue 3; vectors from the Bluetooth
SIG CPS v1.1 / CSCS v1.0 / HRS v1.0 field layouts (bytes labelled in
tests/test_codec_*.py)."""

from __future__ import annotations

import json
import subprocess
import sys

import pytest

from livecoach.cli.main import main


def _run(capsys, *argv):
    code = main(["decode", *argv])
    out, err = capsys.readouterr()
    return code, out, err


def test_cycling_power_json_keys(capsys):
    code, out, _ = _run(capsys, "2A63", "30 00 FA 00 E8 03 00 00 88 13 2C 01 00 0C", "--json")
    assert code == 0
    assert json.loads(out) == {
        "instantaneous_power_w": 250,
        "pedal_power_balance_pct": None,
        "accumulated_torque_nm": None,
        "wheel_revolutions": 1000,
        "last_wheel_event_time_s": 5000 / 2048,
        "crank_revolutions": 300,
        "last_crank_event_time_s": 3.0,
    }


def test_csc_json_keys_128_bit_uuid(capsys):
    code, out, _ = _run(capsys, "00002a5b-0000-1000-8000-00805f9b34fb", "02:07:00:00:08", "--json")
    assert code == 0
    assert json.loads(out) == {"wheel_revolutions": None, "last_wheel_event_time_s": None,
                               "crank_revolutions": 7, "last_crank_event_time_s": 2.0}


def test_heart_rate_json_keys(capsys):
    code, out, _ = _run(capsys, "0x2a37", "0x0c5010 00", "--json")
    assert code == 0
    assert json.loads(out) == {"heart_rate_bpm": 80, "energy_expended_kj": 16, "rr_intervals_s": []}


def test_text_output_names_units(capsys):
    code, out, _ = _run(capsys, "2a37", "16 3c 00 04 00 03")
    assert code == 0
    assert "heart_rate_bpm" in out and "1, 0.75 s" in out


@pytest.mark.parametrize(
    "argv, reason",
    [
        (["2A63", "3000fa00e80300008813"], "truncated: 2A63 flags 0x0030 need 14 bytes, got 10"),
        (["2A5B", "04"], "reserved bits"),
        (["2A37", "0g"], "'g' at position 1 is not a hex digit"),
        (["2A37", "123"], "odd number"),
        (["mcu", "lsl1 btn 5 id=mark #0000"], "bad checksum"),
        (["nmea", "$GPRMC,123519,A*00"], "bad checksum"),
    ],
)
def test_malformed_payload_exits_1_with_reason(capsys, argv, reason):
    code, out, err = _run(capsys, *argv)
    assert code == 1 and out == ""
    assert reason in err and "Traceback" not in err


def test_unknown_uuid_is_a_usage_error(capsys):
    code, _, err = _run(capsys, "2A99", "00")
    assert code == 2 and "2A63" in err


def test_serial_lines(capsys):
    code, out, _ = _run(capsys, "mcu", "lsl1 whl 2611730 n=1843 e=2609411 #778F", "--json")
    assert code == 0
    assert json.loads(out) == {"record": "McuWheel", "t_us": 2611730, "revolutions": 1843, "event_time_us": 2609411}
    code, out, _ = _run(capsys, "nmea", "$GPVTG,054.7,T,034.4,M,005.5,N,010.2,K*48", "--json")
    assert code == 0 and json.loads(out)["speed_mps"] == pytest.approx(10.2 / 3.6)


def test_entry_point_subprocess():
    r = subprocess.run([sys.executable, "-m", "livecoach", "decode", "2A63", "0000fbff", "--json"],
                       capture_output=True, text=True)
    assert r.returncode == 0 and json.loads(r.stdout)["instantaneous_power_w"] == -5

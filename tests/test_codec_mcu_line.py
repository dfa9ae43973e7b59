"""The lsl1 sensor line protocol (ours; hardware_notes/mcu_line_protocol.md).

The CRC is CRC-16/CCITT-FALSE; its check value for "123456789" is 0x29B1
(catalogued as CRC-16/IBM-3740 in the CRC RevEng catalogue of parametrised
CRC algorithms, from memory). The C routine printed in the hardware note is
compiled and run here, so the microcontroller side and the decoder are
checked against each other.
"""

from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from livecoach.codecs.mcu_line import (
    McuAir,
    McuButton,
    McuHello,
    McuWheel,
    crc16_ccitt_false,
    decode_mcu_line,
    encode_mcu_line,
)
from livecoach.errors import DecodeError, EncodeError

NOTE = Path(__file__).resolve().parents[1] / "hardware_notes" / "mcu_line_protocol.md"


def _bitwise_crc(data: bytes) -> int:
    crc = 0xFFFF
    for b in data:
        crc ^= b << 8
        for _ in range(8):
            crc = ((crc << 1) ^ 0x1021) if crc & 0x8000 else (crc << 1)
            crc &= 0xFFFF
    return crc


def test_crc_check_value():
    assert crc16_ccitt_false(b"123456789") == 0x29B1  # CRC RevEng catalogue check value (from memory)
    assert _bitwise_crc(b"123456789") == 0x29B1


def test_example_lines_in_the_hardware_note_decode():
    text = NOTE.read_text(encoding="utf-8")
    block = text.split("## Example lines", 1)[1].split("```")[1]
    lines = [ln.encode() for ln in block.strip().splitlines()]
    records = [decode_mcu_line(ln) for ln in lines]
    assert records == [
        McuHello(1000, "lsl-fw-1.2"),
        McuAir(2503125, airspeed_mps=23.418),
        McuAir(2600004, pressure_pa=86012.5, temperature_c=18.25, relative_humidity_pct=31.5),
        McuWheel(2611730, 1843, 2609411),
        McuButton(2700000, "start"),
        McuButton(3900512, "mark"),
    ]
    assert [encode_mcu_line(r) for r in records] == lines


@pytest.mark.skipif(shutil.which("cc") is None, reason="no C compiler on this machine")
def test_c_snippet_in_hardware_note_agrees(tmp_path):
    text = NOTE.read_text(encoding="utf-8")
    c_code = re.search(r"<!-- lsl1-crc-begin -->\s*```c\n(.*?)```", text, re.S).group(1)
    bodies = [b"123456789", b"lsl1 whl 2611730 n=1843 e=2609411", b"lsl1 air 1 as=0.000", b""]
    main = "\n".join([
        "#include <stdio.h>",
        "#include <string.h>",
        c_code,
        "int main(int argc, char **argv) {",
        "  for (int i = 1; i < argc; i++) printf(\"%04X\\n\", lsl1_crc16(argv[i], strlen(argv[i])));",
        "  return 0;",
        "}",
    ])
    src = tmp_path / "crc.c"
    src.write_text(main)
    exe = tmp_path / "crc"
    subprocess.run(["cc", "-std=c99", "-O0", "-o", str(exe), str(src)], check=True, capture_output=True)
    out = subprocess.run([str(exe), *[b.decode() for b in bodies]], check=True, capture_output=True, text=True)
    assert out.stdout.split() == [f"{crc16_ccitt_false(b):04X}" for b in bodies]


def test_cr_tolerated():
    line = encode_mcu_line(McuButton(5, "mark"))
    assert decode_mcu_line(line + b"\r") == McuButton(5, "mark")


@pytest.mark.parametrize(
    "line, reason",
    [
        (b"lsl1 btn 5 id=mark", "no ' #<crc>'"),
        (b"lsl1 btn 5 id=mark #43fa", "four upper-case hex"),
        (b"lsl1 btn 5 id=mark #0000", "bad checksum"),
    ],
)
def test_framing_errors(line, reason):
    with pytest.raises(DecodeError, match=reason):
        decode_mcu_line(line)


def _signed(body: bytes) -> bytes:
    return body + b" #" + f"{_bitwise_crc(body):04X}".encode()


@pytest.mark.parametrize(
    "body, reason",
    [
        (b"lsl1 air 1 as=12.\xff", "not UTF-8: non-ASCII byte 0xFF at offset 17"),
        (b"lsl2 air 1 as=1", "expected 'lsl1"),
        (b"lsl1 xyz 1 a=1", "unknown record kind 'xyz'"),
        (b"lsl1 air 1 q=1", "unknown key 'q'"),
        (b"lsl1 air 1 as=1 as=2", "repeated"),
        (b"lsl1 air 1 as=fast", "not a decimal number"),
        (b"lsl1 air 1 as=1e3", "not a decimal number"),
        (b"lsl1 air 1 rh=101", "outside 0..100"),
        (b"lsl1 air 1", "at least one"),
        (b"lsl1 whl 1 n=5", "needs both n and e"),
        (b"lsl1 whl 1 n=5 e=4294967296", "exceeds 32 bits"),
        (b"lsl1 whl -1 n=5 e=4", "time t_us"),
        (b"lsl1 btn 1 id=", "not key=value"),
        (b"lsl1 btn 1 id=a/b", "1-32 character word"),
    ],
)
def test_content_errors_name_the_problem(body, reason):
    with pytest.raises(DecodeError, match=re.escape(reason)):
        decode_mcu_line(_signed(body))


def test_encode_refuses_what_the_protocol_cannot_carry():
    with pytest.raises(EncodeError):
        encode_mcu_line(McuAir(1))
    with pytest.raises(EncodeError):
        encode_mcu_line(McuAir(1, airspeed_mps=float("nan")))
    with pytest.raises(EncodeError):
        encode_mcu_line(McuWheel(1, -1, 0))
    with pytest.raises(EncodeError):
        encode_mcu_line(McuButton(1, "two words"))


u32 = st.integers(0, 2**32 - 1)


def _dec(lo, hi, places):
    return st.none() | st.integers(int(lo * 10**places), int(hi * 10**places)).map(lambda n: n / 10**places)


records = st.one_of(
    st.builds(McuHello, u32, st.from_regex(r"[A-Za-z0-9_.\-]{1,32}", fullmatch=True)),
    st.builds(McuButton, u32, st.from_regex(r"[A-Za-z0-9_.\-]{1,32}", fullmatch=True)),
    st.builds(McuWheel, u32, u32, u32),
    st.builds(McuAir, u32, _dec(-50, 200, 3), _dec(10000, 120000, 1), _dec(-60, 80, 2), _dec(0, 100, 1)).filter(
        lambda r: any(v is not None for v in (r.airspeed_mps, r.pressure_pa, r.temperature_c, r.relative_humidity_pct))
    ),
)


@settings(max_examples=300, deadline=None)
@given(records)
def test_round_trip(record):
    line = encode_mcu_line(record)
    assert decode_mcu_line(line) == record
    assert _bitwise_crc(line[: line.rfind(b" #")]) == int(line[-4:], 16)


@settings(max_examples=400, deadline=None)
@given(st.binary(max_size=60))
def test_fuzz_random_bytes_only_decode_error(line):
    try:
        decode_mcu_line(line)
    except DecodeError:
        pass


@settings(max_examples=300, deadline=None)
@given(st.text(alphabet="lsl1 airwhbtnhlo=.-0123456789asprhnefidxyz#\xe9", max_size=50))
def test_fuzz_signed_text_only_decode_error(text):
    # Garbage with a correct CRC reaches the field parser.
    try:
        decode_mcu_line(_signed(text.encode("utf-8")))
    except DecodeError:
        pass

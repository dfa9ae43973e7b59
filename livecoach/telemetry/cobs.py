"""Consistent Overhead Byte Stuffing.

Source: S. Cheshire and M. Baker, "Consistent Overhead Byte Stuffing",
IEEE/ACM Transactions on Networking 7(2):159-172, 1999. The encoded data
contains no zero byte, so a single 0x00 can delimit frames on a byte stream
and a receiver resynchronises at the next zero after any corruption. The
overhead is at most one byte in 254 (plus one).

Pure functions on bytes.
"""

from __future__ import annotations

from livecoach.errors import FrameError


def cobs_encode(data: bytes) -> bytes:
    """Stuff ``data`` so that it contains no zero byte (the delimiter is not added).

    Data ending exactly at the end of a full 254-byte block gets no trailing
    empty block (the shortest form, as most implementations emit)."""
    out = bytearray(b"\x00")
    code_at = 0
    code = 1
    for byte in data:
        if code == 0xFF:  # a full block of 254 bytes: close it (no implied zero)
            out[code_at] = 0xFF
            code_at = len(out)
            out.append(0)
            code = 1
        if byte == 0:
            out[code_at] = code
            code_at = len(out)
            out.append(0)
            code = 1
        else:
            out.append(byte)
            code += 1
    out[code_at] = code
    return bytes(out)


def cobs_decode(encoded: bytes) -> bytes:
    """Undo :func:`cobs_encode`. Raises :class:`FrameError` naming the byte
    offset when ``encoded`` is not valid COBS (empty, a zero byte inside, or a
    block that runs past the end). A final empty block after a 0xFF block is
    accepted with or without its 0x01 code byte."""
    if not encoded:
        raise FrameError("COBS: empty packet")
    out = bytearray()
    i = 0
    n = len(encoded)
    while i < n:
        code = encoded[i]
        if code == 0:
            raise FrameError(f"COBS: zero byte at offset {i}")
        end = i + code
        if end > n:
            raise FrameError(
                f"COBS: block at offset {i} needs {code - 1} bytes but only {n - i - 1} remain"
            )
        block = encoded[i + 1:end]
        if 0 in block:
            raise FrameError(f"COBS: zero byte at offset {i + 1 + block.index(0)}")
        out += block
        i = end
        if code != 0xFF and i < n:
            out.append(0)
    return bytes(out)

"""CRC-16/CCITT-FALSE (also catalogued as CRC-16/IBM-3740 and CRC-16/AUTOSAR).

Parameters as in G. Cook's "Catalogue of parametrised CRC algorithms"
(the RevEng CRC catalogue): width 16, poly 0x1021, init 0xFFFF, refin false,
refout false, xorout 0x0000, check 0x29B1 (the CRC of the ASCII bytes
"123456789"), residue 0x0000. Table driven, one table lookup per byte.
"""

from __future__ import annotations

POLY = 0x1021
INIT = 0xFFFF
#: CRC of b"123456789" (the catalogue's check value).
CHECK = 0x29B1


def _make_table() -> tuple[int, ...]:
    table = []
    for byte in range(256):
        crc = byte << 8
        for _ in range(8):
            crc = ((crc << 1) ^ POLY) if crc & 0x8000 else (crc << 1)
        table.append(crc & 0xFFFF)
    return tuple(table)


_TABLE = _make_table()


def crc16_ccitt_false(data: bytes, crc: int = INIT) -> int:
    """CRC-16/CCITT-FALSE of ``data`` (pass the previous value as ``crc`` to continue)."""
    table = _TABLE
    for byte in data:
        crc = ((crc << 8) & 0xFF00) ^ table[((crc >> 8) ^ byte) & 0xFF]
    return crc

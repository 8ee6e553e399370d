"""Frames on the bench link: COBS with a zero delimiter around a payload that ends in its CRC.

A frame on the wire is COBS(payload + CRC) followed by one 0x00. The CRC is CRC-16/IBM-3740
(polynomial 0x1021, initial value 0xFFFF, no reflection, no final XOR) over the payload, appended most
significant byte first, so that the CRC over payload and CRC together is 0. The reader never raises:
a bad frame is dropped and counted by its cause.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass, field

CRC_POLY = 0x1021
CRC_INIT = 0xFFFF
MAX_FRAME = 64  # longest decoded payload plus CRC either side sends, bytes
DELIMITER = 0


def _crc_table() -> tuple[int, ...]:
    table = []
    for byte in range(256):
        crc = byte << 8
        for _ in range(8):
            crc = ((crc << 1) ^ CRC_POLY) & 0xFFFF if crc & 0x8000 else (crc << 1) & 0xFFFF
        table.append(crc)
    return tuple(table)


_TABLE = _crc_table()


def crc_table() -> tuple[int, ...]:
    """The 256 CRC-16/IBM-3740 table entries (the link C embeds the same table)."""
    return _TABLE


def crc16(data: bytes, crc: int = CRC_INIT) -> int:
    """CRC-16/IBM-3740 of `data` (continue a running CRC by passing it as `crc`)."""
    for byte in data:
        crc = ((crc << 8) & 0xFFFF) ^ _TABLE[((crc >> 8) ^ byte) & 0xFF]
    return crc


def cobs_encode(data: bytes) -> bytes:
    """Consistent Overhead Byte Stuffing: no zero byte in the result, at most one extra byte in 254.
    Each block is a code byte (its length + 1) and up to 254 non-zero bytes; a block shorter than 254
    stands for the data bytes and one zero, except at the very end."""
    out, block = bytearray(), bytearray()
    ended_full = False
    for byte in data:
        ended_full = False
        if byte == 0:
            out.append(len(block) + 1)
            out += block
            block.clear()
            continue
        block.append(byte)
        if len(block) == 0xFE:
            out.append(0xFF)
            out += block
            block.clear()
            ended_full = True
    if not ended_full:
        out.append(len(block) + 1)
        out += block
    return bytes(out)


def cobs_decode(data: bytes) -> bytes | None:
    """The inverse of cobs_encode; None for bytes no encoder produces (a zero, a block past the end)."""
    out = bytearray()
    k, n = 0, len(data)
    while k < n:
        code = data[k]
        end = k + code
        if code == 0 or end > n or 0 in data[k + 1 : end]:
            return None
        out += data[k + 1 : end]
        k = end
        if code < 0xFF and k < n:
            out.append(0)
    return bytes(out)


def frame(payload: bytes) -> bytes:
    """The wire bytes of one frame: COBS(payload + CRC, MSB first) and the delimiter."""
    crc = crc16(payload)
    return cobs_encode(payload + bytes([crc >> 8, crc & 0xFF])) + bytes([DELIMITER])


@dataclass
class Drops:
    """Frames dropped by the reader (or by message decoding), by cause."""

    crc: int = 0
    length: int = 0
    unknown_type: int = 0
    out_of_order: int = 0

    def total(self) -> int:
        return self.crc + self.length + self.unknown_type + self.out_of_order


@dataclass
class FrameReader:
    """Splits a byte stream at delimiters into checked payloads (CRC removed); never raises."""

    drops: Drops = field(default_factory=Drops)
    _buffer: bytearray = field(default_factory=bytearray)
    _overflow: bool = False

    def feed(self, data: Iterable[int]) -> list[bytes]:
        """Bytes in, complete good payloads out; bad frames are counted in `drops`."""
        good = []
        for byte in data:
            if byte != DELIMITER:
                if len(self._buffer) > 2 * MAX_FRAME:
                    self._overflow = True
                else:
                    self._buffer.append(byte)
                continue
            payload = self._finish()
            if payload is not None:
                good.append(payload)
        return good

    def _finish(self) -> bytes | None:
        raw, overflow = bytes(self._buffer), self._overflow
        self._buffer.clear()
        self._overflow = False
        if not raw and not overflow:
            return None  # two delimiters in a row: an empty frame, used to resynchronise
        decoded = None if overflow else cobs_decode(raw)
        if decoded is None or len(decoded) < 3 or len(decoded) > MAX_FRAME:
            self.drops.length += 1
            return None
        if crc16(decoded) != 0:
            self.drops.crc += 1
            return None
        return decoded[:-2]

"""Bench-link framing against outside references, and the reader under garbage.

CRC: the catalogue check value of CRC-16/IBM-3740 (G. Cook, "Catalogue of parametrised CRC
algorithms": 0x29B1 over ASCII "123456789") and the `crc` package (PyPI) as an oracle; CRC-16/XMODEM's
0x31C3 as a negative control. COBS: S. Cheshire and M. Baker (1999), "Consistent Overhead Byte
Stuffing", IEEE/ACM Trans. Networking 7(2), through the `cobs` package (PyPI) as an oracle and the
worked encodings reproduced with it."""

from __future__ import annotations

import re
from pathlib import Path

import pytest
from cobs import cobs
from crc import Calculator, Crc16
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from kinetab.hil import framing, messages

IBM_3740 = Calculator(Crc16.IBM_3740)


def test_crc_catalogue_check_value():
    assert framing.crc16(b"123456789") == 0x29B1  # Cook's catalogue, CRC-16/IBM-3740 check
    assert framing.crc16(b"123456789") != 0x31C3  # CRC-16/XMODEM (init 0) would give this


@settings(max_examples=500, derandomize=True)
@given(st.binary(max_size=200))
def test_crc_equals_the_crc_package(data):
    assert framing.crc16(data) == IBM_3740.checksum(data)


def test_crc_over_frame_and_crc_is_zero():
    """Appending the CRC most significant byte first makes the whole frame's CRC zero (the residue of a
    non-reflected CRC with no final XOR; any CRC text, e.g. Williams, 'A painless guide to CRC error
    detection algorithms', from memory)."""
    payload = b"\x03\x01\x00kinetab"
    crc = framing.crc16(payload)
    assert framing.crc16(payload + bytes([crc >> 8, crc & 0xFF])) == 0


WORKED = [  # (data, COBS encoding without the delimiter): Cheshire & Baker's rules, reproduced with `cobs`
    (b"\x00", b"\x01\x01"),
    (b"\x00\x00", b"\x01\x01\x01"),
    (b"\x00\x11\x00", b"\x01\x02\x11\x01"),
    (b"\x11\x22\x00\x33", b"\x03\x11\x22\x02\x33"),
    (b"\x11\x22\x33\x44", b"\x05\x11\x22\x33\x44"),
    (b"\x11\x00\x00\x00", b"\x02\x11\x01\x01\x01"),
    (bytes(range(1, 255)), b"\xff" + bytes(range(1, 255))),
]


@pytest.mark.parametrize("data,encoded", WORKED, ids=[e.hex()[:12] for _, e in WORKED])
def test_cobs_worked_examples(data, encoded):
    assert framing.cobs_encode(data) == encoded == cobs.encode(data)
    assert framing.cobs_decode(encoded) == data


@settings(max_examples=2000, derandomize=True)
@given(st.binary(max_size=600))
def test_cobs_equals_the_cobs_package_and_round_trips(data):
    encoded = framing.cobs_encode(data)
    assert encoded == cobs.encode(data)
    assert 0 not in encoded and len(encoded) <= len(data) + len(data) // 254 + 1  # overhead: one in 254
    assert framing.cobs_decode(encoded) == data


@pytest.mark.slow  # a fuzz of 10 000 inputs (8 s); the fast tier keeps the examples and the oracles
@settings(max_examples=10_000, derandomize=True, suppress_health_check=[HealthCheck.too_slow])
@given(st.binary(max_size=300))
def test_reader_never_raises_on_garbage(data):
    reader = framing.FrameReader()
    for payload in reader.feed(data):  # whatever passes its CRC must still decode without an exception
        messages.decode(payload)
        messages.decode(payload, messages.TO_CONTROLLER)


_SETPOINT = messages.encode(messages.Setpoint(7, 0, tuple(range(-3, messages.N_IN - 3))))


@pytest.mark.slow  # 10 000 corruptions (15 s)
@settings(max_examples=10_000, derandomize=True, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(st.tuples(st.integers(0, 1000), st.integers(0, 7)), min_size=1, max_size=3, unique_by=lambda t: t))
def test_every_corrupted_frame_is_rejected(flips):
    """One to three bit flips anywhere in an encoded frame: the reader accepts nothing (CRC-16 with
    polynomial 0x1021 has Hamming distance 4 on frames this short, so up to three flipped bits of the
    payload are always detected; Koopman's CRC tables, from memory)."""
    wire = bytearray(framing.frame(_SETPOINT)[:-1])
    for position, bit in flips:
        wire[position % len(wire)] ^= 1 << bit
    if bytes(wire) == framing.frame(_SETPOINT)[:-1]:
        return  # two flips of the same bit undo each other
    reader = framing.FrameReader()
    accepted = reader.feed(bytes(wire) + b"\x00")
    assert accepted == [] and reader.drops.total() >= 1


def test_reader_counts_drops_by_cause():
    reader = framing.FrameReader()
    good = framing.frame(messages.encode(messages.Hello()))
    bad_crc = bytearray(good)
    bad_crc[2] ^= 0x40
    assert reader.feed(good + bytes(bad_crc) + b"\x05\x01\x00" + b"\x00" + b"\x02\x01" * 100 + b"\x00") == [
        messages.encode(messages.Hello())
    ]
    assert (reader.drops.crc, reader.drops.length) == (1, 2)
    assert messages.decode(b"\x7f\x00") == "unknown_type" and messages.decode(b"\x84\x00") == "length"


def _protocol_examples() -> list[tuple[str, bytes, int, bytes]]:
    import re
    from pathlib import Path

    text = (Path(__file__).resolve().parents[1] / "hil" / "PROTOCOL.md").read_text()
    rows = re.findall(r"^\| ([A-Z_]+)[^|]*\| `([0-9a-f ]+)` \| `([0-9A-F]{4})` \| `([0-9a-f ]+)` \|$", text, re.M)
    return [(name, bytes.fromhex(p), int(c, 16), bytes.fromhex(w)) for name, p, c, w in rows]


def test_protocol_document_examples_are_right():
    """Every worked example of hil/PROTOCOL.md, checked with the `crc` and `cobs` packages (independent
    of our framing) and decoded by our messages."""
    examples = _protocol_examples()
    assert [e[0] for e in examples] == [
        "HELLO",
        "IDENTIFY",
        "ARM",
        "ARMED",
        "SETPOINT",
        "SAMPLE",
        "LIFT_SETPOINT",
        "LIFT_SAMPLE",
        "HALT",
        "FAULT",
    ]
    for name, payload, crc, wire in examples:
        assert IBM_3740.checksum(payload) == crc, name
        assert wire == cobs.encode(payload + crc.to_bytes(2, "big")) + b"\x00", name
        assert framing.frame(payload) == wire, name
        msg = messages.decode(payload, messages.TO_CONTROLLER | messages.TO_HOST)
        assert not isinstance(msg, str) and messages.encode(msg) == payload, name


def test_crc_table_entries_are_xmodem_crcs_of_one_byte():
    """The table the link C embeds: entry b is the CRC of the single byte b with polynomial 0x1021 from a
    zero register, which is CRC-16/XMODEM of that byte (the `crc` package as the oracle)."""
    xmodem = Calculator(Crc16.XMODEM)
    assert list(framing.crc_table()) == [xmodem.checksum(bytes([b])) for b in range(256)]


def _document_fields(cell: str) -> list[tuple[str, str | tuple[str, ...]]]:
    """The fields of one PROTOCOL.md table cell: ("u16", "seq") for a scalar, ("i32", (columns...)) for
    `N x \\`i32\\` ... \\`a, b\\`` runs (N checked against the columns)."""
    out: list[tuple[str, str | tuple[str, ...]]] = []
    for m in re.finditer(r"(\d+) x `(\w+)`[^`]*`([\w, ]+)`|`(u8|u16|u32|i32) (\w+)`", cell):
        if m.group(1):
            columns = tuple(c.strip() for c in m.group(3).split(","))
            assert int(m.group(1)) == len(columns), f"{cell}: {m.group(1)} x but {len(columns)} names"
            out.append((m.group(2), columns))
        else:
            out.append((m.group(4), m.group(5)))
    return out


def test_protocol_document_tables_match_the_layout():
    """PROTOCOL.md, the page a controller author reads, states the same message codes, fields, wire
    types, order and lengths as messages.LAYOUT (which the codecs and the link C use)."""
    text = (Path(messages.__file__).parent / "PROTOCOL.md").read_text(encoding="utf-8")
    rows = re.findall(r"^\| (0x[0-9A-F]{2}) \| (\w+) \| (.*) \| (\d+) \|$", text, re.M)
    assert {name for _, name, _, _ in rows} == {k.name for k in messages.MessageType}
    for code, name, cell, length in rows:
        kind = messages.MessageType[name]
        layout = messages.LAYOUT[kind]
        assert int(code, 16) == int(kind), name
        assert int(length) == 1 + layout.size, f"{name}: document says {length} bytes"
        expected = [(f.wire, f.columns if f.columns else f.name) for f in layout.fields]
        assert _document_fields(cell) == expected, name

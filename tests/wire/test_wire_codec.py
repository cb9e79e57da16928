"""Encoders and host commands: every record through both forms, and the commands' lines."""

from __future__ import annotations

import numpy as np
import pytest
from _wire_helpers import flatten
from hypothesis import given
from hypothesis import strategies as st

from benchlog.errors import ConfigError, ProtocolError
from benchlog.wire import (
    Announce,
    Beat,
    Decoder,
    Drive,
    Edges,
    Go,
    Halt,
    LineEncoder,
    Notice,
    PackedEncoder,
    Ping,
    Plan,
    Pong,
    SetForm,
    Who,
    cobs_decode,
    crc32,
    encode_command,
    parse_command,
)

ANNOUNCE = Announce(1, 1_000_000, 32, 8, "AVR8-REF-01")
ONE_OF_EACH = [
    ANNOUNCE,
    Edges.of([(3, 1, 0x3D090), (3, 0, 0x3D1F4), (7, 1, 0xFFFFFFFF)]),
    Drive(3, 1, 0x3C350),
    Beat(0xF4240, 1520, 7),
    Notice("coil supply low"),
    Notice(""),
    Pong(42),
    Pong(65535),
]


@pytest.mark.parametrize("encoder", [LineEncoder, PackedEncoder])
def test_every_record_round_trips(encoder):
    data = encoder().encode_all(ONE_OF_EACH)
    dec = Decoder()
    assert flatten(dec.feed(data)) == flatten(ONE_OF_EACH)
    assert dec.counters.faults == 0
    assert dec.counters.edges == 3


def test_line_form_matches_the_protocol_examples():
    # docs/protocol.md, "Line form" examples (the checksum is the XOR of the bytes before '*')
    enc = LineEncoder()
    assert enc.encode(ANNOUNCE).startswith(b"A 1 1000000 32 8 AVR8-REF-01*")
    assert enc.encode(Edges.of([(3, 1, 0x3D090)])).startswith(b"E 3 1 0003d090*")
    assert enc.encode(Drive(3, 1, 0x3C350)).startswith(b"D 3 1 0003c350*")
    assert enc.encode(Beat(0xF4240, 1520, 0)).startswith(b"B 000f4240 1520 0*")
    assert enc.encode(Pong(42)).startswith(b"P 42*")
    for line in enc.encode_all(ONE_OF_EACH).splitlines():
        body, check = line.rsplit(b"*", 1)
        x = 0
        for b in body:
            x ^= b
        assert int(check, 16) == x


def test_packed_frame_layout():
    frame = PackedEncoder(sequence=0x1234).encode(Pong(0xBEEF))
    assert frame.endswith(b"\0") and frame.count(b"\0") == 1
    raw = cobs_decode(frame[:-1])
    assert raw[:3] == b"\x05\x34\x12" and raw[3:5] == b"\xef\xbe"
    assert int.from_bytes(raw[-4:], "little") == crc32(raw[:-4])


def test_packed_edges_split_by_count_and_by_long_delta():
    enc = PackedEncoder(max_edges=32)
    ticks = list(range(0, 70 * 10, 10)) + [700 + 70000, 700 + 70001]
    batch = Edges.of([(1, i % 2, t) for i, t in enumerate(ticks)])
    data = enc.encode(batch)
    frames = data.split(b"\0")[:-1]
    counts = [cobs_decode(f)[11] for f in frames]
    assert counts == [32, 32, 6, 2]  # 70 edges in frames of 32, then a new frame after the 70000 gap
    assert enc.sequence == 4
    assert flatten(Decoder().feed(data)) == flatten([batch])


def test_packed_sequence_wraps_modulo_65536():
    enc = PackedEncoder(sequence=65535)
    data = enc.encode(Pong(1)) + enc.encode(Pong(2))
    assert enc.sequence == 1
    out = Decoder().feed(data)
    assert [type(r).__name__ for r in out] == ["Pong", "Pong"]  # no gap across the wrap


def test_line_ticks_widen_with_the_counter():
    enc = LineEncoder()
    enc.encode(Announce(1, 48_000_000, 64, 16, "WIDE"))
    assert enc.encode(Edges.of([(15, 1, 5)])).startswith(b"E f 1 0000000000000005*")


@pytest.mark.parametrize(
    "bad",
    [
        Edges.of([(16, 1, 5)]),
        Edges.of([(1, 2, 5)]),
        Drive(1, 1, 2**64),
        Announce(1, 1_000_000, 12, 8, "X"),
        Announce(1, 1_000_000, 32, 8, "has space"),
        Announce(1, 1_000_000, 32, 8, "X" * 33),
        Notice("x" * 121),
        Pong(70000),
    ],
)
@pytest.mark.parametrize("encoder", [LineEncoder, PackedEncoder])
def test_encoders_refuse_what_the_protocol_cannot_carry(encoder, bad):
    with pytest.raises(ProtocolError):
        encoder().encode(bad)


edge_rows = st.lists(
    st.tuples(st.integers(0, 15), st.integers(0, 1), st.integers(0, 2**32 - 1)), min_size=1, max_size=80
)


@given(edge_rows, st.integers(1, 255))
def test_hypothesis_edges_round_trip_both_forms(rows, max_edges):
    rows.sort(key=lambda r: r[2])
    batch = Edges.of(rows)
    head = Announce(1, 1_000_000, 32, 16, "HYP")
    for enc in (LineEncoder(), PackedEncoder(max_edges=max_edges)):
        data = enc.encode(head) + enc.encode(batch)
        assert flatten(Decoder().feed(data)) == flatten([head, batch])


# -- commands ---------------------------------------------------------------------------------------------

COMMANDS = [
    (Who(), b"WHO\n"),
    (Ping(0), b"PING 0\n"),
    (Ping(65535), b"PING 65535\n"),
    (SetForm("L"), b"FORM L\n"),
    (SetForm("P"), b"FORM P\n"),
    (Plan(3, 50_000, 50_000, 200_000), b"PLAN 3 50000 50000 200000\n"),
    (Plan(0, 1, 1, 0), b"PLAN 0 1 1 0\n"),
    (Go(), b"GO\n"),
    (Halt(), b"HALT\n"),
]


@pytest.mark.parametrize(("cmd", "line"), COMMANDS)
def test_commands_encode_and_parse(cmd, line):
    assert encode_command(cmd) == line
    assert parse_command(line) == cmd
    assert parse_command(line.decode().replace("\n", "\r\n")) == cmd


@pytest.mark.parametrize(
    "line",
    [
        b"",
        b"who\n",
        b"PING\n",
        b"PING 65536\n",
        b"PING -1\n",
        b"PING 1_0\n",
        b"FORM X\n",
        b"PLAN 16 1 1 1\n",
        b"PLAN 1 0 1 1\n",
        b"PLAN 1 1 1\n",
        b"GO now\n",
        b"\xff\xfe\n",
        b"PING \xd9\xa1\n",
        b"HALT\x00\n",
    ],
)
def test_parse_command_says_none_for_lines_not_understood(line):
    assert parse_command(line) is None


def test_command_values_are_checked():
    with pytest.raises(ConfigError):
        Plan(3, 0, 100, 1)
    with pytest.raises(ConfigError):
        Ping(-1)
    with pytest.raises(ConfigError):
        SetForm("X")  # type: ignore[arg-type]


def test_edges_encoding_is_vectorised_for_big_batches():
    # not a timing test: a million edges in one call must come back exactly
    n = 1_000_000
    rng = np.random.default_rng(7)
    tick = np.cumsum(rng.integers(1, 5000, n)).astype(np.uint64) & np.uint64(0xFFFFFFFF)
    batch = Edges(rng.integers(0, 8, n).astype(np.uint8), rng.integers(0, 2, n).astype(np.uint8), tick)
    for enc in (LineEncoder(counter_bits=32), PackedEncoder(counter_bits=32)):
        dec = Decoder()
        out = dec.feed(enc.encode(ANNOUNCE) + enc.encode(batch))
        got = [r for r in out if isinstance(r, Edges)]
        assert len(got) == 1 and got[0] == batch

"""Protocol version 2 on the wire: the line check, the new records, and chunking that never matters."""

from __future__ import annotations

import binascii
import random

import numpy as np
import pytest
from _wire_helpers import flatten
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from benchlog.wire import (
    Announce,
    Beat,
    Decoder,
    Drive,
    Edges,
    GoAccepted,
    LineEncoder,
    Notice,
    PackedEncoder,
    PlanAccepted,
    Pong,
    crc16,
    line_check,
)

V2 = Announce(2, 1_000_000, 32, 8, "AVR8-REF-02")


def test_line_crc_is_the_catalogued_crc16():
    # CRC-16/IBM-3740 check value for ASCII "123456789": 0x29B1 (the CRC catalogue's entry, also known
    # as CRC-16/CCITT-FALSE); binascii.crc_hqx is the reference implementation in the standard library
    assert crc16(b"123456789") == 0x29B1 == binascii.crc_hqx(b"123456789", 0xFFFF)
    assert line_check(b"E 3 1 0003d090") == b"*0e%04x" % binascii.crc_hqx(b"E 3 1 0003d090", 0xFFFF)


def v2_records(seed: int, n: int = 30) -> list:
    rng = np.random.default_rng(seed)
    recs: list = [V2, Beat(5, 0, 0, 0, ()), PlanAccepted(1, 50_000, 50_000, 0), GoAccepted((1,), 10)]
    t, captured = 100, 0
    for i in range(n):
        recs.append(Drive(1, (i + 1) % 2, t, i // 2 + 1))
        k = int(rng.integers(1, 6))
        ticks = t + 500 + np.cumsum(rng.integers(3, 300, k))
        recs.append(Edges.of([(1, int(rng.integers(0, 2)), int(x)) for x in ticks]))
        captured += k
        t = int(ticks[-1]) + 1000
        if i % 4 == 3:
            recs.append(Beat(t, captured, 0, i, ((1, i // 2),)))
    recs += [Notice("a notice * with stars"), Pong(9)]
    return recs


@pytest.mark.parametrize("encoder", [LineEncoder, PackedEncoder])
def test_version_2_records_round_trip(encoder):
    recs = v2_records(3)
    data = encoder().encode_all(recs)
    dec = Decoder()
    assert flatten(dec.feed(data)) == flatten(recs)
    assert dec.counters.faults == 0
    bytewise = Decoder()
    out = []
    for i in range(len(data)):
        out += bytewise.feed(data[i : i + 1])
    assert flatten(out) == flatten(recs)


def test_a_version_2_line_without_its_check_is_a_fault():
    enc = LineEncoder()
    good = enc.encode_all([V2, Drive(1, 1, 0x20, 1)])
    dec = Decoder()
    out = dec.feed(good + b"E 1 1 00000030\n" + b"E 1 1 00000031*67\n" + enc.encode(Drive(1, 0, 0x40, 1)))
    assert flatten(out) == flatten([V2, Drive(1, 1, 0x20, 1), Drive(1, 0, 0x40, 1)])
    assert dec.counters.by_reason == {"checksum missing": 2}


def test_a_version_1_stream_that_carried_checksums_is_held_to_them():
    # the dropped-'*' case: "E 3 1 0003d090*4c" losing its '*' reads as tick 0x0003d0904c
    enc = LineEncoder()
    v1 = Announce(1, 1_000_000, 32, 8, "AVR8-REF-01")
    line = enc.encode(Edges.of([(3, 1, 0x0003D090)]))
    damaged = line.replace(b"*", b"")
    dec = Decoder()
    out = dec.feed(enc.encode(v1) + damaged + line)
    assert flatten(out) == flatten([v1, Edges.of([(3, 1, 0x0003D090)])])
    assert dec.counters.by_reason == {"checksum missing": 1}
    # a port that never sends checksums is still read
    dec = Decoder()
    out = dec.feed(b"A 1 1000000 32 8 MINIMAL\nE 3 1 0003d090\n")
    assert flatten(out)[-1] == ("E", 3, 1, 0x0003D090) and dec.counters.faults == 0


def test_a_reset_mid_line_loses_the_cut_line_and_not_the_announcement_after_it():
    """A version 2 sampler starts each life with an empty line: the line its reset cut ends there.
    (The emulated board showed it: a reset mid-beat glued the beat's first half to the announcement.)"""
    enc = LineEncoder()
    before = enc.encode_all([V2, Drive(1, 1, 0x20, 1)])
    beat = enc.encode(Beat(0x30, 2, 0, 0, ((1, 1),)))
    cut = beat[: len(beat) // 2]  # the power went mid-line
    life = enc.encode_all([V2, Drive(1, 1, 0x10, 1)])
    want = flatten([V2, Drive(1, 1, 0x20, 1), V2, Drive(1, 1, 0x10, 1)])
    data = before + cut + b"\r\n" + life
    for pieces in ([data], [data[i : i + 1] for i in range(len(data))]):  # whole, and byte by byte
        dec = Decoder()
        out = [r for piece in pieces for r in dec.feed(piece)]
        assert flatten(out) == want
        assert dec.counters.faults == 1  # the cut line, and nothing else
    # without it the cut line runs into the announcement, and the new life's announcement is lost
    dec = Decoder()
    out = dec.feed(before + cut + life)
    assert sum(isinstance(r, Announce) for r in out) == 1
    # a fresh sampler's first bytes: the empty line is not noise before the first line, nor a fault later
    for data in (b"\r\n" + life, life + b"\r\n\r\n" + enc.encode(Drive(1, 0, 0x40, 1))):
        dec = Decoder()
        assert isinstance(dec.feed(data)[0], Announce)
        assert dec.counters.faults == 0


_record = st.one_of(
    st.builds(
        lambda c, lv, t: Edges.of([(c, lv, t)]),
        st.integers(0, 7),
        st.integers(0, 1),
        st.integers(0, 2**32 - 1),
    ),
    st.builds(
        Drive, st.integers(0, 7), st.integers(0, 1), st.integers(0, 2**32 - 1), st.integers(0, 2**32 - 1)
    ),
    st.builds(
        lambda t, c, d, s, n: Beat(t, c, d, s, tuple((ch, n) for ch in range(8) if n >> ch & 1)),
        st.integers(0, 2**32 - 1),
        st.integers(0, 2**32 - 1),
        st.integers(0, 2**32 - 1),
        st.integers(0, 2**32 - 1),
        st.integers(0, 255),
    ),
    st.builds(Notice, st.text(st.characters(min_codepoint=32, max_codepoint=126), max_size=120)),
    st.builds(Pong, st.integers(0, 0xFFFF)),
    st.builds(
        PlanAccepted,
        st.integers(0, 7),
        st.integers(1, 2**32 - 1),
        st.integers(1, 2**32 - 1),
        st.integers(0, 2**32 - 1),
    ),
)


@settings(max_examples=1500, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    _record,
    st.sampled_from(["drop", "insert", "flip"]),
    st.integers(0, 300),
    st.integers(1, 255),
    st.booleans(),
)
def test_any_single_dropped_inserted_or_flipped_byte_is_detected(record, how, where, value, neighbours):
    """A version 2 line hit by one damaged byte anywhere (its newline included) never decodes as a
    different record: either it decodes exactly as sent or it is a counted fault."""
    enc = LineEncoder()
    head = enc.encode_all([V2, Pong(1)])
    line = enc.encode(record)
    after = enc.encode(Pong(2)) if neighbours else b""
    i = where % len(line)
    if how == "drop":
        bad = line[:i] + line[i + 1 :]
    elif how == "insert":
        bad = line[:i] + bytes([value]) + line[i:]
    else:
        bad = line[:i] + bytes([line[i] ^ value]) + line[i + 1 :]
    dec = Decoder()
    out = flatten(dec.feed(head + bad + after + enc.encode(Pong(3))))
    sent = [V2, Pong(1), record, Pong(2), Pong(3)] if neighbours else [V2, Pong(1), record, Pong(3)]
    intact = flatten(sent)
    # everything decoded is true and in order; what is missing is the damaged line (and the next one
    # when a damaged newline ran them together), and then a fault was counted
    it = iter(intact)
    assert all(any(r == x for x in it) for r in out)  # `out` is a subsequence of `intact`
    if len(out) < len(intact):
        assert dec.counters.faults >= 1


def _announcements_change_context_mid_buffer() -> bytes:
    """Edges on channel 6 after an announcement that cuts the bench to 4 channels: out of range, whole
    or split (the old decoder checked them against the previous announcement when they came in one read)."""
    enc = LineEncoder()
    return enc.encode_all(
        [
            Announce(1, 1_000_000, 32, 8, "EIGHT"),
            Edges.of([(6, 1, 0x10)]),
            Announce(1, 1_000_000, 16, 4, "FOUR"),
            Edges.of([(6, 0, 0x20), (1, 1, 0x30)]),
            Beat(0x40, 3, 0),
            Announce(1, 1_000_000, 32, 8, "EIGHT"),
            Edges.of([(6, 0, 0x1_0000_0000 - 1)]),
        ]
    )


def decode_split(data: bytes, cuts: list[int]) -> tuple[list, Decoder]:
    dec = Decoder()
    out: list = []
    prev = 0
    for c in sorted(set(cuts)) + [len(data)]:
        out += dec.feed(data[prev:c])
        prev = c
    return out, dec


def _outcome(out: list, dec: Decoder) -> tuple:
    c = dec.counters
    return flatten(out, keep_gaps=True), c.faults, c.fault_bytes, c.unknown, c.edges, c.frames_lost, c.records


def test_an_announcement_applies_from_the_next_line_in_any_split():
    data = _announcements_change_context_mid_buffer()
    whole = _outcome(*decode_split(data, []))
    assert ("E", 6, 0, 0x20) not in whole[0] and ("E", 1, 1, 0x30) in whole[0]
    for cut in range(1, len(data)):
        assert _outcome(*decode_split(data, [cut])) == whole, cut


def _stream(seed: int, form: str, version: int) -> bytes:
    rng = random.Random(seed)
    enc = LineEncoder() if form == "line" else PackedEncoder(max_edges=rng.randint(1, 8))
    parts = []
    for k in range(3):
        bits, chans = rng.choice([(16, 4), (32, 8), (64, 16)])
        recs = [Announce(version, 1_000_000, bits, chans, f"B{k}")]
        t = rng.randrange(0, 2**bits)
        for i in range(rng.randint(2, 12)):
            t = (t + rng.randint(1, 70_000)) % 2**bits
            ch = rng.randrange(16)
            if version >= 2:
                recs.append(Drive(min(ch, chans - 1), i % 2, t, i))
                recs.append(Beat(t, i, 0, 1, ((0, i),)))
            else:
                recs.append(Drive(min(ch, chans - 1), i % 2, t))
            recs.append(Edges.of([(ch, i % 2, t)]))  # channel may be out of range: a range fault
        part = enc.encode_all(recs[:1]) + b"".join(_safe(enc, r) for r in recs[1:])
        if version >= 2:  # each life after a reset starts clean (0x00 or an empty line)...
            part = (b"\0" if form == "packed" else b"\r\n") + part
        if k < 2 and rng.random() < 0.5:  # ...and the reset may have cut the last record of the one before
            part = part[: len(part) - rng.randint(1, 6)]
        parts.append(part)
    return b"".join(parts)


def _safe(enc, rec) -> bytes:
    try:
        return enc.encode(rec)
    except Exception:  # an edge on a channel the encoder would refuse: left out
        return b""


@settings(max_examples=400, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    st.integers(0, 10_000),
    st.sampled_from(["line", "packed"]),
    st.sampled_from([1, 2]),
    st.lists(
        st.tuples(st.integers(0, 10**6), st.sampled_from(["drop", "flip", "insert"]), st.integers(0, 255)),
        max_size=8,
    ),
    st.lists(st.integers(0, 10**6), max_size=12),
)
def test_results_never_depend_on_how_the_bytes_are_split(seed, form, version, mutations, cuts):
    data = bytearray(_stream(seed, form, version))
    for where, how, value in mutations:
        i = where % len(data)
        if how == "drop":
            del data[i]
        elif how == "flip":
            data[i] ^= value or 1
        else:
            data.insert(i, value)
    data = bytes(data)
    whole = _outcome(*decode_split(data, []))
    assert _outcome(*decode_split(data, [c % (len(data) + 1) for c in cuts])) == whole
    assert _outcome(*decode_split(data, list(range(1, len(data), 7)))) == whole

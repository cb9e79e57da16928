"""The decoder: chunking does not matter, damage is counted and skipped, it never raises or hangs."""

from __future__ import annotations

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
    Fault,
    LineEncoder,
    Notice,
    PackedEncoder,
    Pong,
    SequenceGap,
    Unknown,
    cobs_encode,
    crc32,
)

ANNOUNCE = Announce(1, 1_000_000, 32, 8, "AVR8-REF-01")


def sample_stream(n_cycles: int = 20, seed: int = 1) -> list:
    """Drive, bounce edges, beats: the shape of a cycling bench (values made up for the test)."""
    rng = np.random.default_rng(seed)
    recs: list = [ANNOUNCE]
    t = 1000
    captured = 0
    for i in range(n_cycles):
        ch = i % 4
        recs.append(Drive(ch, i % 2, t))
        k = int(rng.integers(1, 9)) | 1
        ticks = t + 3000 + np.cumsum(rng.integers(5, 400, k))
        recs.append(Edges.of([(ch, (j + 1 + i) % 2, int(x)) for j, x in enumerate(ticks)]))
        captured += k
        t = int(ticks[-1]) + 20000
        if i % 5 == 4:
            recs.append(Beat(t, captured, 0))
    recs.append(Notice("end of test stream"))
    recs.append(Pong(7))
    return recs


def decode_chunks(data: bytes, sizes) -> tuple[list, Decoder]:
    dec = Decoder()
    out: list = []
    i = 0
    for size in sizes:
        if i >= len(data):
            break
        out += dec.feed(data[i : i + size])
        i += size
    out += dec.feed(data[i:])
    return out, dec


@pytest.mark.parametrize("encoder", [LineEncoder, PackedEncoder])
def test_whole_bytewise_and_garbage_give_the_same_records(encoder):
    recs = sample_stream()
    data = encoder().encode_all(recs)
    expected = flatten(recs)
    whole, dec = decode_chunks(data, [])
    assert flatten(whole) == expected and dec.counters.faults == 0
    bytewise, dec1 = decode_chunks(data, [1] * len(data))
    assert flatten(bytewise) == expected
    assert dec1.counters.edges == dec.counters.edges
    rnd = random.Random(5)
    chunked, _ = decode_chunks(data, [rnd.randint(1, 300) for _ in range(len(data))])
    assert flatten(chunked) == expected
    # leading garbage ends at a terminator of the form (a bare 0x00 or a newline): nothing is lost
    lead = b"\xfe\x01junk\x7f" + (b"\0" if encoder is PackedEncoder else b"\n")
    trail = b"\x99\x88 trailing junk with no end"
    out, dec2 = decode_chunks(lead + data + trail, [])
    assert flatten(out) == expected
    assert dec2.counters.fault_bytes == len(lead)  # the trailing piece is still waiting for its end
    out_b, dec3 = decode_chunks(lead + data + trail, [1] * 10_000)
    assert flatten(out_b) == expected
    assert dec3.counters.fault_bytes == len(lead)


def test_consecutive_edges_come_as_one_batch():
    enc = PackedEncoder(max_edges=4)
    batch = Edges.of([(1, i % 2, 100 * i) for i in range(40)])
    out = Decoder().feed(enc.encode(ANNOUNCE) + enc.encode(batch))
    assert [type(r).__name__ for r in out] == ["Announce", "Edges"]
    assert out[1] == batch
    text = LineEncoder().encode_all([ANNOUNCE, batch, Beat(5000, 40, 0), batch])
    out = Decoder().feed(text)
    assert [type(r).__name__ for r in out] == ["Announce", "Edges", "Beat", "Edges"]


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(st.binary(max_size=400), max_size=12))
def test_never_raises_on_arbitrary_bytes(chunks):
    dec = Decoder()
    for c in chunks:
        for rec in dec.feed(c):
            assert isinstance(
                rec, Announce | Edges | Drive | Beat | Notice | Pong | Unknown | Fault | SequenceGap
            )
    assert len(dec._buf) <= 1100  # bounded: at most one unfinished unit is kept


@settings(max_examples=150, deadline=None)
@given(st.binary(min_size=1, max_size=3000), st.sampled_from([LineEncoder, PackedEncoder]))
def test_arbitrary_bytes_around_a_valid_stream(noise, encoder):
    data = encoder().encode_all(sample_stream(5))
    dec = Decoder()
    dec.feed(noise)
    dec.feed(data)
    dec.feed(noise[::-1])  # terminates; the counters add up
    c = dec.counters
    assert c.bytes_in == 2 * len(noise) + len(data)
    assert c.fault_bytes <= c.bytes_in


@pytest.mark.parametrize("size", [10_000, 200_000])
def test_long_runs_without_terminators_are_bounded(size):
    dec = Decoder()
    for _ in range(5):
        dec.feed(b"\x55" * size)  # no 0x00, no newline, ever
    assert len(dec._buf) <= 1100
    assert dec.counters.faults >= 1


# -- damage with frame-level bookkeeping -------------------------------------------------------------------


def frames_of(records: list, max_edges: int = 8) -> list[tuple[bytes, list]]:
    """Encode record by record, keeping which records each frame carries."""
    enc = PackedEncoder(max_edges=max_edges)
    frames = []
    for rec in records:
        data = enc.encode(rec)
        pieces = data.split(b"\0")[:-1]
        if isinstance(rec, Edges):
            starts = list(enc.frame_starts(rec)) + [len(rec)]
            for p, s, e in zip(pieces, starts[:-1], starts[1:], strict=True):
                frames.append((p + b"\0", [Edges(rec.channel[s:e], rec.level[s:e], rec.tick[s:e])]))
        else:
            frames.append((pieces[0] + b"\0", [rec]))
    return frames


@settings(max_examples=200, deadline=None)
@given(
    st.integers(0, 2**31),
    st.lists(st.tuples(st.integers(1, 40), st.sampled_from(["flip", "drop", "insert"])), max_size=6),
)
def test_random_damage_loses_exactly_the_damaged_frames(seed, damage):
    frames = frames_of(sample_stream(12, seed=seed % 1000))
    rnd = random.Random(seed)
    damaged: set[int] = set()
    out = bytearray()
    for i, (frame, _) in enumerate(frames):
        f = bytearray(frame)
        for j, kind in damage:
            if j % len(frames) != i or i == 0:  # the announcement stays intact: it sets the counter
                continue
            pos = rnd.randrange(len(f))
            if kind == "flip":
                f[pos] ^= rnd.randrange(1, 256)
            elif kind == "drop":
                del f[pos]
            else:
                f.insert(pos, rnd.randrange(256))
        # still decodable when the frame's bytes survive whole between delimiters (an insert and a drop
        # can cancel out; an inserted 0x00 beside a delimiter is only an idle delimiter)
        if f[-1:] != b"\0":
            damaged.add(i)
            damaged.add(i + 1)  # the delimiter vanished: the next frame is hit too
        elif frame[:-1] not in bytes(f).split(b"\0")[:-1]:
            damaged.add(i)
        out += f
    intact = [i for i in range(len(frames)) if i not in damaged]
    expected = [r for i in intact for r in frames[i][1]]
    dec = Decoder()
    got = dec.feed(bytes(out))
    assert flatten(got) == flatten(expected)
    last_intact = max(intact)
    lost_before_last = sum(1 for i in damaged if i < last_intact)
    assert dec.counters.frames_lost == lost_before_last
    if lost_before_last:  # (damage to the very last delimiter leaves a piece waiting for its end)
        assert dec.counters.faults >= 1


def test_sequence_gap_reports_frames_lost():
    frames = frames_of([ANNOUNCE, Pong(1), Pong(2), Pong(3), Pong(4)])
    data = frames[0][0] + frames[1][0] + frames[4][0]
    out = Decoder().feed(data)
    gaps = [r for r in out if isinstance(r, SequenceGap)]
    assert gaps == [SequenceGap(expected=2, received=4, frames_lost=2)]
    assert [r for r in out if isinstance(r, Pong)] == [Pong(1), Pong(4)]


def _frame(kind: int, seq: int, payload: bytes) -> bytes:
    raw = bytes([kind, seq & 0xFF, seq >> 8]) + payload
    return cobs_encode(raw + crc32(raw).to_bytes(4, "little")) + b"\0"


def test_unknown_types_are_counted_and_lengths_follow_the_version():
    v1 = _frame(0x10, 0, b"\x01" + (10**6).to_bytes(4, "little") + b"\x20\x08" + b"BRD")
    unknown = _frame(0x42, 1, b"future")
    long_pong = _frame(0x05, 2, b"\x07\x00\xaa")  # extra trailing byte: a fault under version 1
    dec = Decoder()
    out = dec.feed(v1 + unknown + long_pong)
    assert Unknown("0x42") in out
    assert dec.counters.unknown == 1
    assert dec.counters.by_reason == {"payload length": 1}
    v2 = _frame(0x10, 3, b"\x02" + (10**6).to_bytes(4, "little") + b"\x20\x08" + b"BRD")
    out = dec.feed(v2 + _frame(0x05, 4, b"\x07\x00\xaa"))
    assert out[-1] == Pong(7)  # version 2: extra payload bytes are ignored


def test_absurd_values_are_faults():
    dec = Decoder()
    dec.feed(b"A 1 1000000 16 4 SMALL\n")  # a minimal version 1 port: no checksums
    out = dec.feed(b"E 9 1 0010\nE 1 1 10000\nE 1 1 00ff\nB 0010 4294967296 0\n")
    assert flatten(out) == [("E", 1, 1, 0xFF)]
    assert dec.counters.by_reason.get("value out of range") == 3


def test_line_rules_from_the_protocol():
    dec = Decoder()
    dec.feed(b"A 1 1000000 32 8 AVR8-REF-01\n")  # version 1 without checksums
    lines = [
        b"E 1 1 0a\r\n",  # \r before \n is ignored; checksum optional; 1-16 digits
        b"E 1 1 0000000b*37\r\n",  # a checksum and \r\n
        b"E 1 0 0000000b*37\r\n",  # the same checksum on a changed line: fault
        b"E 1 0 ABCDEF01*62\n",  # uppercase hex
        b"E 1 1 00000000000000001*54\n",  # 17 digits: fault
        b"X anything at all*06\n",  # unknown letter: skipped and counted
        b"7 not a letter*1d\n",  # fault
        b"N " + b"n" * 121 + b"*00\n",  # notice too long: fault
        b"E  1 1 0a*14\n",  # two spaces: fault
        b"E 1 1 0a" + b" " * 160 + b"\n",  # longer than 160 bytes: fault
        b"E 1 1 0c\n",  # no checksum after lines that carried one: fault (the dropped-'*' case)
    ]
    out = dec.feed(b"".join(lines))
    assert flatten(out) == [("E", 1, 1, 0x0A), ("E", 1, 1, 0x0B), ("E", 1, 0, 0xABCDEF01), ("Unknown", "X")]
    assert dec.counters.faults == 7
    assert dec.counters.by_reason["checksum missing"] == 1
    assert dec.counters.unknown == 1


def test_form_is_detected_and_followed_after_a_restart():
    line = LineEncoder().encode_all(sample_stream(10))
    packed = PackedEncoder().encode_all(sample_stream(200, seed=2))
    dec = Decoder()
    out = dec.feed(line)
    assert dec.form == "line" and flatten(out) == flatten(sample_stream(10))
    out = dec.feed(packed)  # the sampler restarted in the packed form
    assert dec.form == "packed"
    got = flatten(out)
    tail = flatten(sample_stream(200, seed=2))
    # at most the first 4 KiB or 64 records are lost while the decoder notices the change
    assert got and tail[-len(got) :] == got
    assert dec.counters.fault_bytes <= 4096 + 1100
    # and back to the line form
    out = dec.feed(line * 8)  # no 0x00 at all: given up after 4 KiB, then detected
    assert dec.form == "line" and flatten(out)[-5:] == flatten(sample_stream(10))[-5:]


def test_undecided_bytes_before_the_first_record_are_faults():
    dec = Decoder()
    out = dec.feed(b"\x01\x02\x03 power-on noise\r\n" + LineEncoder().encode(ANNOUNCE))
    assert isinstance(out[0], Fault) and out[0].reason == "before first record"
    assert out[1] == ANNOUNCE


@pytest.mark.parametrize("sizes", [[10**6], [1] * 64])
def test_delimiters_ahead_of_the_first_frame_are_not_faults(sizes):
    # COBS framing: a 0x00 delimiter ends a frame, and a sender may send one first to mark where
    # frames start (Cheshire and Baker, "Consistent Overhead Byte Stuffing", IEEE/ACM Transactions
    # on Networking 7(2), 1999). A packed recording starts that way; an empty frame is not noise.
    data = b"\x00\x00" + PackedEncoder().encode(ANNOUNCE) + PackedEncoder().encode(Pong(3))
    out, dec = decode_chunks(data, sizes)
    assert dec.form == "packed" and dec.counters.faults == 0
    assert out[0] == ANNOUNCE and not any(isinstance(r, Fault) for r in out)
    # noise ahead of them still is, and counts only the noise bytes
    out = Decoder().feed(b"\x00\x01\x02\x00" + PackedEncoder().encode(ANNOUNCE))
    assert isinstance(out[0], Fault) and out[0].nbytes == 3


@pytest.mark.parametrize("first, second, asked", [("line", "packed", "packed"), ("packed", "line", "line")])
def test_a_requested_form_switch_loses_no_record(first, second, asked):
    # docs/protocol.md: FORM L / FORM P switch the sampler's form mid-stream; the host is told.
    encoders = {"line": LineEncoder(), "packed": PackedEncoder()}
    before = sample_stream(6, seed=3)
    after = sample_stream(6, seed=4)[1:]  # no new announcement: the sampler did not restart
    dec = Decoder()
    got = dec.feed(b"".join(encoders[first].encode(r) for r in before))
    dec.expect_form(asked)
    encoders[second].encode(ANNOUNCE)  # the sampler's encoder knows its counter width
    got_after = dec.feed(b"".join(encoders[second].encode(r) for r in after))
    assert flatten(got) == flatten(before)
    assert flatten([r for r in got_after if not isinstance(r, Fault)]) == flatten(after)
    assert dec.form == second


def test_without_the_request_the_old_form_holds_on_for_a_while():
    dec = Decoder()
    dec.feed(b"".join(LineEncoder().encode(r) for r in sample_stream(3)))
    packed = PackedEncoder()
    packed.encode(ANNOUNCE)
    out = dec.feed(b"".join(packed.encode(r) for r in sample_stream(3)[1:]))
    assert flatten(out) == [] and dec.form == "line"  # held as one unfinished line, nothing decoded

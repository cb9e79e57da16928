"""Large reads (a capture file) are decoded all at once with numpy: COBS by following every frame's chain
of code bytes together, CRC-32 checked for a whole run with two zlib calls. The records must be those
the frame-at-a-time path gives (small reads, as from a port), clean or damaged, and the pieces must
agree with the reference libraries: the `cobs` package (Cheshire and Baker's algorithm) and zlib."""

from __future__ import annotations

import zlib

import numpy as np
import pytest
from cobs import cobs

from benchlog.wire import (
    Announce,
    Beat,
    Block,
    Decoder,
    Drive,
    Edges,
    Fault,
    LineEncoder,
    Notice,
    PackedEncoder,
)
from benchlog.wire._decoder import BULK_BYTES
from benchlog.wire._framing import _decode_joined, cobs_decode_spans, crc32_all_valid


@pytest.mark.parametrize("longest", [700, 250], ids=["long frames", "frames under 254 bytes"])
def test_cobs_spans_agree_with_the_cobs_package(longest):
    # frames under 254 bytes hold no 0xFF block: the decoder skips looking for one after it
    rng = np.random.default_rng(1)
    for _ in range(200):
        segments = []
        for _ in range(int(rng.integers(1, 30))):
            raw = bytes(
                rng.integers(0, 3 if rng.random() < 0.5 else 256, int(rng.integers(0, longest)), np.uint8)
            )
            enc = bytearray(cobs.encode(raw))
            if rng.random() < 0.3 and len(enc) > 1:  # a damaged code or data byte (0xFF among them)
                enc[int(rng.integers(len(enc)))] = int(rng.choice([255, int(rng.integers(1, 256))]))
            if rng.random() < 0.1 and len(enc) > 1:
                del enc[-1]
            segments.append(bytes(enc))
        buf = b"\0".join(segments) + b"\0"
        a = np.frombuffer(buf, np.uint8)
        z = np.flatnonzero(a == 0)
        starts, ends = np.r_[0, z[:-1] + 1], z
        used = ends > starts
        if rng.random() < 0.5:  # some spans left out (else the spans cover the buffer: another path)
            used &= rng.random(len(ends)) < 0.9
        starts, ends = starts[used], ends[used]
        ok, decoded, first, length = cobs_decode_spans(a, starts, ends)
        for k, (s, e) in enumerate(zip(starts.tolist(), ends.tolist(), strict=True)):
            try:
                want = cobs.decode(buf[s:e])  # the reference implementation
            except cobs.DecodeError:
                assert not ok[k]
                continue
            assert ok[k] and bytes(decoded[first[k] : first[k] + length[k]]) == want


def test_spans_decoded_joined_are_the_cobs_packages_frames_and_any_bad_one_is_left_to_the_chains():
    # the cobs package, frame by frame, is the reference; frames under 254 bytes (no 0xFF block), and
    # damage that is never 0xFF, so the joined decoding applies exactly when every frame decodes alone
    rng = np.random.default_rng(3)
    joined = 0
    for trial in range(400):
        segments = []
        for _ in range(int(rng.integers(1, 40))):
            raw = bytes(
                rng.integers(0, 3 if rng.random() < 0.5 else 256, int(rng.integers(0, 250)), np.uint8)
            )
            segments.append(bytearray(cobs.encode(raw)))
        if trial % 2:  # one damaged byte in one frame: a code byte moved, or a data byte changed
            f = segments[int(rng.integers(len(segments)))]
            f[int(rng.integers(len(f)))] = int(rng.integers(1, 255))
        buf = b"\0".join(bytes(f) for f in segments) + b"\0"
        a = np.frombuffer(buf, np.uint8)
        z = np.flatnonzero(a == 0)
        starts, ends = np.r_[0, z[:-1] + 1], z
        want = []
        for s, e in zip(starts.tolist(), ends.tolist(), strict=True):
            try:
                want.append(cobs.decode(buf[s:e]))
            except cobs.DecodeError:
                want.append(None)
        got = _decode_joined(a, starts, ends)
        assert (got is None) == (None in want)
        if got is None:
            continue
        joined += 1
        ok, decoded, first, length = got
        assert ok.all()
        assert [bytes(decoded[f : f + n]) for f, n in zip(first, length, strict=True)] == want
    assert joined > 200


def test_one_crc_over_many_frames_agrees_with_a_crc_per_frame():
    rng = np.random.default_rng(2)
    for trial in range(300):
        frames = []
        for _ in range(int(rng.integers(1, 20))):
            body = bytes(rng.integers(0, 256, int(rng.integers(3, 1020)), np.uint8))
            frames.append(bytearray(body + zlib.crc32(body).to_bytes(4, "little")))
        for _ in range(trial % 3):  # no, one or two damaged frames
            f = frames[int(rng.integers(len(frames)))]
            f[int(rng.integers(len(f)))] ^= int(rng.integers(1, 256))
        # zlib as the reference: every frame checked on its own
        each = all(zlib.crc32(f[:-4]) == int.from_bytes(f[-4:], "little") for f in frames)
        lengths = np.array([len(f) for f in frames])
        joined = np.frombuffer(b"".join(frames), np.uint8)
        assert crc32_all_valid(joined, lengths) == each
        # one 0x00 between frames (as the joined COBS decoding leaves them), frames found at their starts
        spaced = np.frombuffer(b"\0".join(frames), np.uint8)
        assert crc32_all_valid(spaced, lengths, np.cumsum(lengths + 1) - (lengths + 1)) == each


def stream(form: str, seed: int) -> bytes:
    """A sampler's output of well over BULK_BYTES: announcements (the second changes the counter width),
    edge batches, drives with and without the cycle, beats of both versions, notices."""
    rng = np.random.default_rng(seed)
    enc = PackedEncoder(255, 32) if form == "packed" else LineEncoder(8, 32)
    out = [enc.encode(Announce(2, 1_000_000, 32, 8, "BULK-TEST"))]
    tick = 0
    count = 1500 if form == "packed" else 500
    for i in range(count):
        if i == count * 3 // 5:
            out.append(enc.encode(Announce(2, 1_000_000, 24, 8, "BULK-TEST")))
            tick = 0
        bits = 32 if i < count * 3 // 5 else 24
        n = int(rng.integers(1, 300))
        ticks = tick + np.cumsum(rng.integers(1, 3000, n))
        tick = int(ticks[-1])
        wrap = (1 << bits) - 1
        out.append(
            enc.encode(
                Edges(
                    rng.integers(0, 8, n).astype(np.uint8),
                    rng.integers(0, 2, n).astype(np.uint8),
                    ticks & wrap,
                )
            )
        )
        ch = int(rng.integers(0, 8))
        out.append(enc.encode(Drive(ch, i % 2, (tick + 5) & wrap, i if i % 3 else None)))
        tick += 10
        if i % 7 == 0:
            out.append(
                enc.encode(Beat(tick & wrap, i * 100, 0) if i % 2 else Beat(tick & wrap, i, 1, 0, ((0, i),)))
            )
        if i % 500 == 0:
            out.append(enc.encode(Notice(f"notice {i}")))
    return b"".join(out)


def damaged(data: bytes, seed: int, rate: float) -> bytes:
    rng = np.random.default_rng(seed)
    b = bytearray(data)
    for i in rng.integers(0, len(b), int(len(b) * rate)).tolist():
        b[i] ^= 1 << int(rng.integers(8))
    del b[len(b) // 3 : len(b) // 3 + 5000]  # frames lost on the way
    return bytes(b)


def decode(data: bytes, read: int, blocks: bool = False):
    dec = Decoder()
    out = []
    for i in range(0, len(data), read):
        out += dec.feed(data[i : i + read], blocks=blocks)
    return out, dec.counters


def joined(records: list) -> list:
    """Records with blocks expanded, adjacent edge batches and like faults joined (where a read ends
    splits them)."""
    out: list = []
    for rec in records:
        for r in rec.expand() if isinstance(rec, Block) else [rec]:
            if isinstance(r, Edges) and out and isinstance(out[-1], Edges):
                p = out[-1]
                r = Edges(
                    *(np.concatenate((getattr(p, f), getattr(r, f))) for f in ("channel", "level", "tick"))
                )
                out[-1] = r
            elif isinstance(r, Fault) and out and isinstance(out[-1], Fault) and out[-1].reason == r.reason:
                out[-1] = Fault(r.reason, out[-1].nbytes + r.nbytes, out[-1].units + r.units)
            else:
                out.append(r)
    return out


@pytest.mark.parametrize("form", ["packed", "line"])
@pytest.mark.parametrize("rate", [0.0, 1e-3])
def test_large_reads_give_the_records_small_reads_give(form, rate):
    data = stream(form, 3)
    if rate:
        data = damaged(data, 4, rate)
    assert len(data) > 2 * BULK_BYTES
    small, small_counts = decode(data, 4093)  # every read below BULK_BYTES: one frame at a time
    want = joined(small)
    assert sum(isinstance(r, Drive) for r in want) > 300
    for read in (len(data), BULK_BYTES + 12_345):
        got, counts = decode(data, read)
        assert counts == small_counts
        assert joined(got) == want
        blocks, _ = decode(data, read, blocks=True)
        assert any(isinstance(r, Block) for r in blocks)
        assert joined(blocks) == want


def test_version_1_lines_with_beats_decode_to_the_records_sent():
    # a clean version 1 line stream (edges, drives, beats): every line a fast edge or drive line or a
    # beat, read as one block per read; the records sent are the reference
    rng = np.random.default_rng(8)
    enc = LineEncoder(8, 32)
    sent: list = [Announce(1, 1_000_000, 32, 8, "BEATS-V1")]
    tick = 0
    for i in range(400):
        n = int(rng.integers(1, 40))
        ticks = tick + np.cumsum(rng.integers(1, 3000, n))
        tick = int(ticks[-1])
        edges = Edges(rng.integers(0, 8, n).astype(np.uint8), rng.integers(0, 2, n).astype(np.uint8), ticks)
        sent += [edges, Drive(int(rng.integers(0, 8)), i % 2, tick + 5)]
        tick += 10
        if i % 3 == 0:
            sent.append(Beat(tick, i * 10, i // 50))
    data = b"".join(enc.encode(r) for r in sent)
    for read in (len(data), 65_537, 4_099):
        blocks, counts = decode(data, read, blocks=True)
        assert any(isinstance(r, Block) and len(r.captured) for r in blocks)
        assert joined(blocks) == joined(sent)
        assert counts.records == len(data.splitlines()) and counts.faults == 0

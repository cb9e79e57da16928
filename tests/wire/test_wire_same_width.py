"""Edge and drive lines of one width (a sampler writes fixed-width ticks) are read as a matrix, one byte
position of every line at a time. Whatever the bytes, that way must accept exactly the lines, and give
exactly the values, that reading each field of each line on its own gives, and every line it accepts
must be the record the one-line parser (`parse_line`) makes of it. Version 1 beats are read by one
regular expression each: every beat it takes must be `parse_line`'s."""

from __future__ import annotations

import numpy as np
import pytest

from benchlog.wire import Beat, Drive, Edges
from benchlog.wire._decoder import _line_lines
from benchlog.wire._lineform import (
    CHECK_CRC,
    CHECK_NONE,
    CHECK_XOR,
    LineContext,
    _same_layout_beats,
    fast_edge_lines,
    line_check,
    parse_line,
    quick_beats,
)


def _xor_line(body: bytes) -> bytes:
    x = 0
    for b in body:
        x ^= b
    return b"%s*%02x" % (body, x)


def _block(rng: np.random.Generator, digits: int, check: int, crlf: str, upper: bool) -> bytes:
    """Edge and drive lines of one width with one check, a few with a byte changed (same width), and
    beats and notices between them (other widths, not candidates)."""
    lines = []
    for _ in range(int(rng.integers(2, 400))):
        code = b"D" if rng.random() < 0.15 else b"E"
        tick = int(rng.integers(0, 1 << min(4 * digits, 63)))
        text = b"%s %x %d %0*x" % (code, int(rng.integers(0, 16)), int(rng.integers(0, 2)), digits, tick)
        if upper:
            text = text.upper()
        if check == CHECK_XOR:
            line = _xor_line(text)
        elif check == CHECK_CRC:
            line = text + line_check(text)
        else:
            line = text
        if rng.random() < 0.08:  # a damaged byte: any value but a line end
            b = bytearray(line)
            b[int(rng.integers(len(b)))] = int(rng.choice([v for v in range(256) if v not in (10, 13)]))
            line = bytes(b)
        lines.append(line)
        if rng.random() < 0.02:
            lines.append(_xor_line(b"B %08x 12 0" % tick))
        if rng.random() < 0.01:
            lines.append(b"N hello")
    end = {"lf": [b"\n"], "crlf": [b"\r\n"], "mixed": [b"\n", b"\r\n"]}[crlf]
    return b"".join(line + end[int(rng.integers(len(end)))] for line in lines)


def _context(rng: np.random.Generator) -> LineContext:
    ctx = LineContext()
    ctx.version = int(rng.choice([1, 2, 3]))
    ctx.channels = int(rng.choice([4, 8, 16]))
    ctx.counter_bits = int(rng.choice([16, 24, 32, 64]))
    ctx.check_level = int(rng.choice([CHECK_NONE, CHECK_XOR, CHECK_CRC]))
    return ctx


@pytest.mark.parametrize("seed", range(6))
def test_one_width_lines_read_as_a_matrix_agree_with_each_field_read_alone(seed):
    rng = np.random.default_rng(seed)
    seen_same_width = 0
    accepted = 0
    for _ in range(250):
        digits = int(rng.choice([1, 3, 4, 7, 8, 16]))
        check = int(rng.choice([CHECK_NONE, CHECK_XOR, CHECK_CRC]))
        body = _block(rng, digits, check, str(rng.choice(["lf", "crlf", "mixed"])), rng.random() < 0.2)
        ctx = _context(rng)
        a = np.frombuffer(body, np.uint8)
        nl, starts, ends = _line_lines(a)
        got = fast_edge_lines(a, starts, ends, nl, ctx)
        want = fast_edge_lines(a, starts, ends, nl, ctx, same_width=False)
        for g, w in zip(got, want, strict=True):
            np.testing.assert_array_equal(g, w)
            assert g.dtype == w.dtype
        widths = (ends - starts)[np.isin(a[starts], (0x44, 0x45))]
        seen_same_width += bool(len(widths) >= 2 and (widths == widths[0]).all())
        # every accepted line is what the one-line parser makes of it
        rows, is_drive, channel, level, tick, kind = got
        accepted += len(rows)
        for k, j in enumerate(rows.tolist()):
            rec, strength = parse_line(body[starts[j] : ends[j]], ctx)
            assert strength == kind[k]
            if is_drive[k]:
                assert rec == Drive(int(channel[k]), int(level[k]), int(tick[k]))
            else:
                assert isinstance(rec, Edges)
                assert (int(rec.channel[0]), int(rec.level[0]), int(rec.tick[0])) == (
                    int(channel[k]),
                    int(level[k]),
                    int(tick[k]),
                )
    assert seen_same_width > 100 and accepted > 1000  # the matrix path was exercised, and accepted lines


def _beat_line(rng: np.random.Generator) -> bytes:
    tick = int(rng.integers(0, 1 << 40)) >> int(rng.integers(0, 40))
    cap = int(rng.integers(0, 1 << 33)) >> int(rng.integers(0, 33))
    drop = int(rng.integers(0, 1 << 33)) >> int(rng.integers(0, 33))
    text = b"B %0*x %d %d" % (int(rng.choice([1, 4, 8, 16, 17])), tick, cap, drop)
    if rng.random() < 0.1:
        text += b" 3 1:2"  # a version 2 beat's fields
    if rng.random() < 0.1:
        text = text.upper()
    r = rng.random()
    line = _xor_line(text) if r < 0.6 else text + line_check(text) if r < 0.8 else text
    if rng.random() < 0.15:
        b = bytearray(line)
        b[int(rng.integers(len(b)))] = int(rng.choice([v for v in range(256) if v not in (10, 13)]))
        line = bytes(b)
    return line


def test_beats_read_by_one_expression_are_the_one_line_parsers_beats():
    rng = np.random.default_rng(7)
    taken = 0
    for _ in range(300):
        body = b"".join(_beat_line(rng) + (b"\r\n" if rng.random() < 0.3 else b"\n") for _ in range(40))
        ctx = _context(rng)
        got, _, _, rest = _quick_beats_checked(body, ctx)
        taken += len(got)
        for rec, strength, line in rest:
            if ctx.version == 1 and isinstance(rec, Beat) and b"*" in line:
                # only a version 2 check (which parse_line reads) may leave a good beat to it
                assert strength == CHECK_CRC
    assert taken > 500


def _quick_beats_checked(body: bytes, ctx: LineContext):
    """`quick_beats` over every line of `body`, each beat it takes checked against `parse_line` (the
    one-line reader, the reference); returns its beats, the lines' bounds, and (record, check strength,
    line) as `parse_line` reads each line it left."""
    a = np.frombuffer(body, np.uint8)
    _, starts, ends = _line_lines(a)
    got = quick_beats(body, starts, ends, list(range(len(starts))), ctx)
    rest = []
    for j in range(len(starts)):
        line = body[starts[j] : ends[j]]
        rec, strength = parse_line(line, ctx)
        if j in got:
            tick, captured, dropped, kind = got[j]
            assert rec == Beat(tick, captured, dropped) and strength == kind
        else:
            rest.append((rec, strength, line))
    return got, starts, ends, rest


def _same_layout_beats_block(rng: np.random.Generator) -> bytes:
    """Beats as one sampler writes them (one tick width, counts mostly of one width, one check), some
    with a byte changed, a field widened or the check dropped, and edge lines between them."""
    tick_digits = int(rng.choice([1, 4, 8, 16]))
    checked = rng.random() < 0.7
    upper = rng.random() < 0.2
    lines = []
    for _ in range(int(rng.integers(1, 120))):
        if rng.random() < 0.3:
            lines.append(_xor_line(b"E 1 0 %0*x" % (tick_digits, int(rng.integers(0, 1 << 16)))))
            continue
        tick = int(rng.integers(0, 1 << min(4 * tick_digits, 63)))
        cap = int(rng.integers(10**5, 10**6)) if rng.random() < 0.9 else int(rng.integers(0, 1 << 33))
        drop = 0 if rng.random() < 0.9 else int(rng.integers(0, 1 << 33))
        text = b"B %0*x %d %d" % (tick_digits, tick, cap, drop)
        text = text.upper() if upper else text
        line = _xor_line(text) if checked ^ (rng.random() < 0.05) else text
        if rng.random() < 0.1:
            b = bytearray(line)
            b[int(rng.integers(len(b)))] = int(rng.choice([v for v in range(256) if v not in (10, 13)]))
            line = bytes(b)
        lines.append(line)
    return b"".join(line + b"\n" for line in lines)


@pytest.mark.parametrize("seed", range(4))
def test_beats_read_column_by_column_are_the_one_line_parsers_beats_in_line_order(seed):
    # the reference is parse_line, one line at a time; the column-wise reading takes the beats that share
    # the most common layout, the rest go through the regular expression
    rng = np.random.default_rng(100 + seed)
    taken = 0
    for _ in range(150):
        body = _same_layout_beats_block(rng)
        ctx = _context(rng)
        ctx.version = 1
        got, starts, ends, rest = _quick_beats_checked(body, ctx)
        assert list(got) == sorted(got)  # line order: the caller lays the beats out in it
        assert not any(isinstance(rec, Beat) for rec, _, _ in rest)
        by_columns: dict = {}
        _same_layout_beats(body, starts, ends, list(range(len(starts))), ctx, by_columns)
        assert by_columns.items() <= got.items()
        taken += len(by_columns)
    assert taken > 1000  # the column-wise reading took most of the beats

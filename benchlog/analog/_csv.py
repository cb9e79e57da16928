"""A numeric CSV reader for oscilloscope and data-logger exports, vectorised over bytes.

How it works. The head of the file is sniffed with ordinary string code: the first line that is all
numbers (and the few after it agree) starts the data; the lines above are the header, of any number
and length, where column names and "interval" / "sample rate" / "start" entries are looked for. The
data is then read in chunks of whole lines. Each chunk goes through one `bytes.translate` (the field
delimiter becomes a space, a decimal comma a point). When every line of the chunk has one length and
its fields sit at the same places (the way instruments print), the chunk is a byte matrix and each
field a band of its columns: no token search at all. Otherwise numpy finds every token (a run of bytes
above the space character) and parses all tokens of one layout at once: tokens are grouped by length,
sign, and the position of the point and of the exponent, and each group is gathered into a fixed-width
byte matrix. Either way the digit columns become numbers by Horner's rule, a few numpy passes per
chunk, never a Python step per line or per number. Every line must have the same number of fields;
the first line that does not, or a field that is not a number, is named in a one-line DataError.

Values are correctly rounded when the mantissa has at most 15 significant digits and the decimal
exponent is within 10^22 (one exact product or quotient of exact doubles); longer mantissas are within
a few units in the last place.
"""

from __future__ import annotations

import re
from collections import deque
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view

from benchlog.errors import DataError

CHUNK_BYTES = 4 << 20
_HEAD_BYTES = 1 << 16
_NUM = re.compile(r"^[+-]?(\d+([.,]\d*)?|[.,]\d+)([eE][+-]?\d+)?$")
_POW10 = 10.0 ** np.arange(0, 309)
_SPECIAL = {"nan": np.nan, "+nan": np.nan, "-nan": np.nan, "inf": np.inf, "+inf": np.inf, "-inf": -np.inf}


@dataclass(frozen=True, slots=True)
class Layout:
    """What the sniffer found: where data starts and how its fields are written."""

    data_offset: int  # byte offset of the first data line
    first_line: int  # its line number, from 1
    delimiter: str  # "," ";" "\t" or " " (any run of blanks)
    decimal_comma: bool
    columns: int
    names: tuple[str, ...]  # from the header, or "" per column
    header: tuple[tuple[str, ...], ...]  # the header lines split into fields


def _split(line: str, delim: str) -> list[str]:
    if delim == " ":
        return line.split()
    return [f.strip().strip('"').strip() for f in line.split(delim)]


def _numeric(fields: list[str], decimal_comma: bool) -> bool:
    if not fields:
        return False
    for f in fields:
        if f.lower() in _SPECIAL:
            continue
        if not _NUM.match(f):
            return False
        if ("," in f) != decimal_comma and ("," in f or decimal_comma and "." in f):
            return False
    return True


def _line_layout(line: str) -> tuple[str, bool, int] | None:
    """(delimiter, decimal comma, fields) if the line is all numbers in some convention, else None."""
    text = line.strip()
    if not text:
        return None
    for delim, dec_comma in (
        (";", True),
        (";", False),
        ("\t", True),
        ("\t", False),
        (",", False),
        (" ", False),
    ):
        if delim != " " and delim not in text:
            continue
        fields = _split(text, delim)
        if fields and fields[-1] == "" and delim != " ":
            fields = fields[:-1]  # a trailing delimiter
        if _numeric(fields, dec_comma):
            return delim, dec_comma, len(fields)
    return None


def sniff(path: Path) -> Layout:
    """Find the header, the delimiter, the decimal mark and the column count."""
    try:
        with path.open("rb") as f:
            head = f.read(_HEAD_BYTES)
            # a long header: read on until a run of data lines is in view
            while len(head) < (64 << 20):
                if head.count(b"\n") > 8 and _find_data(head) is not None:
                    break
                more = f.read(len(head))
                if not more:
                    break
                head += more
    except OSError as exc:
        raise DataError(f"{path}: cannot read ({exc.strerror or exc})") from exc
    found = _find_data(head)
    if found is None:
        raise DataError(f"{path}: no lines of numbers found (is this a CSV export of a capture?)")
    return _layout(head, *found)


def _find_data(head: bytes) -> tuple[int, int, tuple[str, bool, int]] | None:
    """The first line written the way most number lines of the head are, with numbers after it."""
    text = head.decode("latin-1")
    lines = text.split("\n")
    complete = lines[:-1] if not head.endswith(b"\n") else lines
    layouts = [_line_layout(ln.rstrip("\r")) for ln in complete]
    seen = [lay for lay in layouts if lay is not None]
    if not seen:
        return None
    common = max(set(seen), key=seen.count)
    offset = 0
    for i, line in enumerate(complete):
        if layouts[i] == common:
            follow = [lay for ln, lay in zip(complete[i + 1 :], layouts[i + 1 :], strict=True) if ln.strip()]
            follow = follow[:5]
            if all(lay is not None and lay[0] == common[0] for lay in follow):
                return offset, i, common
        offset += len(line) + 1
    return None


def _header_fields(line: str, delim: str) -> list[str]:
    """A header line's fields: split on the data's delimiter (or any of , ; tab), then on : or =."""
    text = line.strip()
    parts = _split(text, delim) if delim != " " else [f.strip() for f in re.split(r"[,;\t]", text)]
    if len(parts) == 1:
        parts = [f.strip() for f in re.split(r"[:=]", text, maxsplit=1)]
    return parts


def _layout(head: bytes, offset: int, index: int, lay: tuple[str, bool, int]) -> Layout:
    delim, dec_comma, ncols = lay
    header_lines = head[:offset].decode("utf-8", errors="replace").splitlines()
    header = tuple(tuple(_header_fields(ln, delim)) for ln in header_lines)
    names: tuple[str, ...] = ("",) * ncols
    for fields in reversed(header):
        cells = [f for f in fields]
        if cells and cells[-1] == "" and len(cells) == ncols + 1:
            cells = cells[:-1]
        if len(cells) == ncols and not _numeric(cells, dec_comma):
            names = tuple(cells)
            break
    return Layout(offset, index + 1, delim, dec_comma, ncols, names, header)


def _table(layout: Layout) -> bytes:
    src, dst = b'"', b" "
    if layout.delimiter in ",;\t":
        src, dst = src + layout.delimiter.encode(), dst + b" "
    if layout.decimal_comma:
        src, dst = src + b",", dst + b"."
    return bytes.maketrans(src, dst)


def count_lines(path: Path, offset: int) -> int:
    """Lines from `offset` to the end (a last line without a newline counts)."""
    n = 0
    last = b"\n"
    with path.open("rb") as f:
        f.seek(offset)
        while block := f.read(CHUNK_BYTES):
            n += block.count(b"\n")
            last = block[-1:]
    return n + (last != b"\n")


def _chunks(path: Path, offset: int, first_line: int):
    """(bytes of whole lines, line number of the first, line breaks in it) in file order, CHUNK_BYTES at
    a time."""
    carry = b""
    line_no = first_line
    with path.open("rb") as f:
        f.seek(offset)
        while True:
            block = f.read(CHUNK_BYTES)
            data = carry + block
            if not data:
                return
            if block:
                cut = data.rfind(b"\n") + 1
                if cut == 0:  # one line longer than a chunk: read on
                    carry = data
                    continue
                data, carry = data[:cut], data[cut:]
            else:
                carry = b""
            breaks = data.count(b"\n")
            yield data, line_no, breaks
            line_no += breaks + (not data.endswith(b"\n"))
            if not block:
                return


def read_columns(path: Path, layout: Layout, keep: list[int], workers: int = 2) -> list[np.ndarray]:
    """The columns `keep` (indices) of the data, as float64 arrays.

    Chunks are parsed by `workers` threads (numpy releases the interpreter lock in its loops), at most
    `workers + 1` chunks in flight, and placed in file order."""
    rows_max = count_lines(path, layout.data_offset)
    out = [np.empty(rows_max, np.float64) for _ in keep]
    table = _table(layout)
    ncols = layout.columns
    row = 0

    def place(values: np.ndarray) -> None:
        nonlocal row
        n = len(values) // ncols
        if row + n > rows_max:
            raise DataError(f"{path}: the file changed while it was read")
        vals = values.reshape(n, ncols)
        for dst, col in zip(out, keep, strict=True):
            dst[row : row + n] = vals[:, col]
        row += n

    def parse(data: bytes, line_no: int, breaks: int) -> np.ndarray:
        text = data.translate(table)
        fixed = _fixed_rows(text, ncols, breaks)
        if fixed is not None:
            return fixed.reshape(-1)
        return _parse_chunk(text, ncols, path, line_no)[0]

    if workers <= 1:
        for data, line_no, breaks in _chunks(path, layout.data_offset, layout.first_line):
            place(parse(data, line_no, breaks))
    else:
        with ThreadPoolExecutor(max_workers=workers) as pool:
            pending: deque = deque()
            try:
                for data, line_no, breaks in _chunks(path, layout.data_offset, layout.first_line):
                    pending.append(pool.submit(parse, data, line_no, breaks))
                    if len(pending) > workers:
                        place(pending.popleft().result())
                while pending:
                    place(pending.popleft().result())
            finally:
                for fut in pending:
                    fut.cancel()
    return [a[:row] for a in out]


def _fixed_rows(data: bytes, ncols: int, breaks: int | None = None) -> np.ndarray | None:
    """The numbers of a chunk whose lines all have one length and one layout, as (rows, ncols); else None.

    Instruments print each column with a fixed format, so every line is the same bytes at the same
    places: the chunk is then a byte matrix, and each field a fixed band of its columns, parsed whole
    with no token search. A sign may sit in a column that is blank in other lines. Anything else (lines
    of other lengths, a blank line, nan, a field that moves) returns None for the general parse."""
    width = data.find(b"\n") + 1
    if breaks is None:
        breaks = data.count(b"\n")
    if width < 2 or len(data) % width or breaks != len(data) // width:
        return None
    m = np.frombuffer(data, np.uint8).reshape(-1, width)
    if not (m[:, -1] == 10).all():
        return None
    row0 = m[0]
    word = row0 > 32
    change = np.flatnonzero(np.diff(np.concatenate(([False], word, [False])).astype(np.int8)))
    starts, ends = change[0::2], change[1::2]
    if len(starts) != ncols:
        return None
    gaps = np.flatnonzero(~word[:-1])
    moved = gaps[~(m[:, gaps] <= 32).all(axis=0)] if len(gaps) else gaps
    out = np.empty((len(m), ncols))
    signs: list[int] = []

    def moved_ok(cols: list[int], used: list[int]) -> bool:
        return all(g in used and (g == 0 or (not word[g - 1] and g - 1 not in cols)) for g in cols)

    for k, (s, e) in enumerate(zip(starts.tolist(), ends.tolist(), strict=True)):
        sign_at = -1
        if row0[s] in (43, 45):
            sign_at, s = s, s + 1
        elif s - 1 in moved:
            sign_at = s - 1
        if sign_at >= 0:
            signs.append(sign_at)
        if s >= e or e - s > 60:
            return None
        body = row0[s:e].tobytes().lower()
        dot = body.find(b".") if b"." in body else e - s
        exp = body.find(b"e") if b"e" in body else e - s
        vals, bad = _group(m[:, s:e], dot, exp, e - s)
        if bad.any():
            return None
        if sign_at >= 0:
            sign = m[:, sign_at]
            if not ((sign <= 32) | (sign == 43) | (sign == 45)).all():
                return None
            np.negative(vals, out=vals, where=sign == 45)
        out[:, k] = vals
    # a gap column that is not blank in every line must be a sign read above, with a blank before it
    if not moved_ok(moved.tolist(), signs):
        return None
    return out


def _parse_chunk(data: bytes, ncols: int, path: Path, line_no: int) -> tuple[np.ndarray, int]:
    """All numbers of a chunk of whole lines (delimiters already spaces), checked ncols per line."""
    c = np.frombuffer(b"\n" + data + b"\n", np.uint8)
    lines = data.count(b"\n") + (not data.endswith(b"\n"))
    word = c > 32
    # the buffer starts and ends with a line break, so changes alternate: token start, token end, ...
    change = np.flatnonzero(word[1:] != word[:-1]) + 1
    starts, ends = change[0::2], change[1::2]
    t = len(starts)
    if t == 0:
        return np.zeros(0), lines
    rows = t // ncols
    nl = np.flatnonzero(c == 10)  # the leading sentinel, every line end, the trailing sentinel
    full = t % ncols == 0 and len(nl) == rows + 1 + data.endswith(b"\n")
    if full:
        # each row's first token comes after its own line break and the previous row's last token before it
        firsts = starts[::ncols]
        full = bool((nl[:rows] < firsts).all()) and bool((nl[1:rows] >= ends[ncols - 1 : -1 : ncols]).all())
    if not full:
        _check_lines(c, starts, ncols, path, line_no)
    return _parse_tokens(c, starts, ends, path, line_no), lines


def _line_of(c: np.ndarray, pos: int, line_no: int) -> int:
    return line_no + int(np.count_nonzero(c[1:pos] == 10))


def _check_lines(c: np.ndarray, starts: np.ndarray, ncols: int, path: Path, line_no: int) -> None:
    """Slow path (a blank line, or a line with the wrong field count): allow blanks, name a bad line."""
    nl = np.flatnonzero(c == 10)
    line = np.searchsorted(nl, starts) - 1  # index of the line each token is on
    counts = np.bincount(line, minlength=len(nl))
    bad = np.flatnonzero((counts != 0) & (counts != ncols))
    if len(bad):
        k = int(bad[0])
        text = bytes(c[nl[k] + 1 : nl[k + 1]]).decode("latin-1").strip() if k + 1 < len(nl) else ""
        raise DataError(
            f"{path}: line {line_no + k}: expected {ncols} fields, found {int(counts[k])} ({text[:60]!r})"
        )


def _parse_tokens(
    c: np.ndarray, starts: np.ndarray, ends: np.ndarray, path: Path, line_no: int
) -> np.ndarray:
    lens = ends - starts
    first = c[starts]
    signed = (first == 45) | (first == 43)
    if lens.max() > 60:
        k = int(np.argmax(lens > 60))
        raise DataError(
            f"{path}: line {_line_of(c, int(starts[k]), line_no)}: a field of {int(lens[k])} characters "
            "is not a number"
        )
    # a leading sign is read apart, so a column printed with and without one is one layout
    body = starts + signed
    key = lens - signed
    out = np.empty(len(starts))
    bad = np.zeros(len(starts), bool)
    present = np.flatnonzero(np.bincount(key))
    for width in present.tolist():
        sel = np.flatnonzero(key == width) if len(present) > 1 else None
        g = sliding_window_view(c, width)[body if sel is None else body[sel]]
        # most files print a column in one layout: take the first token's, check every token against it
        row0 = g[0].tobytes().lower()
        dot = row0.find(b".") if b"." in row0 else width
        exp = row0.find(b"e") if b"e" in row0 else width
        vals, wrong = _group(g, dot, exp, width)
        if wrong.any():  # tokens in other layouts: group them by where their point and exponent sit
            w = np.flatnonzero(wrong)
            gw = g[w]
            sub = _position(gw == 46, width) * 64 + _position((gw | 32) == 101, width)
            for s_key in np.flatnonzero(np.bincount(sub)):
                part = np.flatnonzero(sub == s_key)
                vals[w[part]], wrong[w[part]] = _group(gw[part], int(s_key) // 64, int(s_key) % 64, width)
        if sel is None:
            out, bad = vals, wrong
        else:
            out[sel] = vals
            bad[sel] = wrong
    negative = first == 45
    if negative.any():
        np.negative(out, out=out, where=negative)
    if bad.any():
        _specials(c, starts, ends, out, bad, path, line_no)
    return out


def _position(hit: np.ndarray, width: int) -> np.ndarray:
    """Column of the first hit per row (width when none)."""
    pos = np.argmax(hit, axis=1).astype(np.int64)
    pos[~hit[np.arange(len(hit)), pos]] = width
    return pos


def _group(g: np.ndarray, dot: int, exp: int, width: int) -> tuple[np.ndarray, np.ndarray]:
    """Unsigned tokens of one layout: fixed columns of mantissa digits, point, exponent."""
    mant_cols = [j for j in range(min(exp, width)) if j != dot]
    frac = max(exp - dot - 1, 0) if dot < exp else 0
    if not mant_cols:
        return np.zeros(len(g)), np.ones(len(g), bool)
    # the mantissa's digits sit in at most two runs of columns (before and after the point)
    runs = [(0, min(dot, exp, width)), (dot + 1, min(exp, width))] if dot < exp else [(0, min(exp, width))]
    bad = np.zeros(len(g), bool)
    for a, b in runs:
        if b > a:
            digits = g[:, a:b] - np.uint8(48)  # bytes below '0' wrap round to above 9
            if digits.max() > 9:  # a max is cheaper than a comparison; rows only when something is wrong
                bad |= (digits > 9).any(axis=1)
    if dot < exp:
        point_ok = g[:, dot] == 46
        if not point_ok.all():
            bad |= ~point_ok
    mant = _mantissa(g, mant_cols)
    power = np.full(len(g), -frac, np.int64) if exp < width else None
    if exp < width:
        bad |= (g[:, exp] | 32) != 101
        e0 = exp + 1
        esign = np.ones(len(g), np.int64)
        if e0 < width:
            sign_char = g[:, e0]
            has_esign = (sign_char == 45) | (sign_char == 43)
            if has_esign.all():
                esign = np.where(sign_char == 45, -1, 1)
                e0 += 1
            elif has_esign.any():
                bad |= has_esign
        edig = g[:, e0:] - np.uint8(48)
        if edig.shape[1] == 0 or edig.shape[1] > 3:
            bad[:] = True
        else:
            if edig.max() > 9:
                bad |= (edig > 9).any(axis=1)
            ev = edig[:, 0].astype(np.int64)
            for j in range(1, edig.shape[1]):
                ev *= 10
                ev += edig[:, j]
            power += esign * ev
        return _scale(mant, power), bad
    return (mant / _POW10[frac] if frac else mant), bad


def _mantissa(g: np.ndarray, cols: list[int]) -> np.ndarray:
    """The integer the digit columns `cols` spell (bytes '0'..'9'; others give garbage, checked apart).

    Horner's rule on the raw bytes, the '0' offsets taken off once at the end: exact while the sum of
    bytes times powers of ten stays below 2**53, which holds for up to 15 digits. Longer mantissas go
    through a product with powers of ten (within a few units in the last place)."""
    if len(cols) > 15:
        return (g[:, cols] - np.uint8(48)) @ _POW10[len(cols) - 1 :: -1][: len(cols)]
    acc = g[:, cols[0]].astype(np.float64)
    for j in cols[1:]:
        acc *= 10.0
        acc += g[:, j]
    acc -= 48.0 * float("1" * len(cols))
    return acc


def _scale(mant: np.ndarray, power: np.ndarray) -> np.ndarray:
    """mant * 10**power: one exact product or quotient when |power| <= 300, two beyond (sub-normals)."""
    lo, hi = int(power.min()), int(power.max())
    if -300 <= lo and hi <= 0:  # the usual case: a quotient by an exact power of ten
        return mant / _POW10[-power]
    if 0 <= lo and hi <= 300:
        return mant * _POW10[power]
    first = np.clip(power, -300, 300)
    with np.errstate(over="ignore", under="ignore"):
        value = np.where(first >= 0, mant * _POW10[np.abs(first)], mant / _POW10[np.abs(first)])
        rest = np.clip(power - first, -308, 308)
        if rest.any():
            value = np.where(rest >= 0, value * _POW10[np.abs(rest)], value / _POW10[np.abs(rest)])
    return value


def _specials(c, starts, ends, out, bad, path: Path, line_no: int) -> None:
    """Tokens the layouts did not cover: nan / inf are taken, anything else is an error."""
    for k in np.flatnonzero(bad)[:100_000]:
        tok = bytes(c[starts[k] : ends[k]]).decode("latin-1")
        value = _SPECIAL.get(tok.lower())
        if value is None:
            raise DataError(
                f"{path}: line {_line_of(c, int(starts[k]), line_no)}: {tok[:40]!r} is not a number"
            )
        out[k] = value
    if bad.sum() > 100_000:
        raise DataError(f"{path}: more than 100000 fields are not plain numbers")

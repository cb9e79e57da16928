"""A numeric CSV reader for oscilloscope and data-logger exports, vectorised over bytes.

How it works. The head of the file is sniffed with ordinary string code: the first line that is all
numbers (and the few after it agree) starts the data; the lines above are the header, of any number
and length, where column names and "interval" / "sample rate" / "start" entries are looked for. The
data is then read in blocks of whole lines (about CHUNK_BYTES each, read into reused buffers), parsed
by two threads and placed in file order.

One reader (_Reader) takes a block column by column. Where the fields are: when every line of the
block has one length and its fields sit at the same places (the way instruments print, a blank where a
sign is not), each field is a strided view of the block, with no search (_Strided); otherwise one
search finds every delimiter and line break, and each field's bytes are gathered from where it ends
(_Gathered). How a column is read: when all its fields are printed in its first line's form (digits
after the decimal mark, the exponent's form), by that form (`_templated`); otherwise field by field,
each in its own form, as numbers printed in their shortest form (%g) come (`_general`). Either way
the digits are read as 64-bit words (gathered as the 8-byte-aligned words they sit in), eight digits
per word by three multiply-and-shift steps (the SWAR method), and a few numpy passes per column, never a
Python step per line or per number. The passes write into work arrays that each parsing thread keeps
from block to block (`_Scratch`): a block allocates one array, the delimiter search's. A block this
does not fit (a blank line, quotes, nan, a field that is not a number) goes through one
`bytes.translate` and a per-token parse, grouped by the tokens' layouts (`_parse_chunk`). Every line
must have the same number of fields; the first line that does not, or a field that is not a number,
is named in a one-line DataError.

Every value is the correctly rounded double of its text, as Python's float() gives: one division or
product of exact doubles (a mantissa below 2**53, a power of ten within 10**22), and numpy's own
correctly rounded string conversion for the rest (longer mantissas, far exponents).
"""

from __future__ import annotations

import itertools
import math
import mmap
import re
import threading
from collections import deque
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view

from benchlog.errors import DataError

CHUNK_BYTES = 1 << 20
_PAD = 40  # bytes kept before a block, so the words a field is read from can start before it
_TAIL = 16  # bytes kept after a block, so the aligned words a field's last bytes sit in are all there
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


def _line_layout(line: str) -> tuple[str, bool, int, bool] | None:
    """(delimiter, decimal comma, fields, a decimal mark shown) if the line is all numbers in some
    convention, else None."""
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
            return delim, dec_comma, len(fields), any(("," if dec_comma else ".") in f for f in fields)
    return None


def sniff(path: Path) -> Layout:
    """Find the header, the delimiter, the decimal mark and the column count."""
    try:
        with path.open("rb") as f:
            head = f.read(_HEAD_BYTES)
            found = _find_data(head)
            # a long header: read on until a run of data lines is in view
            while len(head) < (64 << 20) and (head.count(b"\n") <= 8 or found is None):
                more = f.read(len(head))
                if not more:
                    break
                head += more
                found = _find_data(head)
    except OSError as exc:
        raise DataError(f"{path}: cannot read ({exc.strerror or exc})") from exc
    if found is None:
        raise DataError(f"{path}: no lines of numbers found (is this a CSV export of a capture?)")
    return _layout(head, *found)


_SNIFF_LINES = 200  # the data's layout is the commonest among the last lines of the head


def _find_data(head: bytes) -> tuple[int, int, tuple[str, bool, int]] | None:
    """The first line written the way most number lines at the end of the head are, with numbers after
    it."""
    text = head.decode("latin-1")
    lines = text.split("\n")
    complete = lines[:-1] if not head.endswith(b"\n") else lines
    layouts: list[tuple[str, bool, int, bool] | None | bool] = [False] * len(complete)  # False: not read

    def layout(i: int) -> tuple[str, bool, int, bool] | None:
        lay = layouts[i]
        if lay is False:
            lay = layouts[i] = _line_layout(complete[i].rstrip("\r"))
        return lay  # type: ignore[return-value]

    tail = range(max(0, len(complete) - _SNIFF_LINES), len(complete))
    seen = [lay for lay in (layout(i) for i in tail) if lay is not None]
    if not seen:
        return None
    # a line of whole numbers shows no decimal mark: it agrees with either, so the delimiter and the
    # field count decide, and the lines that do show a mark decide the mark
    keys = [(lay[0], lay[2]) for lay in seen]
    key = max(set(keys), key=keys.count)
    marks = [lay[1] for lay in seen if (lay[0], lay[2]) == key and lay[3]]
    common = (key[0], max(set(marks), key=marks.count) if marks else seen[keys.index(key)][1], key[1])

    def agrees(lay: tuple[str, bool, int, bool] | None) -> bool:
        return lay is not None and (lay[0], lay[2]) == key and (lay[1] == common[1] or not lay[3])

    offset = 0
    for i, line in enumerate(complete):
        if agrees(layout(i)):
            follow = (layout(j) for j in range(i + 1, len(complete)) if complete[j].strip())
            if all(lay is not None and lay[0] == common[0] for lay in itertools.islice(follow, 5)):
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


class _LineError(Exception):
    """A bad line inside a chunk: `line` counts from 0 at the chunk's first line (None: no one line)."""

    def __init__(self, line: int | None, text: str) -> None:
        super().__init__(text)
        self.line, self.text = line, text


def _blocks(path: Path, offset: int, buffers: int):
    """(buffer, start, stop, slot) of whole lines in file order, about CHUNK_BYTES at a time.

    Each block is read into one of `buffers` reused bytearrays (number `slot`, so a block is not
    copied), with _PAD bytes before `start`; the caller keeps at most `buffers - 1` blocks in use. A last
    line without a line break gets one."""
    pool: list[bytearray] = [bytearray() for _ in range(buffers)]
    carry = b""
    k = 0
    try:
        f = path.open("rb", buffering=0)
    except OSError as exc:
        raise DataError(f"{path}: cannot read ({exc.strerror or exc})") from exc
    with f:
        f.seek(offset)
        while True:
            step = max(CHUNK_BYTES, len(carry))  # a line longer than a chunk: read on in growing steps
            buf = pool[k % buffers]
            if len(buf) < _PAD + len(carry) + step + 1 + _TAIL:
                buf = pool[k % buffers] = bytearray(_PAD + len(carry) + step + 1 + _TAIL)
            start = _PAD + len(carry)
            buf[_PAD:start] = carry
            got = f.readinto(memoryview(buf)[start : start + step])
            end = start + got
            if not got:  # the end of the file: what is left is the last line
                if end > _PAD:
                    if buf[end - 1] != 10:
                        buf[end] = 10
                        end += 1
                    yield buf, _PAD, end, k % buffers
                return
            cut = buf.rfind(b"\n", start, end) + 1
            if cut == 0:  # no line ends in this read
                carry = bytes(buf[_PAD:end])
                continue
            carry = bytes(buf[cut:end])
            yield buf, _PAD, cut, k % buffers
            k += 1


def _empty(n: int) -> np.ndarray:
    """A float64 array of `n` for the columns read, its pages mapped as they are first written.

    Not from numpy's allocator: numpy advises the kernel to back large arrays with huge pages, and where
    the kernel then compacts memory on the first write of each (its "defrag on madvise" setting), the
    writes that place the parsed blocks took 3x as long (30 ns a row of three columns instead of 10), on
    the thread that places them in order."""
    if n * 8 < (1 << 22):
        return np.empty(n, np.float64)
    return np.frombuffer(mmap.mmap(-1, n * 8), np.float64, n)


def read_columns(path: Path, layout: Layout, keep: list[int], workers: int = 2) -> list[np.ndarray]:
    """The columns `keep` (indices) of the data, as float64 arrays.

    Blocks are parsed by `workers` threads (numpy releases the interpreter lock in its loops), at most
    `workers + 1` in flight, and placed in file order. The arrays are sized from the first block's line
    length (pages never written are never resident) and grown to the file's bound if lines get shorter."""
    try:
        remaining = path.stat().st_size - layout.data_offset
    except OSError as exc:
        raise DataError(f"{path}: cannot read ({exc.strerror or exc})") from exc
    ncols = layout.columns
    bound = (remaining + 1) // (2 * ncols) + 1  # a line holds at least ncols bytes and ncols separators
    out: list[np.ndarray] = []
    table = _table(layout)
    reader = _Reader(layout, keep)
    buffers = max(workers, 1) + 2
    parsed = [_Scratch() for _ in range(buffers)]  # a block's columns, kept with its buffer until placed
    row = 0
    line_no = layout.first_line
    read = 0

    def parse(buf: bytearray, start: int, stop: int, slot: int) -> tuple[list[np.ndarray], int]:
        got = reader.parse(buf, start, stop, parsed[slot])
        if got is not None:
            return got
        data = bytes(buf[start:stop]).translate(table)
        values, lines = _parse_chunk(data, ncols)
        vals = values.reshape(-1, ncols)
        return [np.ascontiguousarray(vals[:, c]) for c in keep], lines

    def place(job, size: int) -> None:
        nonlocal row, line_no, out, read
        try:
            cols, lines = job() if callable(job) else job.result()
        except _LineError as err:
            where = f"line {line_no + err.line}: " if err.line is not None else ""
            raise DataError(f"{path}: {where}{err.text}") from None
        n = len(cols[0]) if cols else 0
        read += size
        if not out:  # size the arrays from the first block's bytes per row
            est = int(remaining / max(size, 1) * n * 1.25) + 1024 if n else bound
            out = [_empty(min(bound, est)) for _ in keep]
        if row + n > len(out[0]):
            if row + n > bound:
                raise DataError(f"{path}: the file changed while it was read")
            grown = [_empty(bound) for _ in keep]
            for new, old in zip(grown, out, strict=True):
                new[:row] = old[:row]
            out = grown
        for dst, src in zip(out, cols, strict=True):
            dst[row : row + n] = src
        row += n
        line_no += lines

    blocks = _blocks(path, layout.data_offset, buffers)
    if workers <= 1:
        for buf, start, stop, slot in blocks:
            place(lambda b=buf, s=start, e=stop, k=slot: parse(b, s, e, k), stop - start)
    else:
        with ThreadPoolExecutor(max_workers=workers) as pool:
            pending: deque = deque()
            try:
                for buf, start, stop, slot in blocks:
                    pending.append((pool.submit(parse, buf, start, stop, slot), stop - start))
                    if len(pending) > workers:
                        place(*pending.popleft())
                while pending:
                    place(*pending.popleft())
            finally:
                for fut, _ in pending:
                    fut.cancel()
    if not out:
        return [np.empty(0, np.float64) for _ in keep]
    return [a[:row] for a in out]


# Field readers. A field's digits are read from little-endian 64-bit words that end where the field (or a
# part of it) ends: a word's last byte is its most significant, and the text's first digit sits in its
# lowest byte.
# mant * _MUL10[p + 22] / _DIV10[p + 22] is mant * 10**p with one rounding for |p| <= 22 (10**22 is the
# largest power of ten a double holds exactly; the other factor is 1.0)
_MUL10 = np.array([10.0 ** max(k - 22, 0) for k in range(45)])
_DIV10 = np.array([10.0 ** max(22 - k, 0) for k in range(45)])
# the same factors by 2 * k + (1 if the field is negative): the sign goes in with the one operation that
# rounds (x / -d is -(x / d) exactly, and 0 / -d is -0.0, as float() gives for '-0')
_PM = np.array([1.0, -1.0] * 45)
_MUL_S = np.repeat(_MUL10, 2) * _PM
_MUL_U = np.repeat(_MUL10, 2)
_DIV_S = np.repeat(_DIV10, 2) * _PM
_M64 = (1 << 64) - 1
_Z3 = np.uint64(0x3030303030303030)  # '0' in every byte: XOR turns digit bytes into 0..9
_H80 = np.uint64(0x8080808080808080)
_L7F = np.uint64(0x7F7F7F7F7F7F7F7F)
_S76 = np.uint64(0x7676767676767676)  # a byte 0..9 plus 0x76 stays below 0x80; 10 and above do not
# exponents read by table: the letter and its sign as the low 8 or 16 bits give the sign (0: not an
# exponent); one digit's byte or two digits' bytes (the first the low byte) give their value (< 0: not)
_EPLAIN = np.zeros(256, np.int64)
_EPLAIN[[69, 101]] = 1
_ESIGNED = np.zeros(1 << 16, np.int64)
for _letter in (69, 101):
    _ESIGNED[_letter | 43 << 8], _ESIGNED[_letter | 45 << 8] = 1, -1
_EDIGIT = np.full(256, -100_000, np.int64)
_EDIGIT[48:58] = np.arange(10)
_EDIGITS = np.full(1 << 16, -100_000, np.int64)
_EDIGITS[(48 + np.arange(100) // 10) | (48 + np.arange(100) % 10) << 8] = np.arange(100)
_KEEP = np.array([(_M64 << (8 * (8 - k))) & _M64 for k in range(9)], np.uint64)  # the last k bytes
_LOW = np.array([(1 << (8 * k)) - 1 for k in range(9)], np.uint64)  # the first k bytes
# by a field's byte count (read with mode="clip", so 16 and above are 16): its bytes among the last 8,
# and among the 8 before them
_KEEP_LAST = np.array([_KEEP[min(k, 8)] for k in range(17)], np.uint64)
_KEEP_BEFORE = np.array([_KEEP[max(k - 8, 0)] for k in range(17)], np.uint64)


class _Scratch:
    """Arrays one thread reuses from block to block, by name: a block's temporaries are views of them,
    grown when a block needs more and never given back, so parsing block after block maps no new memory.
    (Fresh arrays of a few MB a block were handed back to the kernel on free and faulted in again on the
    next block, page by page: a third of the reader's time.)"""

    __slots__ = ("_bufs",)

    def __init__(self) -> None:
        self._bufs: dict[str, np.ndarray] = {}

    def __call__(self, name: str, shape: int | tuple[int, ...], dtype=np.uint64) -> np.ndarray:
        dt = np.dtype(dtype)
        size = (shape if isinstance(shape, int) else math.prod(shape)) * dt.itemsize
        buf = self._bufs.get(name)
        if buf is None or len(buf) < size:
            buf = self._bufs[name] = np.empty(size + size // 8 + 64, np.uint8)
        return buf[:size].view(dt).reshape(shape)


def _runs(end: int, count: int) -> list[tuple[int, int]]:
    """A run of `count` digits ending at `end` (counted from the field's end, so not above 0), as runs
    of at most 8, left to right."""
    out = []
    while count > 0:
        take = count % 8 or 8
        out.append((end - count + take, take))
        count -= take
    return out


def _word_digits(y: np.ndarray, t: np.ndarray) -> np.ndarray | None:
    """The integers spelled by words of digit values 0..9 (0 where no digit is; first digit in the lowest
    byte), or None if a byte is above 9. `y` is overwritten and returned; `t` is scratch of its shape.

    A multiply adds each byte's neighbour shifted up by one byte (pairs), then each pair's (fours), then
    each four's (eights); a shift and a mask keep the sums. No sum carries out of its lane."""
    np.add(y, _S76, out=t)
    t |= y
    if np.bitwise_or.reduce(t, axis=None) & _H80:
        return None
    y *= np.uint64(1 + (10 << 8))
    y >>= np.uint64(8)
    y &= np.uint64(0x00FF00FF00FF00FF)
    y *= np.uint64(1 + (100 << 16))
    y >>= np.uint64(16)
    y &= np.uint64(0x0000FFFF0000FFFF)
    y *= np.uint64(1 + (10000 << 32))
    y >>= np.uint64(32)
    return y


def _zero_bytes(z: np.ndarray, t: np.ndarray) -> np.ndarray:
    """In `t` (returned): 1 at the foot of each byte of `z` that is zero, 0 elsewhere (exact: no borrow
    crosses a byte)."""
    np.bitwise_and(z, _L7F, out=t)
    t += _L7F
    t |= z
    t >>= np.uint64(7)
    t &= np.uint64(0x0101010101010101)
    t ^= np.uint64(0x0101010101010101)
    return t


def _bytes_above2(p: np.ndarray, q: np.ndarray, out: np.ndarray) -> np.ndarray:
    """For words holding one set bit at the foot of byte j (or none): 2 * (7 - j) (0 when none), in
    `out` (uint8); `q` is scratch."""
    np.left_shift(p, np.uint64(8), out=q)
    q -= np.uint64(1)
    np.invert(q, out=q)
    np.bitwise_count(q, out=out)
    out >>= np.uint8(2)
    return out


def _template(tok: bytes, mark: int) -> tuple[bool, int, int, bool, int] | None:
    """(a decimal mark, digits after it, exponent length, exponent signed, exponent digits) of an
    unsigned number's text, or None if it is not one."""
    n, i = len(tok), 0
    while i < n and 48 <= tok[i] <= 57:
        i += 1
    has_mark = i < n and tok[i] == mark
    frac = 0
    if has_mark:
        i += 1
        j = i
        while i < n and 48 <= tok[i] <= 57:
            i += 1
        frac = i - j
    exp_len, exp_signed, exp_digits = 0, False, 0
    if i < n and tok[i] in (69, 101):
        j = i + 1
        if j < n and tok[j] in (43, 45):
            exp_signed, j = True, j + 1
        exp_digits = n - j
        if not 1 <= exp_digits <= 3 or not all(48 <= x <= 57 for x in tok[j:]):
            return None
        exp_len, i = n - i, n
    if i != n or i == 0 or frac > 22:
        return None
    return has_mark, frac, exp_len, exp_signed, exp_digits


class _Strided:
    """The fields of one column of a block whose lines all have one length and layout: the field sits
    at the same place on every line (columns `s` to `e` of each `w`-byte line), so its bytes are strided
    views of the block, with no search and no copy."""

    def __init__(self, buf: bytearray, start: int, rows: int, w: int, s: int, e: int, sc: _Scratch) -> None:
        self.buf, self.start, self.rows, self.w, self.s, self.e, self.sc = buf, start, rows, w, s, e, sc
        self.n = rows
        self.shape: tuple[int, ...] = (rows,)
        self.length = e - s
        self.first = np.ndarray((rows,), np.uint8, buf, start + s, (w,))
        self.signs: tuple[np.ndarray, np.ndarray] | None = None

    def word(self, back: int) -> np.ndarray:
        """The 8 bytes that end `back` bytes before each field's end (a view of the block: never written
        to)."""
        return np.ndarray((self.rows,), "<u8", self.buf, self.start + self.e - back - 8, (self.w,))

    def byte(self, back: int) -> np.ndarray:
        return np.ndarray((self.rows,), np.uint8, self.buf, self.start + self.e - back - 1, (self.w,))

    def word_at(self, back: np.ndarray) -> np.ndarray:
        """The 8 bytes that end `back[i]` bytes before field i's end."""
        at = self.sc("at", self.rows, np.intp)
        at[:] = self.start + self.e - 8
        at += self._line_starts()
        at -= back
        words = np.ndarray((len(self.buf) - 7,), "<u8", self.buf, 0, (1,))
        return np.take(words, at, out=self.sc("word_at", self.rows), mode="clip")

    def _line_starts(self) -> np.ndarray:
        steps = self.sc("line_starts", self.rows, np.intp)
        np.multiply(_iota(self.rows), self.w, out=steps)
        return steps

    def text(self, at: np.ndarray) -> np.ndarray:
        """Rows of the fields `at` (their bytes, sign included)."""
        m = np.ndarray((self.rows, self.w), np.uint8, self.buf, self.start)
        return m[at, self.s : self.e]


_IOTA = np.arange(0, dtype=np.intp)


def _iota(n: int) -> np.ndarray:
    """0 .. n-1, kept (a view of one array grown as needed)."""
    global _IOTA
    if len(_IOTA) < n:
        _IOTA = np.arange(max(n, 2 * len(_IOTA)), dtype=np.intp)
    return _IOTA[:n]


class _Gathered:
    """Fields anywhere in a block: field i runs from `s[i]` to `e[i]` (positions from the block's start,
    `e` the delimiter or line break after it; arrays of any shape, the values come out in that shape);
    its bytes are gathered. The last 16 bytes of every field are gathered once and the words ending up
    to 8 bytes before its end are cut from them.

    A gather of 8 bytes from any byte address costs numpy several times what one from an 8-byte-aligned
    address does, so where the block's buffer allows it (aligned, _TAIL bytes after the block), the
    bytes are gathered as the aligned words they sit in and shifted into place."""

    def __init__(
        self, buf: bytearray, start: int, n: int, s: np.ndarray, e: np.ndarray, sc: _Scratch
    ) -> None:
        self.buf, self.start, self.s, self.e, self.sc = buf, start, s, e, sc
        self.shape = e.shape
        self.n = e.size
        self.length = np.subtract(e, s, out=sc("length", e.shape, np.intp))
        self.block = np.frombuffer(buf, np.uint8, n, start)
        self.first = np.take(self.block, s, out=sc("first", e.shape, np.uint8), mode="clip")
        self.signs: tuple[np.ndarray, np.ndarray] | None = None
        # item k covers bytes k .. k+7 (k+15) of buf: the one ending at block position p is start + p - 8
        self._words = np.ndarray((start + n - 7,), "<u8", buf, 0, (1,))
        self._pairs = np.ndarray((start + n - 15,), "V16", buf, 0, (1,))
        aligned = np.frombuffer(buf, np.uint64, len(buf) // 8)
        self._aligned = aligned if aligned.flags.aligned and len(buf) >= start + n + _TAIL else None
        self._last16: tuple[np.ndarray, np.ndarray] | None = None
        self._last8: np.ndarray | None = None

    def _at(self, offset: int) -> np.ndarray:
        return np.add(self.e, self.start + offset, out=self.sc("at", self.shape, np.intp))

    def _from_aligned(self, first: np.ndarray, words: int, name: str = "window") -> list[np.ndarray]:
        """The `words` 8-byte words from byte `first` of buf on, per field, from aligned words: the
        aligned word holding a field's first byte shifted down, the next one's bytes shifted up into
        it, and so on (`first` is overwritten)."""
        sc, shape, aligned = self.sc, self.shape, self._aligned
        down = sc("down", shape)
        np.bitwise_and(first, 7, out=down.view(np.intp))
        down <<= np.uint64(3)
        up = np.subtract(64, down, out=sc("up", shape))  # a shift by 64 gives 0 in numpy
        first >>= 3
        nxt = np.take(aligned, first, out=sc("aligned", shape), mode="clip")
        out = []
        for k in range(words):
            w = np.right_shift(nxt, down, out=sc(f"{name} {k}", shape))
            first += 1
            np.take(aligned, first, out=nxt, mode="clip")
            w |= np.left_shift(nxt, up, out=sc("word_t", shape))
            out.append(w)
        return out

    def word(self, back: int) -> np.ndarray:
        """The 8 bytes that end `back` bytes before each field's end (not to be written to; valid until
        the next call with another `back`)."""
        sc, shape = self.sc, self.shape
        if back == 0 and self._last16 is None:
            if self._last8 is None:
                if self._aligned is not None:
                    (self._last8,) = self._from_aligned(self._at(-8), 1)
                else:
                    self._last8 = np.take(self._words, self._at(-8), out=sc("last8", shape), mode="clip")
            return self._last8
        if 0 <= back <= 8:
            if self._last16 is None:
                if self._aligned is not None:
                    low, high = self._from_aligned(self._at(-16), 2)
                    self._last16 = high, low
                else:
                    got = np.take(self._pairs, self._at(-16), out=sc("last16", shape, "V16"), mode="clip")
                    pair = got.view(np.uint64).reshape(*shape, 2)
                    self._last16 = pair[..., 1], pair[..., 0]
            high, low = self._last16  # the last 8 bytes, the 8 before
            if back == 0:
                return high
            if back == 8:
                return low
            w = np.left_shift(high, np.uint64(8 * back), out=sc("word", shape))
            t = np.right_shift(low, np.uint64(64 - 8 * back), out=sc("word_t", shape))
            w |= t
            return w
        return np.take(self._words, self._at(-8 - back), out=sc("word", shape), mode="clip")

    def byte(self, back: int) -> np.ndarray:
        at = self._at(-(back + 1) - self.start)
        return np.take(self.block, at, out=self.sc("byte", self.shape, np.uint8), mode="clip")

    def word_at(self, back: np.ndarray) -> np.ndarray:
        at = self._at(-8)
        at -= back
        if self._aligned is not None:
            return self._from_aligned(at, 1, "word_at")[0]
        return np.take(self._words, at, out=self.sc("word_at", self.shape), mode="clip")

    def text(self, at: np.ndarray) -> np.ndarray:
        s = self.s.reshape(-1)[at]
        lens = self.e.reshape(-1)[at] - s
        width = int(lens.max())
        text = np.full((len(at), width), 32, np.uint8)
        for j in range(width):
            inside = lens > j
            text[inside, j] = self.block[s[inside] + j]
        return text


def _all_equal(x: np.ndarray, value: int, sc: _Scratch) -> bool:
    return bool(np.equal(x, value, out=sc("flags", x.shape, bool)).all())


def _templated(f, form: tuple[bool, int, int, bool, int], mark: int, vals: np.ndarray) -> np.ndarray | None:
    """The values of fields `f` all written as `form` (from `_template`), in `vals`, or None if one is
    not.

    The form fixes every byte's place counted from the field's end, so only the count of digits before
    the mark varies (at most 8): the mantissa is gathered as one 64-bit word per field (the mark squeezed
    out when it fits one word), the bytes not of the field masked, every byte checked to be a digit and
    the word turned into its integer by three multiply-and-shift steps (the SWAR method); the exponent's
    letter, sign and digits are read by table from the field's last word. A value is mant / 10**k or
    mant * 10**k: one correctly rounded operation on exact doubles while mant < 2**53 and k <= 22;
    other values (longer mantissas, far exponents) go to numpy's own string conversion, which is
    correctly rounded too."""
    has_mark, frac, exp_len, exp_signed, exp_digits = form
    sc, shape = f.sc, f.shape
    neg, signed = _sign_flags(f)
    tail = (frac + 1 if has_mark else 0) + exp_len
    digits = None
    if isinstance(f.length, int) and (signed.all() or not signed.any()):  # one digit count for all
        lo = hi = f.length - int(signed.flat[0]) + frac - tail
    else:
        digits = np.subtract(f.length, signed, out=sc("digits", shape, np.intp), dtype=np.intp)
        digits += frac - tail  # the mantissa's digits per field
        lo, hi = int(digits.min()), int(digits.max())
    if lo < max(frac, 1) or hi > 8 + frac or hi > 19:
        return None
    y, t = sc("y", shape), sc("t", shape)
    if has_mark and hi <= 7:  # the whole mantissa in one word: squeeze the mark out
        m = 8 * (7 - frac)  # the mark's bit offset
        np.bitwise_xor(f.word(exp_len), np.uint64(0x3030303030303030 ^ ((mark ^ 0x30) << m)), out=y)
        if (int(np.bitwise_or.reduce(y, axis=None)) >> m) & 0xFF:  # digits 0..9 and the mark 0
            return None
        np.bitwise_and(y, np.uint64((1 << m) - 1), out=t)
        t *= np.uint64(255)
        y += t  # the bytes below the mark moved up one byte
        y &= _KEEP[lo] if digits is None else np.take(_KEEP, digits, out=t, mode="clip")
        mant = _word_digits(y, t)
    else:
        back = exp_len + (frac + 1 if has_mark else 0)
        if has_mark and not _all_equal(f.byte(back - 1), mark, sc):
            return None
        np.bitwise_xor(f.word(back), _Z3, out=y)
        if digits is None:
            y &= _KEEP[lo - frac]
        else:
            digits -= frac
            y &= np.take(_KEEP, digits, out=t, mode="clip")
        mant = _word_digits(y, t)
        for end, count in _runs(-exp_len, frac):
            if mant is None:
                break
            part = np.bitwise_xor(f.word(-end), _Z3, out=sc("part", shape))
            part &= _KEEP[count]
            if _word_digits(part, t) is None:
                return None
            mant *= np.uint64(10**count)
            mant += part
    if mant is None:
        return None
    vals[...] = mant
    slow = np.greater(mant, np.uint64(1 << 53), out=sc("slow", shape, bool)) if hi > 15 else None
    if exp_len:
        # the exponent's text (letter, sign, digits) as the low bytes of one word, read by table
        h = np.right_shift(f.word(0), np.uint64(8 * (8 - exp_len)), out=y)
        if h.min() == h.max():  # one exponent for the whole block (a time column within a decade)
            one = int(h.flat[0])
            text = bytes((one >> (8 * i)) & 0xFF for i in range(exp_len)).decode("latin-1")
            if _template(b"1" + text.encode("latin-1"), mark) is None:
                return None
            p = int(text[1:]) - frac
            if -22 <= p <= 22:
                if p > 0:
                    vals *= _MUL10[22 + p]
                elif p < 0:
                    vals /= _DIV10[22 + p]
                return _finish(f, _signs(vals, neg), slow, mark)
        lead = 2 if exp_signed else 1
        letter = _ESIGNED if exp_signed else _EPLAIN
        np.bitwise_and(h, np.uint64((1 << (8 * lead)) - 1), out=t)
        sign = np.take(letter, t.view(np.int64), out=sc("esign", shape, np.int64), mode="clip")
        h >>= np.uint64(8 * lead)
        text = h.view(np.int64)
        power = sc("power", shape, np.int64)
        if exp_digits == 3:
            np.bitwise_and(text, 0xFF, out=t.view(np.int64))
            np.take(_EDIGIT, t.view(np.int64), out=power, mode="clip")
            power *= 100
            h >>= np.uint64(8)
            power += np.take(_EDIGITS, text, out=t.view(np.int64), mode="clip")
        else:
            np.take(_EDIGITS if exp_digits == 2 else _EDIGIT, text, out=power, mode="clip")
        if not sign.all() or int(power.min()) < 0:  # not a letter and sign, or not digits
            return None
        power *= sign
        index = np.add(neg, 2 * (22 - frac), out=sc("index", shape, np.intp), dtype=np.intp)
        index += power
        index += power
        slow = _signed_scale(f, vals, index, slow)
    elif frac:
        vals /= _DIV10[22 - frac]
        _signs(vals, neg)
    else:
        _signs(vals, neg)
    return _finish(f, vals, slow, mark)


def _sign_flags(f) -> tuple[np.ndarray, np.ndarray]:
    """(negative, led by a sign or a blank) per field, by comparisons (a table look-up costs more);
    kept on `f`, as a column read by its form and then field by field asks twice."""
    if f.signs is None:
        sc, first = f.sc, f.first
        neg = np.equal(first, 45, out=sc("negative", f.shape, bool))
        signed = np.equal(first, 43, out=sc("signed", f.shape, bool))
        signed |= neg
        signed |= np.equal(first, 32, out=sc("blank", f.shape, bool))
        f.signs = neg, signed
    return f.signs


def _signs(vals: np.ndarray, neg: np.ndarray) -> np.ndarray:
    """The fields' signs applied (the values are not negative yet: -0 becomes -0.0, as float() gives)."""
    return np.negative(vals, out=vals, where=neg)


def _signed_scale(f, vals: np.ndarray, index: np.ndarray, slow: np.ndarray | None) -> np.ndarray | None:
    """vals * 10**(p - 22) with each field's sign, for index = 2 * p + (1 if the field is negative): one
    correctly rounded operation for 0 <= p <= 44. Powers beyond it are marked slow (returned)."""
    lo, hi = int(index.min()), int(index.max())
    if lo < 0 or hi > 89:
        far = (index < 0) | (index > 89)
        slow = far if slow is None else slow | far
        np.clip(index, 0, 89, out=index)  # a far value is replaced by its exact conversion
        lo, hi = max(lo, 0), min(hi, 89)
    t = f.sc("factor", f.shape, np.float64)
    if lo < 44:  # some p < 22: a division, and the sign with it
        if hi >= 46:
            vals *= np.take(_MUL_U, index, out=t, mode="clip")
        vals /= np.take(_DIV_S, index, out=t, mode="clip")
    elif hi >= 46:
        vals *= np.take(_MUL_S, index, out=t, mode="clip")
    elif hi == 45:  # all p = 22, some negative
        vals *= np.take(_PM, index, out=t, mode="clip")
    return slow


def _finish(f, vals: np.ndarray, slow: np.ndarray | None, mark: int) -> np.ndarray | None:
    """The values beyond one exact operation converted from their text (sign included)."""
    if slow is not None and slow.any():
        at = np.flatnonzero(slow)
        try:
            vals.reshape(-1)[at] = _exact(f.text(at), mark == 44)
        except ValueError:  # not a number after all: the general parse names it
            return None
    return vals


def _general(f, mark: int, exponents: bool, vals: np.ndarray) -> np.ndarray | None:
    """The values of fields `f` each in its own form (a sign or a blank, digits with or without a mark
    anywhere, an exponent or none: numbers printed in their shortest form), in `vals`, or None where one
    is not a number of up to 16 mantissa digits. `exponents`: whether the block holds an 'e' or 'E' at
    all.

    Per field and all vectorised: the exponent letter is found among the last 8 bytes (a zero byte of
    the word XOR 'e', case folded), its sign and up to 3 digits read from the same word; the mantissa
    (at most 16 bytes) is two words ending where it ends, the one decimal mark in it found the same way
    and squeezed out (the bytes before it move up one byte, across the two words), and the digits become
    integers by the SWAR steps, which check that every other byte is a digit. Values are exact as in
    `_templated`."""
    sc, shape = f.sc, f.shape
    neg, signed = _sign_flags(f)
    ml = np.subtract(f.length, signed, out=sc("ml", shape, np.intp), dtype=np.intp)  # the mantissa's bytes
    if not exponents and int(ml.max()) > 8:
        f.word(8)  # both words in one gather
    x = f.word(0)
    t, u = sc("t", shape), sc("u", shape)
    index = np.add(neg, 44, out=sc("index", shape, np.intp), dtype=np.intp)  # 2 * (power + 22) + negative
    back: np.ndarray | None = None
    hits = None
    if exponents:
        keep = np.take(_KEEP_LAST, ml, out=sc("keep", shape), mode="clip")  # the field's last bytes
        z = np.bitwise_or(x, np.uint64(0x2020202020202020), out=u)
        z ^= np.uint64(0x6565656565656565)  # a zero byte where 'e' or 'E' is
        hits = _zero_bytes(z, t)
        hits &= keep
        hits &= np.uint64(0x00FFFFFFFFFFFFFF)  # a letter is followed by a digit
        if not hits.any():
            hits = None
    if hits is not None:
        np.invert(hits, out=u)
        u += np.uint64(1)
        hits &= u  # the lowest: the text's first letter
        hits -= np.uint64(1)
        j = np.bitwise_count(hits, out=sc("j", shape, np.uint8))
        j >>= np.uint8(3)  # the letter's byte (8: none): the bits below its foot, over 8
        back = np.subtract(8, j, out=sc("back", shape, np.intp))  # the exponent's length (0: none)
        shift = sc("shift", shape)
        np.add(j, 1, out=shift, casting="unsafe")
        shift <<= np.uint64(3)
        q = np.right_shift(x, shift, out=sc("q", shape))  # the bytes after the letter
        c = np.bitwise_and(q, np.uint64(0xFF), out=t)
        eneg = np.equal(c, 45, out=sc("eneg", shape, bool))
        esig = np.equal(c, 43, out=sc("esig", shape, bool))
        esig |= eneg
        np.copyto(shift, esig)
        shift <<= np.uint64(3)
        q >>= shift
        nd = np.subtract(back, 1, out=sc("nd", shape, np.intp))
        nd -= esig  # the exponent's digits (-1 where there is no letter)
        if int(nd.max()) > 3 or np.equal(nd, 0, out=sc("flags", shape, bool)).any():
            return None
        np.maximum(nd, 0, out=nd)
        q ^= _Z3
        q &= np.take(_LOW, nd, out=t, mode="clip")
        np.add(q, _S76, out=t)
        t |= q
        if (int(np.bitwise_or.reduce(t, axis=None)) & 0x808080) != 0:
            return None
        np.subtract(3, nd, out=shift, casting="unsafe")
        shift <<= np.uint64(3)
        q <<= shift  # digits to the top of 3 bytes
        power = np.bitwise_and(q, np.uint64(0xFF), out=u)
        power *= np.uint64(100)
        np.right_shift(q, np.uint64(8), out=t)
        t &= np.uint64(0xFF)
        t *= np.uint64(10)
        power += t
        q >>= np.uint64(16)
        power += q
        p = power.view(np.int64)
        np.negative(p, out=p, where=eneg)
        index += p
        index += p
        ml -= back
    if int(ml.min()) < 1:
        return None
    most = int(ml.max())
    two = most > 8
    marks = np.uint64(0x0101010101010101 * (mark ^ 0x30))
    ylo = np.bitwise_xor(x if back is None else f.word_at(back), _Z3, out=sc("ylo", shape))
    ylo &= np.take(_KEEP_LAST, ml, out=t, mode="clip")
    np.bitwise_xor(ylo, marks, out=u)
    plo = _zero_bytes(u, sc("plo", shape))  # 1 at the mark's foot (bytes outside the field are 0)
    count = np.bitwise_count(plo, out=sc("count", shape, np.uint8))
    if two:
        yhi = np.bitwise_xor(f.word(8) if back is None else f.word_at(back + 8), _Z3, out=sc("yhi", shape))
        yhi &= np.take(_KEEP_BEFORE, ml, out=t, mode="clip")
        np.bitwise_xor(yhi, marks, out=u)
        phi = _zero_bytes(u, sc("phi", shape))
        count += np.bitwise_count(phi, out=sc("count2", shape, np.uint8))
    if count.any():
        if int(count.max()) > 1 or int(np.subtract(ml, count, out=sc("left", shape, np.intp)).min()) < 1:
            return None
        # clear the mark, then squeeze the digits before it up one byte
        markx = np.uint64(mark ^ 0x30)
        np.multiply(plo, markx, out=t)
        ylo ^= t
        nf2 = _bytes_above2(plo, t, sc("nf2", shape, np.uint8))  # 2 * the digits after the mark
        inlo = np.not_equal(plo, 0, out=sc("inlo", shape, bool))
        below = np.subtract(plo, inlo, out=u)  # the bytes below the mark (0 when it is not in this word)
        below &= ylo
        below *= np.uint64(255)
        ylo += below
        if two:
            np.multiply(phi, markx, out=t)
            yhi ^= t
            above = _bytes_above2(phi, t, sc("above", shape, np.uint8))
            inhi = np.not_equal(phi, 0, out=sc("inhi", shape, bool))
            above += np.uint8(16)
            above *= inhi
            nf2 += above
            # a mark in the low word: the high word's last byte moves down into it
            carry = np.right_shift(yhi, np.uint64(56), out=t)
            carry *= inlo
            ylo |= carry
            np.copyto(u, inlo)
            u <<= np.uint64(3)
            yhi <<= u
            below = np.subtract(phi, inhi, out=u)
            below &= yhi
            below *= np.uint64(255)
            yhi += below
        index -= nf2
    mant = _word_digits(ylo, t)
    if mant is None:
        return None
    if two:
        high = _word_digits(yhi, t)
        if high is None:
            return None
        high *= np.uint64(10**8)
        mant += high
    vals[...] = mant
    slow = None
    if two:
        slow = np.greater(mant, np.uint64(1 << 53), out=sc("slow", shape, bool))
        if most > 16:
            slow |= np.greater(ml, 16, out=sc("flags", shape, bool))
    slow = _signed_scale(f, vals, index, slow)
    return _finish(f, vals, slow, mark)


def _exponents(buf: bytearray, start: int, stop: int) -> bool:
    return buf.find(b"e", start, stop) >= 0 or buf.find(b"E", start, stop) >= 0


class _Reader:
    """Blocks of whole lines read column by column, without a step per line or per number.

    Where the fields are: when every line of a block has one length and its fields sit at the same
    places (the way instruments print; a blank where a sign is not), each field's bytes are strided views
    of the block, checked at the separators (_Strided); otherwise the field ends are every delimiter and
    line break, found by one search over the block (_Gathered). How they are read: a column whose fields
    all have its first line's printed form (digits after the mark, the exponent's form) is read by that
    form (`_templated`); a column of numbers in their shortest form, each its own, field by field
    (`_general`). A block this does not fit (a quote, nan, a wrong field count, a field that is not a
    number) is left to the general parse, which names what is wrong.

    Each thread parsing blocks keeps its own scratch arrays (`_Scratch`), and the values of a block go
    into the arrays of `into` (one `_Scratch` per block in flight, reused once the block is placed), so
    block after block allocates nothing large."""

    def __init__(self, layout: Layout, keep: list[int]) -> None:
        self.ncols = layout.columns
        self.keep = keep
        self.delim = ord(layout.delimiter) if layout.delimiter in ",;\t" else -1
        self.mark = 44 if layout.decimal_comma else 46
        self._plans: dict[bytes, tuple | None] = {}
        self._local = threading.local()

    def _scratch(self) -> _Scratch:
        sc = getattr(self._local, "scratch", None)
        if sc is None:
            sc = self._local.scratch = _Scratch()
        return sc

    def parse(
        self, buf: bytearray, start: int, stop: int, into: _Scratch | None = None
    ) -> tuple[list[np.ndarray], int] | None:
        """(the columns `keep`, the line count) of buf[start:stop] (whole lines), or None. The columns
        are views of arrays in `into` (fresh arrays without it)."""
        got = self._fixed(buf, start, stop, into)
        return got if got is not None else self._delimited(buf, start, stop, into)

    def _values(self, f, form, exponents: bool, vals: np.ndarray) -> np.ndarray | None:
        got = _templated(f, form, self.mark, vals) if form is not None else None
        return got if got is not None else _general(f, self.mark, exponents, vals)

    @staticmethod
    def _out(into: _Scratch | None, k: int, shape: tuple[int, ...]) -> np.ndarray:
        return np.empty(shape) if into is None else into(f"column {k}", shape, np.float64)

    def _fixed(
        self, buf: bytearray, start: int, stop: int, into: _Scratch | None = None
    ) -> tuple[list[np.ndarray], int] | None:
        n = stop - start
        w = buf.find(b"\n", start, stop) + 1 - start
        if w < 2 or n % w:
            return None
        row = bytes(buf[start : start + w])
        if row not in self._plans:
            if len(self._plans) > 64:
                self._plans.clear()
            self._plans[row] = self._plan(row)
        plan = self._plans[row]
        if plan is None:
            return None
        fields, fixed = plan
        rows = n // w
        sc = self._scratch()
        m = np.ndarray((rows, w), np.uint8, buf, start)
        for col, byte in fixed:  # the separators, the blanks before a field, the line end
            if not _all_equal(m[:, col], byte, sc):
                return None
        out = []
        exponents = _exponents(buf, start, stop)
        for k in self.keep:
            s, e, form = fields[k]
            f = _Strided(buf, start, rows, w, s, e, sc)
            vals = self._values(f, form, exponents, self._out(into, k, (rows,)))
            if vals is None:
                return None
            out.append(vals)
        return out, rows

    def _plan(self, row: bytes) -> tuple | None:
        """From a block's first line: each field's (start, end, form) and the bytes every line must
        share (all bytes outside the fields). A field starts at its sign, or at the blank just before
        its first digit (where other lines put a '-')."""
        w = len(row)
        body = row[:-1].rstrip(b"\r")
        if self.delim >= 0:
            parts, at = [], 0
            for piece in body.split(bytes([self.delim])):
                parts.append((at, at + len(piece)))
                at += len(piece) + 1
        else:
            parts = [(mt.start(), mt.end()) for mt in re.finditer(rb"[^ \t]+", body)]
        if len(parts) != self.ncols:
            return None
        fields = []
        inside = np.zeros(w, bool)
        for a, z in parts:
            while a < z and row[a] == 32:
                a += 1
            if a == z:
                return None
            s = a
            if row[a] in (43, 45):
                a += 1
            elif a > 0 and row[a - 1] == 32:
                s = a - 1
            form = _template(row[a:z], self.mark)
            fields.append((s, z, form))
            inside[s:z] = True
        fixed = [(c, row[c]) for c in range(w) if not inside[c]]
        return fields, fixed

    def _delimited(
        self, buf: bytearray, start: int, stop: int, into: _Scratch | None = None
    ) -> tuple[list[np.ndarray], int] | None:
        n = stop - start
        if self.delim < 0 or n < 2:
            return None
        sc = self._scratch()
        b = np.frombuffer(buf, np.uint8, n, start)
        sep = np.equal(b, 10, out=sc("breaks", n, bool))
        lines = int(np.count_nonzero(sep))
        sep |= np.equal(b, self.delim, out=sc("delimiters", n, bool))
        ends = np.flatnonzero(sep)  # the one array a block allocates (numpy's search has no `out`)
        ncols = self.ncols
        rows = len(ends) // ncols
        if rows == 0 or len(ends) % ncols or lines != rows:
            return None
        grid = ends.reshape(rows, ncols)  # positions from `start`
        if not _all_equal(np.take(b, grid[:, -1], out=sc("last", rows, np.uint8), mode="clip"), 10, sc):
            return None
        stops = grid
        if buf.find(b"\r", start, stop) >= 0:  # CR LF line ends: the last field ends before the CR
            stops = sc("stops", (rows, ncols), np.intp)
            np.copyto(stops, grid)
            stops[:, -1] -= 1
            if buf.count(b"\r", start, stop) != rows:
                return None
            if not _all_equal(np.take(b, stops[:, -1], out=sc("last", rows, np.uint8), mode="clip"), 13, sc):
                return None
        forms = {}
        for k in self.keep:
            s0 = int(grid[0, k - 1]) + 1 if k else 0
            tok = bytes(buf[start + s0 : start + int(stops[0, k])])
            forms[k] = _template(tok[1:] if tok[:1] in (b"-", b"+", b" ") else tok, self.mark)
        out: list[np.ndarray] = []
        exponents = _exponents(buf, start, stop)
        keep = list(self.keep)
        while keep:
            k = keep.pop(0)
            m = 1  # columns k .. k+m-1 are read together
            while k and keep and keep[0] == k + m and forms[keep[0]] == forms[k]:
                keep.pop(0)
                m += 1
            s, e = sc("starts", (rows, m), np.intp), sc("ends", (rows, m), np.intp)
            np.copyto(e, stops[:, k : k + m])  # contiguous: every step after reads it
            if k:
                np.add(grid[:, k - 1 : k + m - 1], 1, out=s)  # after the separator before each field
            else:
                s[0] = 0
                np.add(grid[:-1, -1:], 1, out=s[1:])
            f = _Gathered(buf, start, n, s, e, sc)
            vals = self._values(f, forms[k], exponents, self._out(into, k, (rows, m)))
            if vals is None:
                return None
            out += [vals[:, j] for j in range(m)]
        return out, rows


def _exact(tokens: np.ndarray, decimal_comma: bool) -> np.ndarray:
    """Rows of number bytes (blanks around allowed) as doubles by numpy's string conversion, which
    rounds correctly (it agrees with Python's float(); tests/analog/test_read.py checks both)."""
    g = np.ascontiguousarray(tokens)
    if decimal_comma:
        g = np.where(g == 44, np.uint8(46), g)
    with np.errstate(over="ignore", under="ignore"):
        return g.view(f"S{g.shape[1]}").ravel().astype(np.float64)


def _parse_chunk(data: bytes, ncols: int) -> tuple[np.ndarray, int]:
    """All numbers of a chunk of whole lines (delimiters already spaces), checked ncols per line, and
    the number of lines."""
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
        _check_lines(c, starts, ncols)
    return _parse_tokens(c, starts, ends), lines


def _line_of(c: np.ndarray, pos: int) -> int:
    """The line (from 0 at the chunk's first) of byte `pos` of the sentinel-framed chunk `c`."""
    return int(np.count_nonzero(c[1:pos] == 10))


def _check_lines(c: np.ndarray, starts: np.ndarray, ncols: int) -> None:
    """Slow path (a blank line, or a line with the wrong field count): allow blanks, name a bad line."""
    nl = np.flatnonzero(c == 10)
    line = np.searchsorted(nl, starts) - 1  # index of the line each token is on
    counts = np.bincount(line, minlength=len(nl))
    bad = np.flatnonzero((counts != 0) & (counts != ncols))
    if len(bad):
        k = int(bad[0])
        text = bytes(c[nl[k] + 1 : nl[k + 1]]).decode("latin-1").strip() if k + 1 < len(nl) else ""
        raise _LineError(k, f"expected {ncols} fields, found {int(counts[k])} ({text[:60]!r})")


def _parse_tokens(c: np.ndarray, starts: np.ndarray, ends: np.ndarray) -> np.ndarray:
    lens = ends - starts
    first = c[starts]
    signed = (first == 45) | (first == 43)
    if lens.max() > 60:
        k = int(np.argmax(lens > 60))
        raise _LineError(_line_of(c, int(starts[k])), f"a field of {int(lens[k])} characters is not a number")
    # a leading sign is read apart, so a column printed with and without one is one layout
    body = starts + signed
    key = lens - signed
    out = np.empty(len(starts))
    bad = np.zeros(len(starts), bool)
    present = np.flatnonzero(np.bincount(key))
    for width in present.tolist():
        sel = np.flatnonzero(key == width) if len(present) > 1 else None
        if width == 0:  # a sign alone
            bad[sel if sel is not None else slice(None)] = True
            continue
        g = sliding_window_view(c, width)[body if sel is None else body[sel]]
        # most files print a column in one layout: take the first token's, check every token against it
        row0 = g[0].tobytes().lower()
        dot = row0.find(b".") if b"." in row0 else width
        exp = row0.find(b"e") if b"e" in row0 else width
        vals, wrong, slow = _group(g, dot, exp, width)
        if wrong.any():  # tokens in other layouts: group them by where their point and exponent sit
            w = np.flatnonzero(wrong)
            gw = g[w]
            sub = _position(gw == 46, width) * 64 + _position((gw | 32) == 101, width)
            for s_key in np.flatnonzero(np.bincount(sub)):
                part = np.flatnonzero(sub == s_key)
                vals[w[part]], wrong[w[part]], slow[w[part]] = _group(
                    gw[part], int(s_key) // 64, int(s_key) % 64, width
                )
        slow &= ~wrong
        if slow.any():  # beyond one exact division: numpy's correctly rounded conversion
            at = np.flatnonzero(slow)
            vals[at] = _exact(g[at], False)
        if sel is None:
            out, bad = vals, wrong
        else:
            out[sel] = vals
            bad[sel] = wrong
    negative = first == 45
    if negative.any():
        np.negative(out, out=out, where=negative)
    if bad.any():
        _specials(c, starts, ends, out, bad)
    return out


def _position(hit: np.ndarray, width: int) -> np.ndarray:
    """Column of the first hit per row (width when none)."""
    pos = np.argmax(hit, axis=1).astype(np.int64)
    pos[~hit[np.arange(len(hit)), pos]] = width
    return pos


def _group(g: np.ndarray, dot: int, exp: int, width: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Unsigned tokens of one layout: fixed columns of mantissa digits, point, exponent.

    (values, not of this layout, needing the exact conversion): a value is one division or product of
    exact doubles while the mantissa has at most 15 digits and the power of ten is within 10**22."""
    mant_cols = [j for j in range(min(exp, width)) if j != dot]
    frac = max(exp - dot - 1, 0) if dot < exp else 0
    n = len(g)
    if not mant_cols:
        return np.zeros(n), np.ones(n, bool), np.zeros(n, bool)
    # the mantissa's digits sit in at most two runs of columns (before and after the point)
    runs = [(0, min(dot, exp, width)), (dot + 1, min(exp, width))] if dot < exp else [(0, min(exp, width))]
    bad = np.zeros(n, bool)
    for a, b in runs:
        if b > a:
            digits = g[:, a:b] - np.uint8(48)  # bytes below '0' wrap round to above 9
            if digits.max() > 9:  # a max is cheaper than a comparison; rows only when something is wrong
                bad |= (digits > 9).any(axis=1)
    if dot < exp:
        point_ok = g[:, dot] == 46
        if not point_ok.all():
            bad |= ~point_ok
    long = len(mant_cols) > 15
    mant = _mantissa(g, mant_cols[-15:]) if long else _mantissa(g, mant_cols)
    slow = np.full(n, long)
    if exp < width:
        power = np.full(n, -frac, np.int64)
        bad |= (g[:, exp] | 32) != 101
        e0 = exp + 1
        esign = np.ones(n, np.int64)
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
            return np.zeros(n), bad, slow
        if edig.max() > 9:
            bad |= (edig > 9).any(axis=1)
        ev = edig[:, 0].astype(np.int64)
        for j in range(1, edig.shape[1]):
            ev *= 10
            ev += edig[:, j]
        power += esign * ev
        slow |= np.abs(power) > 22
        np.clip(power, -22, 22, out=power)
        if power.max() > 0:
            mant *= _MUL10[power + 22]
        if power.min() < 0:
            mant /= _DIV10[power + 22]
        return mant, bad, slow
    if frac > 22:
        slow[:] = True
        return mant, bad, slow
    return (mant / _POW10[frac] if frac else mant), bad, slow


def _mantissa(g: np.ndarray, cols: list[int]) -> np.ndarray:
    """The integer the digit columns `cols` (at most 15) spell (bytes '0'..'9'; others give garbage,
    checked apart).

    Horner's rule on the raw bytes, the '0' offsets taken off once at the end: exact while the sum of
    bytes times powers of ten stays below 2**53, which holds for up to 15 digits."""
    acc = g[:, cols[0]].astype(np.float64)
    for j in cols[1:]:
        acc *= 10.0
        acc += g[:, j]
    acc -= 48.0 * float("1" * len(cols))
    return acc


def _specials(c, starts, ends, out, bad) -> None:
    """Tokens the layouts did not cover: nan / inf are taken, anything else is an error."""
    if bad.sum() > 100_000:
        raise _LineError(None, "more than 100000 fields are not plain numbers")
    for k in np.flatnonzero(bad):
        tok = bytes(c[starts[k] : ends[k]]).decode("latin-1")
        value = _SPECIAL.get(tok.lower())
        if value is None:
            raise _LineError(_line_of(c, int(starts[k])), f"{tok[:40]!r} is not a number")
        out[k] = value

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
the digits are read as 64-bit words, eight digits per word by three multiply-and-shift steps (the SWAR
method), and a few numpy passes per column, never a Python step per line or per number. A block this
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
import mmap
import re
from collections import deque
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view

from benchlog.errors import DataError

CHUNK_BYTES = 1 << 20
_PAD = 40  # bytes kept before a block, so the words a field is read from can start before it
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
    """(buffer, start, stop) of whole lines in file order, about CHUNK_BYTES at a time.

    Each block is read into one of `buffers` reused bytearrays (so a block is not copied), with _PAD
    bytes before `start`; the caller keeps at most `buffers - 1` blocks in use. A last line without a
    line break gets one."""
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
            if len(buf) < _PAD + len(carry) + step + 1:
                buf = pool[k % buffers] = bytearray(_PAD + len(carry) + step + 1)
            start = _PAD + len(carry)
            buf[_PAD:start] = carry
            got = f.readinto(memoryview(buf)[start : start + step])
            end = start + got
            if not got:  # the end of the file: what is left is the last line
                if end > _PAD:
                    if buf[end - 1] != 10:
                        buf[end] = 10
                        end += 1
                    yield buf, _PAD, end
                return
            cut = buf.rfind(b"\n", start, end) + 1
            if cut == 0:  # no line ends in this read
                carry = bytes(buf[_PAD:end])
                continue
            carry = bytes(buf[cut:end])
            k += 1
            yield buf, _PAD, cut


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
    row = 0
    line_no = layout.first_line
    read = 0

    def parse(buf: bytearray, start: int, stop: int) -> tuple[list[np.ndarray], int]:
        got = reader.parse(buf, start, stop)
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
            est = int(remaining / max(size, 1) * n * 1.02) + 1024 if n else bound
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

    blocks = _blocks(path, layout.data_offset, max(workers, 1) + 2)
    if workers <= 1:
        for buf, start, stop in blocks:
            place(lambda b=buf, s=start, e=stop: parse(b, s, e), stop - start)
    else:
        with ThreadPoolExecutor(max_workers=workers) as pool:
            pending: deque = deque()
            try:
                for buf, start, stop in blocks:
                    pending.append((pool.submit(parse, buf, start, stop), stop - start))
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
_M64 = (1 << 64) - 1
_Z3 = np.uint64(0x3030303030303030)  # '0' in every byte: XOR turns digit bytes into 0..9
_H80 = np.uint64(0x8080808080808080)
_L7F = np.uint64(0x7F7F7F7F7F7F7F7F)
_S76 = np.uint64(0x7676767676767676)  # a byte 0..9 plus 0x76 stays below 0x80; 10 and above do not
# exponents read by table: the letter and its sign as the low 8 or 16 bits give the sign (0: not an
# exponent); one digit's byte or two digits' bytes (the first the low byte) give their value (< 0: not)
_EPLAIN = np.zeros(256, np.int32)
_EPLAIN[[69, 101]] = 1
_ESIGNED = np.zeros(1 << 16, np.int32)
for _letter in (69, 101):
    _ESIGNED[_letter | 43 << 8], _ESIGNED[_letter | 45 << 8] = 1, -1
_EDIGIT = np.full(256, -100_000, np.int32)
_EDIGIT[48:58] = np.arange(10)
_EDIGITS = np.full(1 << 16, -100_000, np.int32)
_EDIGITS[(48 + np.arange(100) // 10) | (48 + np.arange(100) % 10) << 8] = np.arange(100)
_KEEP = np.array([(_M64 << (8 * (8 - k))) & _M64 for k in range(9)], np.uint64)  # the last k bytes
_LOW = np.array([(1 << (8 * k)) - 1 for k in range(9)], np.uint64)  # the first k bytes


def _runs(end: int, count: int) -> list[tuple[int, int]]:
    """A run of `count` digits ending at `end` (counted from the field's end, so not above 0), as runs
    of at most 8, left to right."""
    out = []
    while count > 0:
        take = count % 8 or 8
        out.append((end - count + take, take))
        count -= take
    return out


def _word_digits(y: np.ndarray) -> np.ndarray | None:
    """The integers spelled by words of digit values 0..9 (0 where no digit is; first digit in the lowest
    byte), or None if a byte is above 9. `y` is overwritten.

    A multiply adds each byte's neighbour shifted up by one byte (pairs), then each pair's (fours), then
    each four's (eights); a shift and a mask keep the sums. No sum carries out of its lane."""
    t = y + _S76
    if (np.bitwise_or.reduce(t, axis=None) | np.bitwise_or.reduce(y, axis=None)) & _H80:
        return None
    del t
    y *= np.uint64(1 + (10 << 8))
    y >>= np.uint64(8)
    y &= np.uint64(0x00FF00FF00FF00FF)
    y *= np.uint64(1 + (100 << 16))
    y >>= np.uint64(16)
    y &= np.uint64(0x0000FFFF0000FFFF)
    y *= np.uint64(1 + (10000 << 32))
    y >>= np.uint64(32)
    return y


def _zero_bytes(z: np.ndarray) -> np.ndarray:
    """0x80 in each byte of `z` that is zero, 0 in every other (exact: no borrow crosses a byte)."""
    t = z & _L7F
    t += _L7F
    t |= z
    t |= _L7F
    return np.invert(t, out=t)


def _bytes_above(p: np.ndarray) -> np.ndarray:
    """For words holding one set bit at the foot of byte j (or none): 7 - j (0 when none)."""
    q = p << np.uint64(8)
    q -= np.uint64(1)
    np.invert(q, out=q)
    return np.bitwise_count(q) >> np.uint8(3)


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

    def __init__(self, buf: bytearray, start: int, rows: int, w: int, s: int, e: int) -> None:
        self.buf, self.start, self.rows, self.w, self.s, self.e = buf, start, rows, w, s, e
        self.n = rows
        self.length = e - s
        self.first = np.ndarray((rows,), np.uint8, buf, start + s, (w,))

    def word(self, back: int) -> np.ndarray:
        """The 8 bytes that end `back` bytes before each field's end (a view of the block: never written
        to)."""
        return np.ndarray((self.rows,), "<u8", self.buf, self.start + self.e - back - 8, (self.w,))

    def byte(self, back: int) -> np.ndarray:
        return np.ndarray((self.rows,), np.uint8, self.buf, self.start + self.e - back - 1, (self.w,))

    def word_at(self, back: np.ndarray) -> np.ndarray:
        """The 8 bytes that end `back[i]` bytes before field i's end."""
        at = np.arange(self.rows) * self.w + (self.start + self.e - 8) - back
        return np.ndarray((len(self.buf) - 7,), "<u8", self.buf, 0, (1,))[at]

    def text(self, at: np.ndarray) -> np.ndarray:
        """Rows of the fields `at` (their bytes, sign included)."""
        m = np.ndarray((self.rows, self.w), np.uint8, self.buf, self.start)
        return m[at, self.s : self.e]


class _Gathered:
    """Fields anywhere in a block: field i runs from `s[i]` to `e[i]` (positions from the block's start,
    `e` the delimiter or line break after it; arrays of any shape, the values come out in that shape);
    its bytes are gathered. A gather costs about the same for 8 bytes as for 16 (numpy's cost is per
    element), so the last 16 bytes of every field are gathered once and the words ending up to 8 bytes
    before its end are cut from them."""

    def __init__(self, buf: bytearray, start: int, n: int, s: np.ndarray, e: np.ndarray) -> None:
        self.buf, self.start, self.s, self.e = buf, start, s, e
        self.n = e.size
        self.length = e - s
        self.block = np.frombuffer(buf, np.uint8, n, start)
        self.first = self.block[s]
        # item k covers bytes k .. k+7 (k+15) of buf: the one ending at block position p is start + p - 8
        self._words = np.ndarray((start + n - 7,), "<u8", buf, 0, (1,))
        self._pairs = np.ndarray((start + n - 15,), "V16", buf, 0, (1,))
        self._last16: np.ndarray | None = None
        self._last8: np.ndarray | None = None

    def word(self, back: int) -> np.ndarray:
        """The 8 bytes that end `back` bytes before each field's end (not to be written to)."""
        if back == 0 and self._last16 is None:
            if self._last8 is None:
                self._last8 = self._words[self.e + (self.start - 8)]
            return self._last8
        if 0 <= back <= 8:
            if self._last16 is None:
                got = self._pairs[self.e + (self.start - 16)]
                self._last16 = got.view(np.uint64).reshape(*got.shape, 2)
            high, low = self._last16[..., 1], self._last16[..., 0]  # the last 8 bytes, the 8 before
            if back == 0:
                return high
            if back == 8:
                return low
            w = high << np.uint64(8 * back)
            w |= low >> np.uint64(64 - 8 * back)
            return w
        return self._words[self.e + (self.start - 8 - back)]

    def byte(self, back: int) -> np.ndarray:
        return self.block[self.e - (back + 1)]

    def word_at(self, back: np.ndarray) -> np.ndarray:
        at = self.e + (self.start - 8)
        at -= back
        return self._words[at]

    def text(self, at: np.ndarray) -> np.ndarray:
        s = self.s.reshape(-1)[at]
        lens = self.e.reshape(-1)[at] - s
        width = int(lens.max())
        text = np.full((len(at), width), 32, np.uint8)
        for j in range(width):
            inside = lens > j
            text[inside, j] = self.block[s[inside] + j]
        return text


def _templated(f, form: tuple[bool, int, int, bool, int], mark: int) -> np.ndarray | None:
    """The values of fields `f` all written as `form` (from `_template`), or None if one is not.

    The form fixes every byte's place counted from the field's end, so only the count of digits before
    the mark varies (at most 8): the mantissa is gathered as one 64-bit word per field (the mark squeezed
    out when it fits one word), the bytes not of the field masked, every byte checked to be a digit and
    the word turned into its integer by three multiply-and-shift steps (the SWAR method); the exponent's
    letter, sign and digits are read by table from the field's last word. A value is mant / 10**k or
    mant * 10**k: one correctly rounded operation on exact doubles while mant < 2**53 and k <= 22;
    other values (longer mantissas, far exponents) go to numpy's own string conversion, which is
    correctly rounded too."""
    has_mark, frac, exp_len, exp_signed, exp_digits = form
    first = f.first
    neg = first == 45
    signed = neg | (first == 43)
    signed |= first == 32  # a blank where a sign is not (the way instruments print)
    tail = (frac + 1 if has_mark else 0) + exp_len
    if isinstance(f.length, int) and (signed.all() or not signed.any()):  # one digit count for all
        lo = hi = f.length - int(signed[(0,) * signed.ndim]) + frac - tail
        digits = np.full(1, lo)
    else:
        digits = f.length - signed
        digits += frac - tail  # the mantissa's digits per field
        lo, hi = int(digits.min()), int(digits.max())
    if lo < max(frac, 1) or hi > 8 + frac or hi > 19:
        return None
    if has_mark and hi <= 7:  # the whole mantissa in one word: squeeze the mark out
        m = 8 * (7 - frac)  # the mark's bit offset
        y = f.word(exp_len) ^ np.uint64(0x3030303030303030 ^ ((mark ^ 0x30) << m))  # digits 0..9, mark 0
        if (int(np.bitwise_or.reduce(y, axis=None)) >> m) & 0xFF:
            return None
        low = y & np.uint64((1 << m) - 1)
        low *= np.uint64(255)
        y += low  # the bytes below the mark moved up one byte
        del low
        y &= _KEEP[lo] if lo == hi else np.take(_KEEP, digits)
        mant = _word_digits(y)
    else:
        back = exp_len + (frac + 1 if has_mark else 0)
        if has_mark and not (f.byte(back - 1) == mark).all():
            return None
        y = f.word(back) ^ _Z3
        y &= _KEEP[lo - frac] if lo == hi else np.take(_KEEP, digits - frac)
        mant = _word_digits(y)
        for end, count in _runs(-exp_len, frac):
            if mant is None:
                break
            y = f.word(-end) ^ _Z3
            y &= _KEEP[count]
            part = _word_digits(y)
            if part is None:
                return None
            mant *= np.uint64(10**count)
            mant += part
    if mant is None:
        return None
    vals = mant.astype(np.float64)
    slow = mant > np.uint64(1 << 53) if hi > 15 else None  # beyond an exact double
    del mant
    if exp_len:
        # the exponent's text (letter, sign, digits) as the low bytes of one word, read by table
        h = f.word(0) >> np.uint64(8 * (8 - exp_len))
        if h.min() == h.max():  # one exponent for the whole block (a time column within a decade)
            one = int(h[(0,) * h.ndim])
            text = bytes((one >> (8 * i)) & 0xFF for i in range(exp_len)).decode("latin-1")
            if _template(b"1" + text.encode("latin-1"), mark) is None:
                return None
            p = int(text[1:]) - frac
            if -22 <= p <= 22:
                if p > 0:
                    vals *= _MUL10[22 + p]
                elif p < 0:
                    vals /= _DIV10[22 + p]
                return _finish(f, vals, neg, slow, mark)
        lead = 2 if exp_signed else 1
        letter = _ESIGNED if exp_signed else _EPLAIN
        sign = np.take(letter, (h & np.uint64((1 << (8 * lead)) - 1)).view(np.int64))
        h >>= np.uint64(8 * lead)
        text = h.view(np.int64)
        if exp_digits == 3:
            power = np.take(_EDIGIT, text & 0xFF)
            power *= 100
            h >>= np.uint64(8)
            power += np.take(_EDIGITS, text)
        else:
            power = np.take(_EDIGITS if exp_digits == 2 else _EDIGIT, text)
        if not sign.all() or power.min() < 0:
            return None
        power *= sign
        power += 22 - frac  # an index into _MUL10 and _DIV10
        _scale(vals, power, slow)
        slow = _far(power, slow)
    elif frac:
        vals /= _DIV10[22 - frac]
    return _finish(f, vals, neg, slow, mark)


def _far(power: np.ndarray, slow: np.ndarray | None) -> np.ndarray | None:
    far = (power < 0) | (power > 44)
    if not far.any():
        return slow
    return far if slow is None else slow | far


def _scale(vals: np.ndarray, power: np.ndarray, slow) -> None:
    """vals * 10**(power - 22), one correctly rounded operation (powers beyond +-22: see _far)."""
    lo, hi = int(power.min()), int(power.max())
    if lo == hi and 0 <= lo <= 44:
        vals *= _MUL10[lo]
        vals /= _DIV10[lo]
        return
    if lo < 0 or hi > 44:
        power = np.clip(power, 0, 44)
        lo, hi = max(lo, 0), min(hi, 44)
    if hi > 22:
        vals *= np.take(_MUL10, power)  # np.take: a gather faster than indexing
    if lo < 22:
        vals /= np.take(_DIV10, power)


_SIGNS = np.ones(256)
_SIGNS[45] = -1.0


def _finish(f, vals: np.ndarray, neg: np.ndarray, slow: np.ndarray | None, mark: int) -> np.ndarray | None:
    """The signs set and the values beyond one exact operation converted from their text."""
    first = f.first
    if neg.any():  # the values are not negative yet: -0 becomes -0.0, as float() gives
        vals *= np.take(_SIGNS, first)
    if slow is not None and slow.any():
        at = np.flatnonzero(slow)
        try:
            vals.reshape(-1)[at] = _exact(f.text(at), mark == 44)
        except ValueError:  # not a number after all: the general parse names it
            return None
    return vals


def _general(f, mark: int, exponents: bool = True) -> np.ndarray | None:
    """The values of fields `f` each in its own form (a sign or a blank, digits with or without a mark
    anywhere, an exponent or none: numbers printed in their shortest form), or None where one is not a
    number of up to 16 mantissa digits. `exponents`: whether the block holds an 'e' or 'E' at all.

    Per field and all vectorised: the exponent letter is found among the last 8 bytes (a zero byte of
    the word XOR 'e', case folded), its sign and up to 3 digits read from the same word; the mantissa
    (at most 16 bytes) is two words ending where it ends, the one decimal mark in it found the same way
    and squeezed out (the bytes before it move up one byte, across the two words), and the digits become
    integers by the SWAR steps, which check that every other byte is a digit. Values are exact as in
    `_templated`."""
    length = f.length if isinstance(f.length, np.ndarray) else np.full(f.n, f.length, np.int64)
    first = f.first
    neg = first == 45
    signed = neg | (first == 43)
    signed |= first == 32
    ml = length - signed  # the mantissa's bytes, the exponent taken off below
    if not exponents and int(ml.max()) > 8:
        f.word(8)  # both words in one gather
    x = f.word(0)
    keep = np.take(_KEEP, np.minimum(ml, 8))  # the field's bytes (sign off) among the last 8
    power: np.ndarray | None = None
    back: np.ndarray | None = None
    hits = None
    if exponents:
        z = x | np.uint64(0x2020202020202020)
        z ^= np.uint64(0x6565656565656565)  # a zero byte where 'e' or 'E' is
        hits = _zero_bytes(z)
        del z
        hits &= keep
        hits &= np.uint64(0x00FFFFFFFFFFFFFF)  # a letter is followed by a digit
        if not hits.any():
            hits = None
    if hits is not None:
        hits &= ~hits + np.uint64(1)  # the lowest: the text's first letter
        hits -= np.uint64(1)
        j = np.bitwise_count(hits).astype(np.int64)
        del hits
        j >>= 3  # the letter's byte (8: none)
        back = 8 - j  # the exponent's length, letter to end (0: none)
        q = x >> (8 * (j + 1)).astype(np.uint64)  # the bytes after the letter
        c = q & np.uint64(0xFF)
        eneg = c == 45
        esig = eneg | (c == 43)
        q >>= esig.astype(np.uint64) * np.uint64(8)
        nd = back - 1 - esig  # the exponent's digits
        if (nd > 3).any() or ((nd < 1) & (back > 0)).any():
            return None
        np.maximum(nd, 0, out=nd)
        q ^= _Z3
        q &= np.take(_LOW, nd)
        if (int(np.bitwise_or.reduce((q + _S76) | q, axis=None)) & 0x808080) != 0:
            return None
        q <<= (8 * (3 - nd)).astype(np.uint64)  # digits to the top of 3 bytes
        power = (q & np.uint64(0xFF)).astype(np.int64) * 100
        power += ((q >> np.uint64(8)) & np.uint64(0xFF)).astype(np.int64) * 10
        power += (q >> np.uint64(16)).astype(np.int64)
        np.negative(power, out=power, where=eneg)
        ml -= back
        keep = np.take(_KEEP, np.minimum(ml, 8))
    if ml.min() < 1:
        return None
    long = ml > 16
    two = int(ml.max()) > 8
    marks = np.uint64(0x0101010101010101 * (mark ^ 0x30))
    ylo = x if back is None else f.word_at(back)
    ylo = ylo ^ _Z3
    ylo &= keep
    del keep
    plo = _zero_bytes(ylo ^ marks)  # 0x80 at the mark (bytes outside the field are 0: not a mark)
    plo >>= np.uint64(7)  # 1 at the foot of the mark's byte
    count = np.bitwise_count(plo)
    if two:
        yhi = f.word(8) if back is None else f.word_at(back + 8)
        yhi = yhi ^ _Z3
        yhi &= np.take(_KEEP, np.clip(ml - 8, 0, 8))
        phi = _zero_bytes(yhi ^ marks)
        phi >>= np.uint64(7)
        count += np.bitwise_count(phi)
    nf = None
    if count.any():
        if int(count.max()) > 1 or (ml - count).min() < 1:
            return None
        # clear the mark, then squeeze the digits before it up one byte
        markx = np.uint64(mark ^ 0x30)
        ylo ^= plo * markx
        nf = _bytes_above(plo)
        inlo = plo != 0
        below = plo - inlo  # the bytes below the mark (0 when the mark is not in this word)
        below &= ylo
        below *= np.uint64(255)
        ylo += below
        if two:
            yhi ^= phi * markx
            inhi = phi != 0
            nf += np.where(inhi, 8 + _bytes_above(phi), 0).astype(np.uint8)
            # a mark in the low word: the high word's last byte moves down into it
            carry = (yhi >> np.uint64(56)) * inlo
            ylo |= carry
            yhi <<= inlo.astype(np.uint64) * np.uint64(8)
            below = phi - inhi
            below &= yhi
            below *= np.uint64(255)
            yhi += below
        del below
    mant = _word_digits(ylo)
    if mant is None:
        return None
    if two:
        high = _word_digits(yhi)
        if high is None:
            return None
        high *= np.uint64(10**8)
        mant += high
        del high
    vals = mant.astype(np.float64)
    slow = long | (mant > np.uint64(1 << 53)) if two else (long if long.any() else None)
    del mant
    if power is not None or nf is not None:
        p = np.full(vals.shape, 22, np.int64) if power is None else power + 22
        if nf is not None:
            p -= nf
        _scale(vals, p, slow)
        slow = _far(p, slow)
    return _finish(f, vals, neg, slow, mark)


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
    number) is left to the general parse, which names what is wrong."""

    def __init__(self, layout: Layout, keep: list[int]) -> None:
        self.ncols = layout.columns
        self.keep = keep
        self.delim = ord(layout.delimiter) if layout.delimiter in ",;\t" else -1
        self.mark = 44 if layout.decimal_comma else 46
        self._plans: dict[bytes, tuple | None] = {}

    def parse(self, buf: bytearray, start: int, stop: int) -> tuple[list[np.ndarray], int] | None:
        """(the columns `keep`, the line count) of buf[start:stop] (whole lines), or None."""
        got = self._fixed(buf, start, stop)
        return got if got is not None else self._delimited(buf, start, stop)

    def _values(self, f, form, exponents: bool) -> np.ndarray | None:
        vals = _templated(f, form, self.mark) if form is not None else None
        return vals if vals is not None else _general(f, self.mark, exponents)

    def _fixed(self, buf: bytearray, start: int, stop: int) -> tuple[list[np.ndarray], int] | None:
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
        m = np.ndarray((rows, w), np.uint8, buf, start)
        for col, byte in fixed:  # the separators, the blanks before a field, the line end
            if not (m[:, col] == byte).all():
                return None
        out = []
        exponents = _exponents(buf, start, stop)
        for k in self.keep:
            s, e, form = fields[k]
            vals = self._values(_Strided(buf, start, rows, w, s, e), form, exponents)
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

    def _delimited(self, buf: bytearray, start: int, stop: int) -> tuple[list[np.ndarray], int] | None:
        n = stop - start
        if self.delim < 0 or n < 2:
            return None
        b = np.frombuffer(buf, np.uint8, n, start)
        sep = b == 10
        lines = int(np.count_nonzero(sep))
        sep |= b == self.delim
        ends = np.flatnonzero(sep)
        del sep
        ncols = self.ncols
        rows = len(ends) // ncols
        if rows == 0 or len(ends) % ncols or lines != rows:
            return None
        grid = ends.reshape(rows, ncols)  # positions from `start`
        if not (b[grid[:, -1]] == 10).all():
            return None
        stops = grid
        if buf.find(b"\r", start, stop) >= 0:  # CR LF line ends: the last field ends before the CR
            stops = grid.copy()
            stops[:, -1] -= 1
            if buf.count(b"\r", start, stop) != rows or not (b[stops[:, -1]] == 13).all():
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
            if k:
                s = grid[:, k - 1 : k + m - 1] + 1  # after the separator before each field
                e = stops[:, k : k + m]
            else:
                s = np.empty((rows, 1), np.int64)
                s[0] = 0
                s[1:, 0] = grid[:-1, -1]
                s[1:] += 1
                e = stops[:, :1]
            vals = self._values(_Gathered(buf, start, n, s, e), forms[k], exponents)
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

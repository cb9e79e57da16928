"""A numeric CSV reader for oscilloscope and data-logger exports, vectorised over bytes.

How it works. The head of the file is sniffed with ordinary string code: the first line that is all
numbers (and the few after it agree) starts the data; the lines above are the header, of any number
and length, where column names and "interval" / "sample rate" / "start" entries are looked for. The
data is then read in blocks of whole lines (about CHUNK_BYTES each, read into reused buffers), parsed
by two threads and placed in file order. When every line of a block has one length and its fields sit
at the same places (the way instruments print), the block is a byte matrix (_FixedWidth): one range
check over all its bytes, then each run of up to 8 digit columns becomes integers through one 64-bit
word per line (the SWAR method), with no token search and no translation. When lines differ in length
but each column keeps one printed form (numbers in their shortest form: no blank for a missing sign,
any count of whole digits), the block is read column by column from the field ends (_Delimited): one
search for the delimiters, then one 64-bit word per field, read the same way. Otherwise the block goes
through one `bytes.translate` (the delimiter becomes a space, a decimal comma a point), numpy finds
every token (a run of bytes above the space character) and parses all tokens of one layout at once:
tokens are grouped by length, sign, and the position of the point and of the exponent, each group a
fixed-width byte matrix read by Horner's rule. Either way a few numpy passes per block, never a Python
step per line or per number. Every line must have the same number of fields; the first line that does
not, or a field that is not a number, is named in a one-line DataError.

Every value is the correctly rounded double of its text, as Python's float() gives: one division or
product of exact doubles (a mantissa below 2**53, a power of ten within 10**22), and numpy's own
correctly rounded string conversion for the rest (longer mantissas, far exponents).
"""

from __future__ import annotations

import itertools
import re
from collections import deque
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view

from benchlog.errors import DataError

CHUNK_BYTES = 1 << 20
_PAD = 16  # bytes kept before a block, so an 8-byte word can end at any column of its first line
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
    reader = _FixedWidth(layout, keep)
    delimited = _Delimited(layout, keep)
    row = 0
    line_no = layout.first_line
    read = 0

    def parse(buf: bytearray, start: int, stop: int) -> tuple[list[np.ndarray], int]:
        cols = reader.parse(buf, start, stop)
        if cols is not None:
            return cols, (stop - start) // reader.width(buf, start, stop)
        got = delimited.parse(buf, start, stop)
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
            out = [np.empty(min(bound, est), np.float64) for _ in keep]
        if row + n > len(out[0]):
            if row + n > bound:
                raise DataError(f"{path}: the file changed while it was read")
            grown = [np.empty(bound, np.float64) for _ in keep]
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


# Fixed-width blocks. A sign column may hold a blank, '+' or '-'; an exponent's sign '+' or '-'.
_SIGN = np.zeros(256, np.int8)
_SIGN[[32, 43]], _SIGN[45] = 1, -1
_ESIGN = np.zeros(256, np.int8)
_ESIGN[43], _ESIGN[45] = 1, -1
# mant * _MUL10[p + 22] / _DIV10[p + 22] is mant * 10**p with one rounding for |p| <= 22 (10**22 is the
# largest power of ten a double holds exactly; the other factor is 1.0)
_MUL10 = np.array([10.0 ** max(k - 22, 0) for k in range(45)])
_DIV10 = np.array([10.0 ** max(22 - k, 0) for k in range(45)])
_M64 = (1 << 64) - 1


@dataclass(frozen=True, slots=True)
class _Field:
    band: tuple[int, int]  # columns of the field, its sign column included
    sign: int  # column of the sign (blank, + or -), or -1
    runs: tuple[tuple[int, int], ...]  # mantissa digits: (end column, count), at most 8 per run
    digits: int
    frac: int  # mantissa digits after the decimal mark
    exp_sign: int  # column of the exponent's sign, or -1
    exp: tuple[int, int] | None  # exponent digits: (end column, count)


def _runs(end: int, count: int) -> list[tuple[int, int]]:
    """A run of `count` digits ending before column `end`, as runs of at most 8, left to right."""
    out = []
    while count > 0:
        take = count % 8 or 8
        out.append((end - count + take, take))
        count -= take
    return out


class _FixedWidth:
    """Blocks whose lines all have one length and one layout, read as a byte matrix.

    Instruments print each column with a fixed format, so every line has the same bytes at the same
    places. The first line of a block gives the template: each column is a digit, a sign (blank, + or
    -; a blank just before a number counts, as printers put the minus there), or one fixed byte (the
    decimal mark, the exponent letter, a delimiter, a blank, the line break). One pass over the block
    checks every byte against the range its column allows; then each run of up to 8 digit columns is
    read as one little-endian 64-bit word per line and turned into its integer by three multiply-and-
    shift steps (the digits combined pairwise, then in fours, then in eights). A value is mant / 10**k
    (or mant * 10**k): one correctly rounded division of two exact doubles while mant < 2**53 and
    k <= 22; other values (longer mantissas, far exponents) go to numpy's own string conversion, which
    is correctly rounded too. Anything else (lines of other lengths, a blank line, nan, a field that
    moves) leaves the block to the general parse."""

    def __init__(self, layout: Layout, keep: list[int]) -> None:
        self.ncols = layout.columns
        self.keep = keep
        self.mark = 44 if layout.decimal_comma else 46
        self.seps = {32, 9, 13, 34} | ({ord(layout.delimiter)} if layout.delimiter != " " else set())
        self._plans: dict[bytes, tuple | None] = {}
        self._tiles: dict[bytes, tuple[np.ndarray, np.ndarray]] = {}

    @staticmethod
    def width(buf: bytearray, start: int, stop: int) -> int:
        return buf.find(b"\n", start, stop) + 1 - start

    def plan(self, row: bytes) -> tuple | None:
        if row in self._plans:
            return self._plans[row]
        found = self._plan(row)
        if len(self._plans) > 64:
            self._plans.clear()
        self._plans[row] = found
        return found

    def _plan(self, row: bytes) -> tuple | None:
        """(fields, low byte per column, allowed span per column) from one line, or None."""
        w = len(row)
        lo = np.frombuffer(row, np.uint8).copy()
        span = np.zeros(w, np.uint8)
        is_sep = [b in self.seps for b in row[:-1]] + [True]
        fields: list[_Field] = []
        j = 0
        while j < w - 1:
            if is_sep[j]:
                j += 1
                continue
            s = j
            while not is_sep[j]:
                j += 1
            f = self._field(row, s, j, is_sep, lo, span)
            if f is None:
                return None
            fields.append(f)
        if len(fields) != self.ncols:
            return None
        return tuple(fields), lo, span

    def _field(self, row: bytes, s: int, e: int, is_sep: list[bool], lo, span) -> _Field | None:
        sign = -1
        if row[s] in (43, 45):
            sign, s = s, s + 1
        elif s >= 1 and row[s - 1] == 32 and (s == 1 or is_sep[s - 2]):
            sign = s - 1
        i = s
        while i < e and 48 <= row[i] <= 57:
            i += 1
        whole = i - s
        frac = 0
        mark = -1
        if i < e and row[i] == self.mark:
            mark = i
            i += 1
            while i < e and 48 <= row[i] <= 57:
                i += 1
            frac = i - mark - 1
        mant_end = i
        exp_sign, exp = -1, None
        if i < e and row[i] in (69, 101):
            i += 1
            if i < e and row[i] in (43, 45):
                exp_sign, i = i, i + 1
            if not 1 <= e - i <= 3 or not all(48 <= b <= 57 for b in row[i:e]):
                return None
            exp = (e, e - i)
            i = e
        digits = whole + frac
        if i != e or digits == 0 or digits > 19 or (exp is None and frac > 22):
            return None
        for a, b in ((s, s + whole), (mant_end - frac, mant_end) if frac else (0, 0)):
            lo[a:b], span[a:b] = 48, 9
        if exp is not None:
            lo[exp[0] - exp[1] : exp[0]], span[exp[0] - exp[1] : exp[0]] = 48, 9
        if sign >= 0:
            lo[sign], span[sign] = 32, 13  # blank .. '-', the rest checked by _SIGN
        if exp_sign >= 0:
            lo[exp_sign], span[exp_sign] = 43, 2  # '+' .. '-', the ',' between checked by _ESIGN
        runs = _runs(s + whole, whole) + _runs(mant_end, frac) if frac else _runs(s + whole, whole)
        band = (sign if sign >= 0 else s, e)
        return _Field(band, sign, tuple(runs), digits, frac, exp_sign, exp)

    def _tiled(self, lo: np.ndarray, span: np.ndarray, rows: int) -> tuple[np.ndarray, np.ndarray]:
        key = lo.tobytes() + span.tobytes()
        got = self._tiles.get(key)
        if got is None or len(got[0]) < rows * len(lo):
            if len(self._tiles) > 8:
                self._tiles.clear()
            got = self._tiles[key] = (np.tile(lo, rows), np.tile(span, rows))
        return got

    def parse(self, buf: bytearray, start: int, stop: int) -> list[np.ndarray] | None:
        """The columns `keep` of a block (buf[start:stop], whole lines), or None if it is not fixed."""
        w = self.width(buf, start, stop)
        size = stop - start
        if w < 2 or size % w:
            return None
        plan = self.plan(bytes(buf[start : start + w]))
        if plan is None:
            return None
        fields, lo, span = plan
        rows = size // w
        flat = np.frombuffer(buf, np.uint8, size, start)
        lo_t, span_t = self._tiled(lo, span, rows)
        # every byte in its column's range; no column but the last allows a line break
        diff = np.subtract(flat, lo_t[:size])
        if np.greater(diff, span_t[:size], out=diff.view(bool)).any():
            return None
        del diff
        out = []
        for k in self.keep:
            vals = self._values(buf, start, w, rows, fields[k])
            if vals is None:
                return None
            out.append(vals)
        return out

    def _values(self, buf: bytearray, start: int, w: int, rows: int, f: _Field) -> np.ndarray | None:
        mant: np.ndarray | None = None
        for end, count in f.runs:
            part = _digits(buf, start, w, rows, end, count)
            mant = part if mant is None else mant * np.uint64(10**count) + part
        assert mant is not None
        vals = mant.astype(np.float64)
        slow = mant > np.uint64(1 << 53) if f.digits > 15 else None
        if f.exp is None:
            if f.frac:
                vals /= 10.0**f.frac
        else:
            power = _digits(buf, start, w, rows, *f.exp).astype(np.int16)
            if f.exp_sign >= 0:
                es = np.take(_ESIGN, _column(buf, start, w, rows, f.exp_sign))
                if not es.all():
                    return None
                power *= es
            power += 22 - f.frac  # an index into _MUL10 and _DIV10
            lo, hi = int(power.min()), int(power.max())
            if lo < 0 or hi > 44:
                far = (power < 0) | (power > 44)
                slow = far if slow is None else slow | far
                np.clip(power, 0, 44, out=power)
                lo, hi = max(lo, 0), min(hi, 44)
            if hi > 22:
                vals *= np.take(_MUL10, power)  # np.take: a gather faster than indexing
            if lo < 22:
                vals /= np.take(_DIV10, power)
        if f.sign >= 0:
            sign = np.take(_SIGN, _column(buf, start, w, rows, f.sign))
            if not sign.all():
                return None
            vals *= sign
        if slow is not None and slow.any():
            at = np.flatnonzero(slow)
            m = np.frombuffer(buf, np.uint8, rows * w, start).reshape(rows, w)
            vals[at] = _exact(m[at, f.band[0] : f.band[1]], self.mark == 44)
        return vals


def _column(buf: bytearray, start: int, w: int, rows: int, col: int) -> np.ndarray:
    return np.ndarray((rows,), np.uint8, buf, start + col, (w,))


def _digits(buf: bytearray, start: int, w: int, rows: int, end: int, count: int) -> np.ndarray:
    """The integer spelled by the `count` (1..8) digit columns before column `end`, per line.

    Bytes are read as one little-endian word per line ending at `end` (the _PAD bytes before a block
    make room for the first line's), the bytes before the run cleared, and the digits combined in
    pairs, fours and eights by a multiply and a shift each (the SWAR method)."""
    if count == 1:
        return np.subtract(_column(buf, start, w, rows, end - 1), np.uint8(48))
    if count == 2:
        a = _column(buf, start, w, rows, end - 2) - np.uint8(48)
        a *= np.uint8(10)
        a += _column(buf, start, w, rows, end - 1)
        a -= np.uint8(48)
        return a
    if count <= 4:
        word = np.ndarray((rows,), "<u4", buf, start + end - 4, (w,))
        keep = (0xFFFFFFFF << (8 * (4 - count))) & 0xFFFFFFFF
        x = np.bitwise_and(word, np.uint32(keep)).astype(np.uint32, copy=False)
        x -= np.uint32(0x30303030 & keep)
        t = x >> np.uint32(8)
        x *= np.uint32(10)
        x += t
        x &= np.uint32(0x00FF00FF)
        np.right_shift(x, np.uint32(16), out=t)
        x *= np.uint32(100)
        x += t
        x &= np.uint32(0xFFFF)
        return x
    word = np.ndarray((rows,), "<u8", buf, start + end - 8, (w,))
    keep = (_M64 << (8 * (8 - count))) & _M64
    x = np.bitwise_and(word, np.uint64(keep)).astype(np.uint64, copy=False)
    x -= np.uint64(0x3030303030303030 & keep)
    t = x >> np.uint64(8)
    x *= np.uint64(10)
    x += t
    x &= np.uint64(0x00FF00FF00FF00FF)
    np.right_shift(x, np.uint64(16), out=t)
    x *= np.uint64(100)
    x += t
    x &= np.uint64(0x0000FFFF0000FFFF)
    np.right_shift(x, np.uint64(32), out=t)
    x *= np.uint64(10000)
    x += t
    x &= np.uint64(0xFFFFFFFF)
    return x


# Delimited blocks. The digits of a field are read from little-endian 64-bit words that end where the
# field (or a part of it) ends; a word's last byte is its most significant.
_Z3 = np.uint64(0x3030303030303030)  # '0' in every byte: XOR turns digit bytes into 0..9
_H80 = np.uint64(0x8080808080808080)
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


def _word_digits(y: np.ndarray) -> np.ndarray | None:
    """The integers spelled by words of digit values 0..9 (0 where no digit is; first digit in the lowest
    byte), or None if a byte is above 9. `y` is overwritten.

    A multiply adds each byte's neighbour shifted up by one byte (pairs), then each pair's (fours), then
    each four's (eights); a shift and a mask keep the sums. No sum carries out of its lane."""
    t = y + _S76
    if (np.bitwise_or.reduce(t) | np.bitwise_or.reduce(y)) & _H80:
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
    return (has_mark, frac, exp_len, exp_signed, exp_digits) if i == n else None


class _Delimited:
    """Blocks of lines of any length, fields between single-byte delimiters: read column by column.

    The field ends are every delimiter and line break (one np.flatnonzero over the block); each line
    must hold `columns` fields. A column is read right to left: its first line gives the template
    (digits after the decimal mark, the exponent's form), which fixes every byte's place counted from
    the field's end, so only the count of digits before the mark varies from line to line (at most 8).
    The mantissa is gathered as one 64-bit word per field (the mark squeezed out when it fits one word),
    the bytes not of the field masked, every byte checked to be a digit and the word turned into its
    integer by three multiply-and-shift steps; the exponent's letter, sign and digits are read by table
    from the field's last word. Adjacent columns with one template are read as one. Values are exact as
    in _FixedWidth (one division or product of exact doubles; numpy's string conversion for the rest).
    A block this does not fit (a blank, a quote, nan, a field in another form, a wrong field count) is
    left to the general parse, which names what is wrong."""

    def __init__(self, layout: Layout, keep: list[int]) -> None:
        self.ncols = layout.columns
        self.keep = keep
        self.delim = ord(layout.delimiter) if layout.delimiter in ",;\t" else -1
        self.mark = 44 if layout.decimal_comma else 46

    def parse(self, buf: bytearray, start: int, stop: int) -> tuple[list[np.ndarray], int] | None:
        """(the columns `keep`, the line count) of buf[start:stop] (whole lines), or None."""
        n = stop - start
        if self.delim < 0 or n < 2 or start < 8:
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
        after = np.ndarray((n - 1,), np.uint8, buf, start + 1)  # after[p]: the byte after position p
        forms = {}
        for k in self.keep:
            s0 = int(grid[0, k - 1]) + 1 if k else 0
            tok = bytes(buf[start + s0 : start + int(stops[0, k])])
            forms[k] = _template(tok[1:] if tok[:1] in (b"-", b"+") else tok, self.mark)
            if forms[k] is None:
                return None
        out: list[np.ndarray] = []
        keep = list(self.keep)
        while keep:
            k = keep.pop(0)
            m = 1  # columns k .. k+m-1 are read together
            while k and keep and keep[0] == k + m and forms[keep[0]] == forms[k]:
                keep.pop(0)
                m += 1
            if k:
                prev = grid[:, k - 1 : k + m - 1].ravel()  # the separator before each field
                e = stops[:, k : k + m].ravel()
            else:
                prev = np.empty(rows, np.int64)
                prev[0] = -1
                prev[1:] = grid[:-1, -1]
                e = stops[:, 0].copy()
            first = after[prev]
            if not k:
                first[0] = buf[start]
            vals = self._column(buf, start, n, forms[k], first, prev, e)
            if vals is None:
                return None
            if m == 1:
                out.append(vals)
            else:
                grouped = vals.reshape(rows, m)
                out += [grouped[:, j] for j in range(m)]
        return out, rows

    def _column(self, buf, start: int, n: int, form, first, prev, e) -> np.ndarray | None:
        """The values of the fields between `prev` + 1 and `e` (positions from `start`) written as
        `form`; `first`: each field's first byte."""
        has_mark, frac, exp_len, exp_signed, exp_digits = form
        neg = first == 45
        signed = neg | (first == 43)
        tail = (frac + 1 if has_mark else 0) + exp_len
        digits = e - prev
        digits -= 1 + tail - frac
        digits -= signed  # the mantissa's digits per field
        lo, hi = int(digits.min()), int(digits.max())
        if lo < max(frac, 1) or hi > 8 + frac or hi > 19:
            return None

        def words_to(back: int, at: np.ndarray) -> np.ndarray:
            """The 8 bytes that end `back` bytes before each position `at`."""
            if start >= 8 + back:
                return np.ndarray((n,), "<u8", buf, start - 8 - back, (1,))[at]
            return np.ndarray((n,), "<u8", buf, start - 8, (1,))[at - back]

        if has_mark and hi <= 7:  # the whole mantissa in one word: squeeze the mark out
            y = words_to(exp_len, e)
            m = 8 * (7 - frac)  # the mark's bit offset
            y ^= np.uint64(0x3030303030303030 ^ ((self.mark ^ 0x30) << m))  # digits to 0..9, the mark to 0
            if (int(np.bitwise_or.reduce(y)) >> m) & 0xFF:
                return None
            low = y & np.uint64((1 << m) - 1)
            low *= np.uint64(255)
            y += low  # the bytes below the mark moved up one byte
            del low
            y &= np.take(_KEEP, digits)
            mant = _word_digits(y)
        else:
            back = exp_len + (frac + 1 if has_mark else 0)
            if has_mark and not (_byte_at(buf, start, n, e - back) == self.mark).all():
                return None
            y = words_to(back, e)
            y ^= _Z3
            y &= np.take(_KEEP, digits - frac)
            mant = _word_digits(y)
            for end, count in _runs(-exp_len, frac):
                if mant is None:
                    break
                y = words_to(-end, e)
                y ^= _Z3
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
            h = words_to(0, e)
            h >>= np.uint64(8 * (8 - exp_len))
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
            lo, hi = int(power.min()), int(power.max())
            if lo < 0 or hi > 44:
                far = (power < 0) | (power > 44)
                slow = far if slow is None else slow | far
                np.clip(power, 0, 44, out=power)
                lo, hi = max(lo, 0), min(hi, 44)
            if hi > 22:
                vals *= np.take(_MUL10, power)
            if lo < 22:
                vals /= np.take(_DIV10, power)
        elif frac:
            vals /= _POW10[frac]
        if neg.any():  # set the sign bit (the values are not negative yet: -0 stays -0.0, as float() gives)
            bits = neg.astype(np.uint64)
            bits <<= np.uint64(63)
            vals.view(np.uint64)[:] |= bits
        if slow is not None and slow.any():
            at = np.flatnonzero(slow)
            s = prev[at] + 1
            lens = e[at] - s
            width = int(lens.max())
            text = np.full((len(at), width), 32, np.uint8)
            b = np.frombuffer(buf, np.uint8, n, start)
            for j in range(width):
                inside = lens > j
                text[inside, j] = b[s[inside] + j]
            vals[at] = _exact(text, self.mark == 44)
        return vals


def _byte_at(buf, start: int, n: int, at: np.ndarray) -> np.ndarray:
    """The bytes at positions `at` (from `start`) of a block of `n` bytes."""
    return np.frombuffer(buf, np.uint8, n, start)[at]


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

"""The block reader on lines of any length (`_csv._Reader`, fields found by their delimiters): a column in
one printed form, or each field in its own (numbers in their shortest form, as %g prints them).

The reference for every value is Python's own `float()` on the printed text (correctly rounded decimal
conversion), and `numpy.loadtxt` on a small file; where the reader hands a block on to the general
parse, the result must not change.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from benchlog.analog import _csv as csv_reader
from benchlog.analog import read_capture
from benchlog.errors import DataError


def _delimited_block(path, layout) -> list[np.ndarray] | None:
    """The block reader's columns for the whole data of `path` as one block, fields found by their
    delimiters (None: not taken)."""
    buf = bytearray(csv_reader._PAD) + path.read_bytes()[layout.data_offset :]
    if buf[-1] != 10:
        buf += b"\n"
    reader = csv_reader._Reader(layout, list(range(layout.columns)))
    got = reader._delimited(buf, csv_reader._PAD, len(buf))
    return None if got is None else got[0]


def _same_bits(a: np.ndarray, b: np.ndarray) -> bool:
    """Equal as doubles bit for bit (so -0.0 differs from 0.0)."""
    return a.shape == b.shape and bool((np.ascontiguousarray(a).view(np.int64) == b.view(np.int64)).all())


_FORMS = [
    "{:.4f}",
    "{:.6E}",
    "{:.3e}",
    "{:.15e}",
    "{:.16E}",
    "{:+.2f}",
    "{:.0f}",
    "{:.1f}",
    "{:.9f}",
    "{:.7f}",
]


@settings(max_examples=120, deadline=None)
@given(
    st.lists(
        st.tuples(st.floats(-1e6, 1e6, allow_nan=False), st.floats(allow_nan=False, allow_infinity=False)),
        min_size=1,
        max_size=80,
    ),
    st.sampled_from(_FORMS),
    st.sampled_from(["{:.6E}", "{:.3e}", "{:.0e}", "{:.2e}"]),
    st.sampled_from([(",", ".", "\n"), (";", ",", "\n"), ("\t", ".", "\n"), (",", ".", "\r\n")]),
)
def test_unpadded_lines_are_exactly_float(tmp_path_factory, pairs, fmt_a, fmt_b, convention):
    # shortest-form lines (no blank for a missing sign, any count of whole digits); reference: float()
    delim, mark, eol = convention
    rows = [(fmt_a.format(a), fmt_b.format(b)) for a, b in pairs]
    texts = [(a.replace(".", mark), b.replace(".", mark)) for a, b in rows]
    path = tmp_path_factory.mktemp("d") / "d.csv"
    body = eol.join(f"{i}{delim}{a}{delim}{b}" for i, (a, b) in enumerate(texts)) + eol
    path.write_bytes(f"Sample Interval{delim}1e-6{eol}Index{delim}a{delim}b{eol}{body}".encode())
    ref = [np.array([float(r[k]) for r in rows]) for k in range(2)]  # reference: Python's float()
    layout = csv_reader.sniff(path)
    got = _delimited_block(path, layout)
    whole_digits = max(len(a.split(".")[0].lstrip("+-")) for a, _ in rows)
    # 'e+99' and 'e+100' are two forms
    exponents = [
        {len(r[k].lower().split("e")[1]) if "e" in r[k].lower() else 0 for r in rows} for k in (0, 1)
    ]
    if whole_digits <= 8 and all(len(x) == 1 for x in exponents):
        assert got is not None  # every row of a column printed in one form: this reader takes it
    if got is not None:
        assert _same_bits(got[0], np.arange(len(rows), dtype=np.float64))
        assert _same_bits(got[1], ref[0]) and _same_bits(got[2], ref[1])
    cap = read_capture(str(path))
    assert _same_bits(cap.volts[0], ref[0]) and _same_bits(cap.volts[1], ref[1])


def test_the_benchmark_shape_is_taken_and_exact(tmp_path):
    # the unpadded scope export of tests/benchmarks/bench_scope.py; reference: Python's float()
    rng = np.random.default_rng(3)
    t = (np.arange(3000) - 1000) * 1e-7
    v = rng.normal(0, 3, (3000, 2))
    lines = [f"{a:.6E},{b:.4f},{c:.4f}" for a, (b, c) in zip(t, v, strict=True)]
    path = tmp_path / "u.csv"
    path.write_text(
        "Benchmark capture\nSample Interval,1.000000E-07\nTime,CH1,CH2\n" + "\n".join(lines) + "\n"
    )
    assert len({len(x) for x in lines}) > 1
    got = _delimited_block(path, csv_reader.sniff(path))
    assert got is not None
    ref = np.array([[float(f) for f in x.split(",")] for x in lines])  # reference: Python's float()
    for k in range(3):
        assert _same_bits(got[k], ref[:, k])
    assert _same_bits(np.array([float("-0.0000")]), np.array([-0.0]))
    zero = tmp_path / "z.csv"
    zero.write_text("t,v\n0,-0.0000\n1,0.0000\n2,-1.5000\n")
    got = _delimited_block(zero, csv_reader.sniff(zero))
    assert got is not None and _same_bits(got[1], np.array([float("-0.0000"), 0.0, -1.5]))


@pytest.mark.parametrize(
    ("body", "why"),
    [
        ("1,2.5\n2,nan\n", "nan"),
        ("1,  2.5\n2,3.5\n", "two blanks"),
        ('1,"2.5"\n2,3.5\n', "a quote"),
    ],
)
def test_blocks_it_cannot_read_are_left_to_the_general_parse(tmp_path, body, why):
    path = tmp_path / "x.csv"
    path.write_text("t,v\n" + body)
    assert _delimited_block(path, csv_reader.sniff(path)) is None, why
    cap = read_capture(str(path), time_column=None, interval_s=1.0)
    ref = [float(x.split(",")[1].strip().strip('"')) for x in body.splitlines()]  # reference: float()
    assert np.array_equal(cap.volts[1], ref, equal_nan=True)


@pytest.mark.parametrize(
    "body",
    [
        "1,2.5\n2,2.5e3\n",  # a field in another form
        "1, 2.5\n2,3.5\n",  # a blank where a sign is not
        "1,123456789.5\n2,3.5\n",  # more than 8 whole digits
        "1,5\n2,-0.000123457\n3,4.99\n4,1e-07\n5,-12345.6\n6,.5\n7,5.\n8,+7E+300\n9,3.3e-310\n",
    ],
)
def test_fields_each_in_its_own_form_are_read_field_by_field(tmp_path, body):
    path = tmp_path / "x.csv"
    path.write_text("t,v\n" + body)
    got = _delimited_block(path, csv_reader.sniff(path))
    assert got is not None
    ref = np.array([float(x.split(",")[1]) for x in body.splitlines()])  # reference: Python's float()
    assert _same_bits(got[1], ref)


_SHORTEST = ["{!r}", "{:g}", "{:.3g}", "{:.12g}", "{:.4f}", "{:.2e}", "{:.9f}", "{:+g}"]


@settings(max_examples=80, deadline=None)
@given(
    st.lists(
        st.tuples(
            st.floats(-1e5, 1e5, allow_nan=False),
            st.sampled_from(_SHORTEST),
            st.floats(allow_nan=False, allow_infinity=False, width=32),
            st.sampled_from(_SHORTEST),
        ),
        min_size=1,
        max_size=120,
    ),
    st.sampled_from([(",", ".", "\n"), (";", ",", "\n"), ("\t", ".", "\r\n")]),
)
def test_shortest_form_lines_are_exactly_float(tmp_path_factory, rows, convention):
    # every field in its own form (repr, %g, fixed, scientific, any sign): each row picks a format per
    # field, so no column has one printed form; reference: Python's float() on each field
    delim, mark, eol = convention
    texts = [(fa.format(a), fb.format(b)) for a, fa, b, fb in rows]
    path = tmp_path_factory.mktemp("s") / "s.csv"
    lines = [
        f"{i}{delim}{x.replace('.', mark)}{delim}{y.replace('.', mark)}" for i, (x, y) in enumerate(texts)
    ]
    path.write_bytes((f"Sample Interval{delim}1e-6" + eol + eol.join(lines) + eol).encode())
    got = _delimited_block(path, csv_reader.sniff(path))
    assert got is not None  # taken by the vectorised reader, not the per-token general parse
    for k in (0, 1):
        ref = np.array([float(t[k]) for t in texts])  # reference: Python's float()
        assert _same_bits(got[k + 1], ref)
    cap = read_capture(str(path), time_column=0)
    assert _same_bits(cap.volts[0], np.array([float(t[0]) for t in texts]))


def test_shortest_form_capture_agrees_with_numpy_loadtxt(tmp_path):
    # a small %g export (semicolons, decimal comma); reference: numpy.loadtxt on the same file, read with
    # the decimal comma turned into a point (loadtxt's float conversion is correctly rounded)
    rng = np.random.default_rng(17)
    t = (np.arange(2000) - 700) * 1e-7
    places = rng.integers(0, 6, (2000, 2))
    v = np.array([[round(x, int(k)) for x, k in zip(r, p, strict=True)] for r, p in zip(
        rng.normal(2.5, 2.6, (2000, 2)), places, strict=True)])  # fmt: skip
    body = "".join(f"{a:g};{b:g};{c:g}\n" for a, (b, c) in zip(t, v, strict=True))
    path = tmp_path / "g.csv"
    path.write_text("Time [s];CH1;CH2\n" + body.replace(".", ","))
    assert len({len(x) for x in body.splitlines()}) > 5
    ref = np.loadtxt(body.splitlines(), delimiter=";")  # reference: numpy.loadtxt
    got = _delimited_block(path, csv_reader.sniff(path))
    assert got is not None
    for k in range(3):
        assert _same_bits(got[k], ref[:, k])
    cap = read_capture(str(path))
    assert _same_bits(cap.volts[0], ref[:, 1]) and _same_bits(cap.volts[1], ref[:, 2])


@pytest.mark.parametrize(
    ("k", "bad", "message"),
    [
        (7000, "4.2x17", "is not a number"),
        (123, "4.2,17", "expected 3 fields, found 4"),
        (9999, "", "expected 3 fields, found 2"),
        (4500, "-", "is not a number"),
    ],
)
def test_a_bad_field_in_unpadded_lines_names_its_line(tmp_path, monkeypatch, k, bad, message):
    monkeypatch.setattr(csv_reader, "CHUNK_BYTES", 4096)  # many blocks: the line count carries across
    rng = np.random.default_rng(5)
    lines = [f"{i * 1e-6:.3E},{a:.3f},{b:.2f}" for i, (a, b) in enumerate(rng.normal(0, 20, (12000, 2)))]
    lines[k] = ",".join(lines[k].split(",")[:2] + ([bad] if bad else []))
    path = tmp_path / "bad.csv"
    path.write_text("Time,a,b\n" + "\n".join(lines) + "\n")
    with pytest.raises(DataError) as err:
        read_capture(str(path))
    assert f"line {k + 2}:" in str(err.value) and message in str(err.value)
    assert "\n" not in str(err.value)


def test_long_mantissas_and_far_exponents_in_unpadded_lines(tmp_path):
    # mantissas past 2**53 and powers of ten past 10**22 take numpy's string conversion; reference: float()
    rng = np.random.default_rng(11)
    whole = rng.integers(1, 10**8, 400)
    frac = rng.integers(0, 10**9, 400)
    a = [
        f"{w}.{f:09d}" if i % 3 else f"-{w}.{f:09d}" for i, (w, f) in enumerate(zip(whole, frac, strict=True))
    ]
    b = [f"{m / 1e15:.15e}".replace("e+00", f"e{e:+03d}") for m, e in zip(rng.integers(10**15, 10**16, 400),
         rng.integers(-99, 99, 400), strict=True)]  # fmt: skip
    path = tmp_path / "l.csv"
    path.write_text("i,a,b\n" + "".join(f"{i},{x},{y}\n" for i, (x, y) in enumerate(zip(a, b, strict=True))))
    got = _delimited_block(path, csv_reader.sniff(path))
    assert got is not None
    assert _same_bits(got[1], np.array([float(x) for x in a]))  # reference: Python's float()
    assert _same_bits(got[2], np.array([float(y) for y in b]))

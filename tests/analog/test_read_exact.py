"""Every value the block reader parses is bit for bit the double Python's float() gives for its text.

Fields in their shortest form (%g at every precision, repr), fixed and scientific forms, signs, decimal
comma, exponents of one to three digits, each row's fields in their own forms (read field by field) and
a column in one form (read by that form); and strings within a few units in the last place of the
exact midpoint between two neighbouring doubles, where a parser that rounds twice (a product by a
rounded 10**-k, say) lands one unit in the last place (ulp) off. Values are compared as 64-bit
patterns, so one ulp (or -0.0 against 0.0) fails.

Reference: Python's float(), correctly rounded decimal conversion (David M. Gay's algorithm in CPython);
the midpoints are exact, computed with the standard library's decimal module.
"""

from __future__ import annotations

import decimal
import math

import numpy as np
from hypothesis import example, given, settings
from hypothesis import strategies as st

from benchlog.analog import _csv as csv_reader


def _same_bits(a: np.ndarray, b: np.ndarray) -> bool:
    """Equal as doubles bit for bit (one ulp apart is unequal; so is -0.0 against 0.0)."""
    a, b = np.ascontiguousarray(a, np.float64), np.ascontiguousarray(b, np.float64)
    return a.shape == b.shape and bool((a.view(np.int64) == b.view(np.int64)).all())


@st.composite
def near_halfway(draw) -> str:
    """A decimal string of 15 to 17 significant digits next to the midpoint of two neighbouring
    doubles."""
    x = draw(st.floats(min_value=1e-300, max_value=1e300))
    with decimal.localcontext(decimal.Context(prec=1000)):
        mid = (decimal.Decimal(x) + decimal.Decimal(math.nextafter(x, math.inf))) / 2
        text = format(mid, draw(st.sampled_from([".14e", ".15e", ".16e", ".15g", ".16g", ".17g"])))
    return ("-" if draw(st.booleans()) else "") + text


_FORMS = st.one_of(
    st.integers(1, 17).map(lambda p: f"{{:.{p}g}}"),
    st.just("{!r}"),
    st.just("{:+g}"),
    st.integers(0, 9).map(lambda d: f"{{:.{d}f}}"),
    st.integers(0, 16).map(lambda d: f"{{:.{d}e}}"),
    st.integers(0, 6).map(lambda d: f"{{:+.{d}E}}"),
)
_FIELD = st.one_of(
    st.tuples(st.floats(-1e7, 1e7, allow_nan=False), _FORMS).map(lambda vf: vf[1].format(vf[0])),
    st.tuples(st.floats(allow_nan=False, allow_infinity=False), _FORMS.filter(lambda f: "f" not in f)).map(
        lambda vf: vf[1].format(vf[0])
    ),
    near_halfway(),
)
# (delimiter, decimal mark, line end)
_CONVENTIONS = [(",", ".", "\n"), (";", ",", "\n"), ("\t", ".", "\r\n"), (";", ",", "\r\n")]


def _check(tmp_path_factory, rows: list[list[str]], convention) -> None:
    delim, mark, eol = convention
    body = eol.join(delim.join([str(i)] + [x.replace(".", mark) for x in r]) for i, r in enumerate(rows))
    path = tmp_path_factory.mktemp("x") / "x.csv"
    path.write_bytes(("i" + delim + delim.join("abc") + eol + body + eol).encode())
    ncols = 1 + len(rows[0])
    offset = len("i" + delim + delim.join("abc") + eol)
    layout = csv_reader.Layout(offset, 2, delim, mark == ",", ncols, ("",) * ncols, ())
    ref = [np.array([float(r[k]) for r in rows]) for k in range(ncols - 1)]  # reference: Python's float()
    # the comparison sees one ulp: a value moved to its neighbouring double is unequal (toward zero from
    # a positive value, so the largest double does not step out of range)
    assert not _same_bits(np.nextafter(ref[0], np.where(ref[0] > 0, -np.inf, np.inf)), ref[0])
    # the block reader itself (not the per-token parse it hands blocks it cannot read to)
    buf = bytearray(csv_reader._PAD) + path.read_bytes()[offset:]
    got = csv_reader._Reader(layout, list(range(ncols)))._delimited(buf, csv_reader._PAD, len(buf))
    assert got is not None
    for k in range(ncols - 1):
        assert _same_bits(got[0][k + 1], ref[k]), (k, [(r[k], float(r[k])) for r in rows])
    # and the whole read: blocks, threads, the arrays each block's values are placed from
    cols = csv_reader.read_columns(path, layout, list(range(ncols)), workers=2)
    for k in range(ncols - 1):
        assert _same_bits(cols[k + 1], ref[k])


@settings(max_examples=150, deadline=None)
@given(
    st.lists(st.tuples(_FIELD, _FIELD), min_size=1, max_size=150),
    st.tuples(st.lists(st.floats(allow_nan=False, allow_infinity=False), min_size=150, max_size=150), _FORMS),
    st.sampled_from(_CONVENTIONS),
)
# the largest double in the first column: its neighbour toward infinity is no double (the test's own
# one-ulp check overflowed there; a search found it)
@example([("0.0", "0.0"), ("1.7976931348623157e+308", "0.0")], ([0.0] * 150, "{!r}"), _CONVENTIONS[0])
def test_each_field_in_its_own_form_is_exactly_float(tmp_path_factory, pairs, column, convention):
    # two columns with each field in its own form (read field by field) and one column in one form
    values, form = column
    if "f" in form:
        values = [max(-1e7, min(1e7, v)) for v in values]
    rows = [[a, b, form.format(c)] for (a, b), c in zip(pairs, values, strict=False)]
    _check(tmp_path_factory, rows, convention)


@settings(max_examples=100, deadline=None)
@given(
    st.lists(st.tuples(near_halfway(), near_halfway()), min_size=1, max_size=200),
    st.sampled_from(_CONVENTIONS),
)
def test_strings_next_to_a_midpoint_between_doubles_are_exactly_float(tmp_path_factory, pairs, convention):
    _check(tmp_path_factory, [[a, b, a] for a, b in pairs], convention)


def test_shortest_form_of_many_random_doubles_is_exactly_float(tmp_path_factory):
    # a few thousand %g fields at each precision, mostly of at most 15 digits (one exact division),
    # as loggers print them; reference: Python's float()
    rng = np.random.default_rng(29)
    x = rng.normal(0, 3, 6000) * 10.0 ** rng.integers(-6, 6, 6000)
    rows = [[f"{v:.{p}g}", f"{v:g}", f"{-v:.4f}"] for v, p in zip(x, rng.integers(1, 17, 6000), strict=True)]
    for convention in _CONVENTIONS[:2]:
        _check(tmp_path_factory, rows, convention)

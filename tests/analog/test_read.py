"""Readers: CSV as scopes and loggers export it, .npz and WAV.

The reference for every parsed number is Python's own `float()` (correctly rounded decimal conversion,
David M. Gay's algorithm in CPython), and for WAV the stdlib `wave` module that wrote the file.
"""

from __future__ import annotations

import wave

import numpy as np
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from benchlog.analog import _csv as csv_reader
from benchlog.analog import read_capture
from benchlog.errors import DataError


def write(path, text: str) -> str:
    path.write_bytes(text.encode("latin-1"))
    return str(path)


def test_comma_csv_with_header_time_column_and_scientific_notation(tmp_path):
    t = (np.arange(1000) - 200) * 1e-7
    a = np.sin(np.arange(1000) / 50) * 4.5
    b = -np.arange(1000) * 1.25e-3
    lines = ["Model,bench scope", "Record Length,1000", "Sample Interval,1.000000E-07", "Time,CH1,CH2"]
    lines += [f"{x:.6E},{y:.5e},{z:.4f}" for x, y, z in zip(t, a, b, strict=True)]
    cap = read_capture(write(tmp_path / "s.csv", "\r\n".join(lines) + "\r\n"))
    assert cap.names == ("CH1", "CH2")
    assert cap.t_s is None  # an even grid
    assert cap.t0_s == pytest.approx(-2e-5, abs=1e-12) and cap.dt_s == pytest.approx(1e-7, rel=1e-9)
    # each value is exactly what float() gives for the printed text (Python's float() as reference)
    assert np.array_equal(cap.volts[0], [float(f"{y:.5e}") for y in a])
    assert np.array_equal(cap.volts[1], [float(f"{z:.4f}") for z in b])


def test_semicolon_decimal_comma_index_and_interval_in_header(tmp_path):
    rows = [f"{i};{(0.5 * i):.3f};{-(i * 1e-3):.2e}".replace(".", ",") for i in range(300)]
    text = "Logger export\nSample rate: 250 kS/s\nStart: 0,001 s\nIndex;U1 [V];U2 [V]\n" + "\n".join(rows)
    cap = read_capture(write(tmp_path / "log.csv", text))  # no newline at the end either
    assert cap.names == ("U1 [V]", "U2 [V]")
    assert cap.dt_s == pytest.approx(4e-6) and cap.t0_s == pytest.approx(1e-3)
    assert np.array_equal(cap.volts[0], [float(f"{0.5 * i:.3f}") for i in range(300)])
    assert np.array_equal(cap.volts[1], [float(f"{-(i * 1e-3):.2e}") for i in range(300)])


def test_time_column_in_milliseconds_and_uneven_time(tmp_path):
    text = "time (ms),v\n" + "\n".join(f"{i * 0.01:.2f},{i % 7}" for i in range(100))
    cap = read_capture(write(tmp_path / "ms.csv", text))
    assert cap.dt_s == pytest.approx(1e-5) and cap.t_s is None
    uneven = "t,v\n" + "\n".join(f"{i + (i % 3) * 0.3},{i}" for i in range(50))
    cap = read_capture(write(tmp_path / "u.csv", uneven))
    assert cap.t_s is not None and cap.times_s(np.array([4]))[0] == pytest.approx(4.3)


def test_any_header_length_and_tabs(tmp_path):
    header = "\n".join(f"# setting {i}\tvalue {'x' * (i * 37 % 500)}" for i in range(400))
    long_line = "note\t" + "y" * 200_000
    rows = "\n".join(f"{i * 2e-6:e}\t{np.cos(i):.6f}" for i in range(2000))
    cap = read_capture(write(tmp_path / "tab.txt", header + "\n" + long_line + "\nTime\tVolts\n" + rows))
    assert cap.names == ("Volts",) and len(cap) == 2000
    assert cap.volts[0][1999] == float(f"{np.cos(1999):.6f}")


def test_chunk_boundaries_do_not_matter(tmp_path, monkeypatch):
    rows = "\n".join(f"{i * 1e-6:.9e},{(i * 7919) % 1000 / 100 - 5:.3f},{-i}" for i in range(300))
    path = write(tmp_path / "c.csv", "t,a,b\n" + rows + "\n")
    whole = read_capture(path)
    layout = csv_reader.sniff(tmp_path / "c.csv")
    for chunk in (7, 64, 1000, 4099):
        monkeypatch.setattr(csv_reader, "CHUNK_BYTES", chunk)
        part = read_capture(path)
        for x, y in zip(whole.volts, part.volts, strict=True):
            assert np.array_equal(x, y)
        # one thread or several: the same columns in the same order
        one = csv_reader.read_columns(tmp_path / "c.csv", layout, [0, 1, 2], workers=1)
        three = csv_reader.read_columns(tmp_path / "c.csv", layout, [0, 1, 2], workers=3)
        assert all(np.array_equal(a, b) for a, b in zip(one, three, strict=True))
        assert np.array_equal(one[1], whole.volts[0])


@settings(max_examples=60, deadline=None)
@given(
    st.lists(
        st.floats(allow_nan=False, allow_infinity=False, min_value=-1e30, max_value=1e30),
        min_size=1,
        max_size=60,
    ),
    st.sampled_from(["{:.6e}", "{:.3f}", "{:g}", "{!r}", "{:.15g}", "{:+.4E}", "{:.0f}"]),
)
def test_numbers_match_float_on_random_values(tmp_path_factory, values, fmt):
    # reference: Python's float() on the same text
    texts = [fmt.format(v) for v in values]
    path = tmp_path_factory.mktemp("h") / "r.csv"
    path.write_text("Sample Interval,1e-6\nv\n" + "\n".join(texts) + "\n")
    cap = read_capture(str(path))
    ref = np.array([float(x) for x in texts])  # reference: Python's float() on the same text
    assert _same_bits(cap.volts[0], ref)


def _same_bits(a: np.ndarray, b: np.ndarray) -> bool:
    """Equal as doubles bit for bit (so -0.0 differs from 0.0)."""
    return a.shape == b.shape and bool((a.view(np.int64) == b.view(np.int64)).all())


_ANY_DOUBLE = st.floats(allow_nan=False, allow_infinity=False)


@settings(max_examples=80, deadline=None)
@given(
    st.lists(st.tuples(_ANY_DOUBLE, _ANY_DOUBLE), min_size=1, max_size=40),
    st.sampled_from(["{!r}", "{:.17g}", "{:.20e}", "{:.3e}", "{:.15e}", "{:.16E}", "{:.25g}", "{:.6e}"]),
    st.sampled_from([(",", "."), (";", ","), ("\t", ".")]),
)
def test_variable_width_numbers_are_exactly_float(tmp_path_factory, pairs, fmt, convention):
    # long mantissas and exponents far beyond 10**22 included; reference: Python's float() on the text
    delim, mark = convention
    rows = [(fmt.format(a).replace(".", mark), fmt.format(b).replace(".", mark)) for a, b in pairs]
    path = tmp_path_factory.mktemp("v") / "v.csv"
    body = "\n".join(delim.join(r) for r in rows)
    path.write_text(f"Sample Interval{delim}1e-6\na{delim}b\n{body}\n")
    cap = read_capture(str(path), time_column=None)
    for k in range(2):
        assert _same_bits(cap.volts[k], np.array([float(r[k].replace(",", ".")) for r in rows]))


@settings(max_examples=80, deadline=None)
@given(
    st.lists(_ANY_DOUBLE, min_size=1, max_size=50),
    st.sampled_from(["{: .6E}", "{:+.17e}", "{: .20e}", "{: .3E}", "{: 10.4f}", "{:+.0e}", "{: .15e}"]),
    st.sampled_from([(",", "."), (";", ",")]),
    st.integers(0, 3),
)
def test_fixed_width_numbers_are_exactly_float(tmp_path_factory, values, fmt, convention, pad):
    # every line one length, as an instrument prints: the byte-matrix reader; reference: Python's float()
    delim, mark = convention
    texts = [fmt.format(v).replace(".", mark) for v in values]
    width = max(len(t) for t in texts)
    texts = [t.rjust(width) for t in texts]
    assume(width <= 60)  # longer fields are refused by design ("a field of N characters is not a number")
    lines = [f"{i:6d}{delim}{' ' * pad}{t}{delim}{t}" for i, t in enumerate(texts)]
    if len({len(x) for x in lines}) != 1:
        return
    path = tmp_path_factory.mktemp("f") / "f.csv"
    body = "\n".join(lines)
    path.write_text(f"Sample Interval{delim}1e-6\nIndex{delim}a{delim}b\n{body}\n")
    layout = csv_reader.sniff(path)
    ref = np.array([float(t.replace(",", ".")) for t in texts])
    fixed = _fixed_block(path, layout)
    if fixed is not None:  # the byte-matrix reader took it (it hands nothing it cannot read exactly on)
        assert _same_bits(fixed[1], ref) and _same_bits(fixed[2], ref)
    cap = read_capture(str(path))
    assert _same_bits(cap.volts[0], ref) and _same_bits(cap.volts[1], ref)


def test_fixed_width_block_takes_far_exponents_and_long_mantissas(tmp_path):
    # values that need more than one exact division: numpy's string conversion takes them, inside the
    # byte-matrix reader; reference: Python's float()
    texts = [" 1.234567890123456789E-300", "-9.876543210987654321E+250", " 1.000000000000000000E-005"]
    texts += [" 4.940656458412465400E-324", " 2.225073858507201400E-308", "-1.797693134862315700E+308"]
    (tmp_path / "x.csv").write_text("Time,CH1\n" + "".join(f"{i:4d},{t}\n" for i, t in enumerate(texts)))
    fixed = _fixed_block(tmp_path / "x.csv", csv_reader.sniff(tmp_path / "x.csv"))
    assert fixed is not None
    assert _same_bits(fixed[1], np.array([float(t) for t in texts]))


def test_nan_and_inf_fields_are_taken(tmp_path):
    cap = read_capture(write(tmp_path / "n.csv", "Sample Interval,1e-6\nv\n1.5\nnan\n-inf\n2\n"))
    assert np.isnan(cap.volts[0][1]) and cap.volts[0][2] == -np.inf and cap.volts[0][3] == 2.0


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ("t,v\n0,1\n1,2\n2,3,4\n3,4\n4,5\n5,6\n6,7\n7,8\n", "line 4: expected 2 fields, found 3"),
        ("t,v\n0,1\n1,2\n2,3\n3,4\n4,5\n5,6\n6,x7\n7,8\n", "line 8: 'x7' is not a number"),
        ("v\n1\n2\n3\n4\n5\n6\n", "no time column and no sample interval"),
        ("hello\nworld\n", "no lines of numbers found"),
    ],
)
def test_bad_input_is_one_clear_line(tmp_path, text, message):
    with pytest.raises(DataError) as err:
        read_capture(write(tmp_path / "bad.csv", text))
    assert message in str(err.value) and "\n" not in str(err.value)


def _fixed_block(path, layout) -> list[np.ndarray] | None:
    """The block reader's columns for the whole data of `path` as one block, every line of one length
    and layout read at fixed places (None: not fixed)."""
    buf = bytearray(csv_reader._PAD) + path.read_bytes()[layout.data_offset :]
    reader = csv_reader._Reader(layout, list(range(layout.columns)))
    got = reader._fixed(buf, csv_reader._PAD, len(buf))
    return None if got is None else got[0]


def _fixed_width_rows(n: int, decimal: str = ".") -> list[str]:
    """Lines as a scope prints them: every field in a fixed format, a blank where a sign is not."""
    rng = np.random.default_rng(7)
    t = (np.arange(n) - n // 3) * 2.5e-7
    a = np.clip(rng.normal(2.0, 3.0, n), -9.9, 9.9)  # one digit before the point
    b = rng.normal(0.0, 0.01, n)
    rows = [f"{x: .6E},{y: 8.4f},{z:+.3e}" for x, y, z in zip(t, a, b, strict=True)]
    return [r.replace(".", decimal) if decimal != "." else r for r in rows]


@pytest.mark.parametrize(("delimiter", "decimal"), [(",", "."), (";", ","), ("\t", ".")])
def test_fixed_width_lines_are_read_as_a_byte_matrix(tmp_path, delimiter, decimal):
    rows = _fixed_width_rows(5000)
    assert len({len(r) for r in rows}) == 1  # the case the byte-matrix path is for
    text = "\n".join(r.replace(",", delimiter) for r in rows).replace(".", decimal) + "\n"
    path = write(tmp_path / "f.csv", "Sample Interval,2.5E-07\nTime,CH1,CH2\n" + text)
    layout = csv_reader.sniff(tmp_path / "f.csv")
    assert _fixed_block(tmp_path / "f.csv", layout) is not None
    cap = read_capture(path)
    # reference: Python's float() on the printed text (correctly rounded)
    ref = np.array([[float(f) for f in r.split(",")] for r in rows])
    assert np.array_equal(cap.volts[0], ref[:, 1]) and np.array_equal(cap.volts[1], ref[:, 2])
    assert cap.t_s is None and cap.dt_s == pytest.approx(2.5e-7, rel=1e-9)


@pytest.mark.parametrize(
    ("old", "new", "message"),
    [
        (",", "-", "is not a number"),  # a missing delimiter next to a sign: one field of the same width
        ("E", "X", "is not a number"),
        ("5", "/", "is not a number"),  # a byte just below '0'
        ("5", ":", "is not a number"),  # and just above '9'
    ],
)
def test_fixed_width_lines_with_one_bad_field_name_it(tmp_path, old, new, message):
    rows = _fixed_width_rows(3000)
    k = next(i for i in range(2000, 3000) if old in rows[i][8:] and "-" not in rows[i][14:21])
    at = rows[k].index(old, 8)
    rows[k] = rows[k][:at] + new + rows[k][at + 1 :]
    path = write(tmp_path / "bad.csv", "Time,CH1,CH2\n" + "\n".join(rows) + "\n")
    with pytest.raises(DataError) as err:
        read_capture(path)
    assert f"line {k + 2}:" in str(err.value) and message in str(err.value)


def test_fixed_width_lines_with_nan_or_a_wider_number_of_the_same_width(tmp_path):
    rows = _fixed_width_rows(500)
    rows[300] = rows[300][:14] + "     nan" + rows[300][22:]
    k = next(i for i in range(400, 500) if rows[i][15] == " ")
    rows[k] = rows[k][:15] + "7" + rows[k][16:]  # a digit where other lines have a blank or a sign
    cap = read_capture(write(tmp_path / "n.csv", "Time,CH1,CH2\n" + "\n".join(rows) + "\n"))
    assert np.isnan(cap.volts[0][300]) and np.isfinite(np.delete(cap.volts[0], 300)).all()
    assert cap.volts[1][300] == float(rows[300].split(",")[2])
    # reference: Python's float() on the printed text
    assert cap.volts[0][k] == float(rows[k].split(",")[1]) and cap.volts[0][k] > 70


def test_blank_lines_inside_data_are_skipped(tmp_path):
    cap = read_capture(write(tmp_path / "b.csv", "t,v\n0,1\n1,2\n\n2,3\n3,4\n4,5\n5,6\n\n\n"))
    assert np.array_equal(cap.volts[0], [1, 2, 3, 4, 5, 6])


def test_npz_with_interval_and_with_time(tmp_path):
    v = np.linspace(0, 5, 101)
    np.savez(tmp_path / "a.npz", dt=np.float64(2e-7), t0=np.float64(-1e-5), contact=v, coil=v[::-1])
    cap = read_capture(str(tmp_path / "a.npz"))
    assert cap.names == ("contact", "coil") and cap.dt_s == 2e-7 and cap.t0_s == -1e-5
    np.savez(tmp_path / "b.npz", t=np.arange(101) * 1e-6, contact=v)
    cap = read_capture(str(tmp_path / "b.npz"))
    assert cap.dt_s == pytest.approx(1e-6) and np.array_equal(cap.volts[0], v)


@pytest.mark.parametrize("width", [1, 2, 3, 4])
def test_wav_pcm_widths_against_the_wave_module(tmp_path, width):
    rng = np.random.default_rng(width)
    full = 1 << (8 * width - 1)
    frames = rng.integers(-full, full, size=(500, 2))
    if width == 1:
        raw = (frames + 128).astype(np.uint8).tobytes()
    elif width == 3:
        u = (frames.ravel() & 0xFFFFFF).astype(np.uint32)
        raw = np.stack([u & 0xFF, (u >> 8) & 0xFF, (u >> 16) & 0xFF], axis=1).astype(np.uint8).tobytes()
    else:
        raw = frames.astype({2: "<i2", 4: "<i4"}[width]).tobytes()
    with wave.open(str(tmp_path / "a.wav"), "wb") as w:
        w.setnchannels(2)
        w.setsampwidth(width)
        w.setframerate(96_000)
        w.writeframes(raw)
    cap = read_capture(str(tmp_path / "a.wav"), full_scale_v=10.0)
    assert cap.dt_s == pytest.approx(1 / 96_000)
    assert np.allclose(cap.volts[0], frames[:, 0] * 10.0 / full)
    assert np.allclose(cap.volts[1], frames[:, 1] * 10.0 / full)


def test_not_a_wav(tmp_path):
    (tmp_path / "x.wav").write_bytes(b"RIFF....not really")
    with pytest.raises(DataError, match="not a PCM WAV"):
        read_capture(str(tmp_path / "x.wav"))

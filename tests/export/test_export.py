import csv
import io
import math

import numpy as np
import pytest

# pyvcd (PyPI package "pyvcd", module vcd.reader): a general-purpose VCD tokenizer, used as the
# independent reader of our IEEE 1364 value change dumps.
from vcd.reader import TokenKind, tokenize

from benchlog.errors import DataError
from benchlog.events import TimedEdges
from benchlog.store import Store
from benchlog.views.cli import main
from benchlog.views.export import write_actuations_csv, write_vcd
from tests.store._data import actuations

NASTY = 'O\'Brien "x", y; DROP TABLE units; -- <b>[bold]z[/bold]</b> $end'


@pytest.fixture
def recorded(tmp_path):
    path = tmp_path / "export.sqlite"
    store = Store.open(str(path))
    part = store.register_part("AG-MS5", "Ashgrove Components")
    lot = store.register_lot(part, "L1")
    u = [store.register_unit(lot, NASTY), store.register_unit(lot, "U 2")]
    bench = store.register_bench("bench A")
    w = store.start_run(bench, {0: u[0], 3: u[1]}, profile={"on_ms": 50})
    rng = np.random.default_rng(7)
    t0 = np.cumsum(rng.integers(2, 50_000, 300)).astype(np.int64) + 1_000_000
    t3 = t0[:200].copy()
    t3[1::2] += 1  # every other change of unit 2 at the same instant as one of unit 1
    lv0 = (np.arange(300) % 2 == 0).astype(np.uint8)  # first edge closes
    lv3 = (np.arange(200) % 2 == 1).astype(np.uint8)  # first edge opens
    edges = TimedEdges.concat(
        [
            TimedEdges(t0, np.zeros(300, np.uint8), lv0),
            TimedEdges(t3, np.full(200, 3, np.uint8), lv3),
        ]
    )
    a = actuations([0, 3], range(20))
    a["transfer_us"][0] = -12.5
    w.add(actuations=a, edges=edges)
    w.close("stopped")
    yield store, w.run_id, u, {u[0]: (t0, lv0), u[1]: (t3, lv3)}, str(path)
    store.close()


def _read_vcd(text: str):
    """{reference: [(time, value), ...]} and the timescale, from pyvcd's tokens."""
    names, changes, now, timescale = {}, {}, 0, None
    for tok in tokenize(io.BytesIO(text.encode())):
        if tok.kind is TokenKind.TIMESCALE:
            timescale = (int(tok.data.magnitude), tok.data.unit.value)
        elif tok.kind is TokenKind.VAR:
            names[tok.data.id_code] = tok.data.reference
            changes[tok.data.reference] = []
        elif tok.kind is TokenKind.CHANGE_TIME:
            now = tok.data
        elif tok.kind is TokenKind.CHANGE_SCALAR:
            changes[names[tok.data.id_code]].append((now, tok.data.value))
    return changes, timescale


def test_vcd_reads_back_with_pyvcd(recorded):
    store, run_id, u, truth, _ = recorded
    out = io.StringIO()
    n = write_vcd(store, out, run_id)
    assert n == 500
    changes, timescale = _read_vcd(out.getvalue())
    assert timescale == (1, "ns")
    assert len(changes) == 2
    ref0 = next(r for r in changes if r.startswith("ch0_"))
    ref3 = next(r for r in changes if r.startswith("ch3_"))
    t_start = min(truth[u[0]][0][0], truth[u[1]][0][0])
    for ref, unit in ((ref0, u[0]), (ref3, u[1])):
        t, lv = truth[unit]
        got = changes[ref]
        # the initial value in $dumpvars is the level before the first edge
        assert got[0] == (0, str(1 - lv[0]))
        assert got[1:] == [(int(ti - t_start), str(int(li))) for ti, li in zip(t, lv, strict=True)]
    assert NASTY.replace("$end", "$ end") in out.getvalue()  # full name kept in a comment


def test_vcd_span_and_errors(recorded):
    store, run_id, u, truth, _ = recorded
    t, lv = truth[u[0]]
    out = io.StringIO()
    write_vcd(store, out, run_id, units=[u[0]], t_ns=(int(t[10]), int(t[19])))
    changes, _ = _read_vcd(out.getvalue())
    (ref,) = changes
    assert [v for _, v in changes[ref][1:]] == [str(x) for x in lv[10:20]]
    assert changes[ref][1][0] == 0
    with pytest.raises(DataError):
        write_vcd(store, io.StringIO(), run_id, units=[999])


def test_csv_round_trip_with_python_csv_module(recorded):
    # Python's csv module (RFC 4180 quoting) is the reader
    store, run_id, u, _, _ = recorded
    out = io.StringIO()
    n = write_actuations_csv(store, out, runs=[run_id])
    rows = list(csv.DictReader(io.StringIO(out.getvalue())))
    ref = store.actuations(runs=[run_id])
    assert n == len(rows) == len(ref) == 80
    assert {r["serial"] for r in rows} == {NASTY, "U 2"}
    for r, a in zip(rows, ref, strict=True):
        assert int(r["cycle"]) == a["cycle"] and r["kind"] in ("make", "break")
        for name in ("bounce_us", "transfer_us", "transit_us"):
            v = a[name]
            assert (r[name] == "") if math.isnan(v) else float(r[name]) == v


def test_export_command(recorded, tmp_path, capsys):
    store, run_id, u, _, path = recorded
    csv_path = tmp_path / "a.csv"
    argv = ["export", "csv", "--db", path, "--unit", str(u[1]), "--kind", "make", "-o", str(csv_path)]
    assert main(argv) == 0
    assert len(list(csv.DictReader(io.StringIO(csv_path.read_text())))) == 20
    vcd_path = tmp_path / "a.vcd"
    assert main(["export", "vcd", "--db", path, "--run", str(run_id), "-o", str(vcd_path)]) == 0
    changes, _ = _read_vcd(vcd_path.read_text())
    assert sum(len(c) for c in changes.values()) == 502
    assert main(["export", "vcd", "--db", path]) == 64  # a usage error: one line, its exit code
    assert "exactly one --run" in capsys.readouterr().err

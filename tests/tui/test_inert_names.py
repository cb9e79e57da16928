"""Names are shown verbatim and inert: never read as markup, control characters written out.

A serial is whatever the lab typed or a barcode reader sent: `[/]` (a markup closing tag), `N01 [spare]`
(square brackets are common in labels), an ESC sequence that would clear a terminal.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

from textual.widgets import DataTable

from benchlog._inert import inert
from benchlog.errors import ConfigError
from benchlog.store import Store
from benchlog.views.cli import main
from benchlog.views.tui import BenchDashboard
from benchlog.views.tui._population import PopulationScreen
from benchlog.views.tui._runs import RunsScreen
from benchlog.views.tui._units import UnitsScreen

from ._build import actuations, register
from ._pilot import column, settle
from .test_dashboard import SIZE

WAIT_S = 120.0  # a ceiling only a hang reaches

ROOT = Path(__file__).resolve().parents[2]
CLEAR = "\x1b[2J\x1b[H"
SERIALS = ["[/]", "N01 [spare]", f"{CLEAR}gone", "[bold red]loud[/]"]


def _store(path: str) -> int:
    with Store.open(path) as store:
        units = register(store, "PART-[A]", "Supplier [x]", f"L{CLEAR}1", SERIALS)
        bench = store.register_bench(f"bench [1]{CLEAR}", channels=8)
        w = store.start_run(bench, dict(enumerate(units)), profile={"on_ms": 50, "off_ms": 50})
        w.add(actuations=actuations(range(len(units)), 0, 299, seed=5))
        w.close("stopped")
        return w.run_id


def test_inert_writes_out_control_characters_only():
    assert inert("N01 [spare]") == "N01 [spare]"
    assert inert(CLEAR) == "\\x1b[2J\\x1b[H"
    assert inert("a\x07b\x7fc\x9bd") == "a\\x07b\\x7fc\\x9bd"
    assert inert("left\u202eright") == "left\\u202eright"  # a right-to-left override


async def test_dashboard_shows_markup_and_escapes_as_typed(tmp_path):
    path = str(tmp_path / "names.sqlite")
    run_id = _store(path)
    app = BenchDashboard(path, refresh_s=0)
    async with app.run_test(size=SIZE) as pilot:
        runs = await settle(pilot, RunsScreen, WAIT_S)
        table = runs.query_one("#runs", DataTable)
        assert column(table, "bench") == [inert(f"bench [1]{CLEAR}")]
        table.move_cursor(row=column(table, "run").index(str(run_id)))
        await pilot.press("enter")
        units = await settle(pilot, UnitsScreen, WAIT_S)
        shown = column(units.query_one(DataTable), "unit")
        assert shown == [inert(s) for s in SERIALS]
        assert "N01 [spare]" in shown and "[/]" in shown
        await pilot.press("p")
        pop = await settle(pilot, PopulationScreen, WAIT_S)
        assert pop is not None
    assert app.return_code in (None, 0)


def test_plain_text_and_errors_carry_no_control_characters(tmp_path, capsys):
    path = str(tmp_path / "names.sqlite")
    _store(path)
    out = subprocess.run(
        [sys.executable, "-m", "benchlog", "dash", "--db", path],
        capture_output=True,
        text=True,
        env={"PYTHONPATH": str(ROOT), "PATH": "/usr/bin:/bin"},
        timeout=120,
    )
    assert out.returncode == 0, out.stderr
    assert "\x1b" not in out.stdout and "\\x1b[2J" in out.stdout and "N01 [spare]" in out.stdout
    assert "\x1b" not in str(ConfigError(f"unit {CLEAR!r}: no part"))
    code = main(["record", "--sim", "demo", "--bench", "b", "--profile", "5:5:5", "--units", f"0={CLEAR}"])
    err = capsys.readouterr().err
    assert code == 9 and "\x1b" not in err and "\\x1b[2J" in err


def test_html_report_carries_no_control_characters(tmp_path, capsys):
    from tests.report.storefill import fill

    db = fill(
        tmp_path / "lab.sqlite", units_per_lot=3, recorded=40, test_end=5_000, names={("VS-505", 0): CLEAR}
    )
    out = tmp_path / "r.html"
    argv = ["report", "--db", db, "--incumbent", "AG-MS5", "--candidate", "VS-505", "--resamples", "100"]
    assert main([*argv, "--output", str(out)]) in (0, 1, 2)
    capsys.readouterr()
    html = out.read_text("utf-8")
    assert "\x1b" not in html and "\\x1b[2J" in html

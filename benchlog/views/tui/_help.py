"""The key reference, over whatever screen is showing."""

from __future__ import annotations

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import VerticalScroll
from textual.screen import ModalScreen
from textual.widgets import Static

# Every line fits a 80x24 terminal's box (72 columns and its scrollbar): the terminal never wraps a
# phrase; the box scrolls when the terminal is short.
HELP = """\
[b]benchlog dashboard: keys[/b]                  Escape or ? closes this help

[b]Everywhere[/b]
  q       quit                      ?       this help
  Escape  back                      r       read now
  arrows  move                      Tab     next panel
  Enter   open the highlighted row

[b]Benches and runs[/b]
  Enter   the run's units           p       populations

[b]Units of a run[/b]
  /       filter by words: serial, part, lot, supplier, pass, marginal,
          fail, drift, failed, failure mode
  s       next sort: channel, verdict, drift, cycles,
          make / break bounce, part/lot
  o       reverse the order         d       drifting units only
  v       verdicts shown: all, FAIL, MARGINAL, PASS
  p / l   population of the unit's part / lot
  Enter   the unit's history
  Escape  clear the filter, then back

[b]Unit history[/b]
  m / M   next / previous metric
  e       histogram over the latest cycles
  [ / ]   histogram span earlier / later
  - / +   histogram span narrower / wider

[b]Populations[/b]
  arrows  choose a part or lot      m       next metric

Every state has a word as well as a colour: PASS, MARGINAL, FAIL,
NO DATA, NO SPEC, DRIFT, LIVE, ENDED, INTERRUPTED, DOWN (link outage),
FAILED (unit)."""


class HelpScreen(ModalScreen):
    CSS_PATH = "_help.tcss"
    BINDINGS = [Binding("escape", "dismiss", "Close"), Binding("question_mark", "dismiss", "Close")]

    def compose(self) -> ComposeResult:
        with VerticalScroll(id="help-box"):
            yield Static(HELP, id="help-text")

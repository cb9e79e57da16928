"""The demo's drift flags answer to the simulator's truth: a living unit is flagged only when the
simulator is wearing it toward its limit (its true bounce p95 reaches the limit by the latest crossing
the flag states, or by the horizon the flag judges by where it states none), and a living unit truly
past its limit is flagged.

The truth is the simulator's physics (`benchlog.sim._physics._train`, the bounce train of a part at a
given wear): the true p95 of make and break bounce at any cycle, by Monte Carlo. The recording is the
user's command, `benchlog demo --no-dash`, read back through the dashboard's own reads.
"""

from __future__ import annotations

import subprocess
import sys

import numpy as np

from benchlog.analysis import drift_horizon, load_spec
from benchlog.sim import load_preset
from benchlog.sim._physics import _train
from benchlog.store import Store
from benchlog.views.cli.cmd_demo import OFF_MS, ON_MS, aged, ageing
from benchlog.views.tui._data import limit_for, part_spec, read_run
from tests.conftest import HANG_S

CYCLES = 1500
PRESETS = {"BW-BENCH-A": "demo", "BW-BENCH-B": "relay-night"}


def _true_p95(pop, metric: str, cycle: float, rng) -> float:
    """The part's true bounce p95 (us) at `cycle` of the demo's aged life."""
    wear = np.full(20_000, 1.0 + pop.wear_per_100k * cycle / 1e5)
    if metric == "make_bounce":
        off, n, _ = _train(rng, pop.make, wear, 24, 2.0, ON_MS * 1e3 - pop.operate.median_us)
    else:
        off, n, _ = _train(rng, pop.break_, wear, 24, 2.0, OFF_MS * 1e3 - pop.release.median_us)
    return float(np.percentile(off[np.arange(len(wear)), 2 * n], 95))


def test_demo_flags_drift_only_where_the_simulator_wears_toward_the_limit(tmp_path):
    db = tmp_path / "demo.sqlite"
    out = subprocess.run(
        [sys.executable, "-m", "benchlog", "demo", "--no-dash", "--db", str(db), "--cycles", str(CYCLES)],
        capture_output=True,
        text=True,
        timeout=HANG_S,
    )
    assert out.returncode == 0, out.stderr
    rng = np.random.default_rng(1)
    judged = flagged = 0
    with Store.open(str(db), readonly=True) as store:
        specs = {p.part_number: part_spec(p) for p in store.parts()}
        for run in store.runs():
            cfg = aged(load_preset(PRESETS[run.bench]), CYCLES)  # as the demo ages its parts
            detail = read_run(store, run.id)
            for row in detail.units:
                if row.unit.status != "alive":
                    continue  # a failed unit's bounce includes its failure (chatter), not only wear
                pop = cfg.populations[cfg.units[row.channel].population]
                spec = specs[row.unit.part_number]
                for flag in row.drift:
                    if flag.metric not in ("make_bounce", "break_bounce"):
                        continue
                    limit, stat, percentile = limit_for(spec, flag.metric)
                    assert (stat, percentile) == ("p95", 95)
                    # the part's required life (the shipped spec, in a real part's cycles) in the
                    # cycles of the demo's parts, which age ageing() times faster
                    life = load_spec(row.unit.part_number).life.min_cycles / ageing(CYCLES)
                    # the latest cycle the flag says the limit is reached by: the latest end of
                    # its stated crossing range, or (where it states none) the horizon it judged by
                    latest = flag.crossing_high
                    if flag.past_limit or latest is None:
                        latest = drift_horizon(flag.last_cycle, life)
                    at_latest = _true_p95(pop, flag.metric, latest, rng)
                    at_end = _true_p95(pop, flag.metric, flag.last_cycle, rng)
                    judged += 1
                    what = (row.unit.serial, flag.metric, flag.words, limit, at_end, latest, at_latest)
                    if flag.signalled:
                        flagged += 1
                        # flagged: the simulator wears the unit toward its limit, and the truth
                        # reaches it by the latest cycle the flag states (2 % for the Monte Carlo
                        # and the sampler's 1 us resolution). Judged against the flag's own range
                        # rather than the horizon alone: a part whose truth crosses just beyond the
                        # horizon is flagged or not by its projection's error, and either is right
                        # when the stated range holds the true crossing.
                        assert at_latest >= 0.98 * limit, what
                    if at_end > 1.05 * limit:  # truly past its limit: it must be flagged
                        assert flag.signalled and flag.past_limit, what
    assert judged >= 20 and flagged >= 1

"""One call from a store and two lot names to a qualification (and, if asked, the HTML report)."""

from __future__ import annotations

import os
import tempfile
from dataclasses import dataclass

from benchlog.errors import ConfigError
from benchlog.stats import Qualification, Requirements, qualify
from benchlog.views._notes import say_readonly
from benchlog.views.report._data import LotData, load_lot, spec_for

__all__ = ["Evaluation", "evaluate", "write_report"]


@dataclass
class Evaluation:
    qualification: Qualification
    incumbent: LotData
    candidate: LotData
    spec: object  # benchlog.analysis.PartSpec
    spec_name: str
    spec_text: str


def _spec_text(spec_arg: str | None, candidate: LotData) -> str:
    if spec_arg and os.path.exists(spec_arg):
        with open(spec_arg, encoding="utf-8", errors="replace") as fh:
            return fh.read()
    if spec_arg:  # a shipped spec, by part number
        from importlib import resources

        return resources.files("benchlog.presets").joinpath("specs", f"{spec_arg}.toml").read_text("utf-8")
    return candidate.spec_toml or ""


def evaluate(
    db: str | None,
    incumbent: str,
    candidate: str,
    *,
    spec: str | None = None,
    confidence: float | None = None,
    reliability: float = 0.9,
    margin: float | None = 0.2,
    assumed_shape: float | None = None,
    min_units: int = 5,
    per: str = "cycle",
    resamples: int = 2000,
    seed: int = 0,
    with_runs: bool = False,
) -> Evaluation:
    """Open the store read-only, load both lots (PART:LOT, lot code or part number), judge."""
    from benchlog.store import Store

    if min_units < 3:
        raise ConfigError(f"the minimum units per lot must be at least 3, got {min_units}")
    if resamples < 100:
        raise ConfigError(f"bootstrap resamples must be at least 100, got {resamples}")
    if per not in ("cycle", "actuation"):
        raise ConfigError(f"an operation is a 'cycle' or an 'actuation', not {per!r}")
    operation = "coil cycle" if per == "cycle" else "make or break"
    store = Store.open(db, readonly=True, inert_names=True)
    say_readonly(store)
    try:
        inc = load_lot(store, incumbent, operation=operation, with_runs=with_runs)
        cand = load_lot(store, candidate, operation=operation, with_runs=with_runs)
    finally:
        store.close()
    part_spec, spec_name = spec_for(spec, cand)
    req = Requirements.from_spec(part_spec, reliability=reliability, confidence=confidence)
    q = qualify(
        inc.population,
        cand.population,
        req,
        margin=margin,
        assumed_shape=assumed_shape,
        min_units=min_units,
        n_resamples=resamples,
        seed=seed,
    )
    return Evaluation(q, inc, cand, part_spec, spec_name, _spec_text(spec, cand))


def write_report(path: str, ev: Evaluation) -> None:
    """Render and write the HTML report; written beside the target and renamed, so a failed write
    never replaces a good report."""
    from benchlog.views.report._html import render_report

    page = render_report(
        ev.qualification,
        ev.incumbent,
        ev.candidate,
        spec_name=ev.spec_name,
        spec_text=ev.spec_text or repr(ev.spec),
    )
    out = os.path.abspath(path)
    tmp = None
    try:
        fd, tmp = tempfile.mkstemp(prefix=".report-", suffix=".html", dir=os.path.dirname(out))
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(page)
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)
        os.replace(tmp, out)
    except OSError as exc:
        if tmp and os.path.exists(tmp):
            os.unlink(tmp)
        raise ConfigError(f"cannot write {path}: {exc.strerror or exc}") from exc

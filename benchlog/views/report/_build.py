"""One call from a store and two lot names to a qualification (and, if asked, the HTML report)."""

from __future__ import annotations

import os
import tempfile
from dataclasses import dataclass, field, replace

from benchlog.errors import ConfigError
from benchlog.stats import Qualification, Requirements, qualify
from benchlog.views._notes import say_readonly
from benchlog.views.report._data import LotData, load_lot, spec_for

__all__ = ["CONDITIONS", "Evaluation", "ReportInfo", "SignOff", "evaluate", "write_report"]

# The test conditions a quality file asks for: (key in the spec's [conditions], what the report calls it)
CONDITIONS = (
    ("profile", "cycle profile"),
    ("load", "load switched"),
    ("coil_voltage", "coil voltage"),
    ("ambient", "ambient temperature"),
)


@dataclass(frozen=True)
class SignOff:
    role: str  # prepared / reviewed / approved
    name: str = ""  # blank: a line to sign on
    date: str = ""  # blank: left for ink


@dataclass(frozen=True)
class ReportInfo:
    """What the quality file needs beside the data: the report's identity, the conditions stated by the
    user (each overrides the spec's [conditions]) and the sign-off block."""

    number: str = ""
    revision: str = ""
    conditions: dict[str, str] = field(default_factory=dict)
    sign_off: tuple[SignOff, ...] = (SignOff("prepared"), SignOff("reviewed"), SignOff("approved"))
    paper: str = ""  # "a4", "letter" or "" (the printer's choice)


@dataclass
class Evaluation:
    qualification: Qualification
    incumbent: LotData
    candidate: LotData
    spec: object  # benchlog.analysis.PartSpec
    spec_name: str
    spec_text: str
    store: str = ""  # the store as shown to people (no password)


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
    store = Store.open(db, readonly=True, inert_names=True)
    say_readonly(store)
    try:
        inc = load_lot(store, incumbent, with_runs=with_runs)
        cand = load_lot(store, candidate, with_runs=with_runs)
        db_shown = _shown(store.url)
    finally:
        store.close()
    part_spec, spec_name = spec_for(spec, cand)
    word = part_spec.extra.get("conditions", {}).get("operation") or "operating cycle"
    operation = word if per == "cycle" else "make or break"
    for lot in (inc, cand):
        lot.population = replace(lot.population, operation=operation)
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
    return Evaluation(q, inc, cand, part_spec, spec_name, _spec_text(spec, cand), db_shown)


def _shown(url: str) -> str:
    """The store as a person would name it: a SQLite file's path, else the URL without its password."""
    from sqlalchemy.engine import make_url

    u = make_url(url)
    return str(u.database) if u.get_backend_name() == "sqlite" else u.render_as_string(hide_password=True)


def pdf_wanted(path: str, pdf: bool) -> bool:
    return pdf or path.lower().endswith(".pdf")


def write_report(
    path: str,
    ev: Evaluation,
    info: ReportInfo | None = None,
    *,
    pdf: bool = False,
    captures: list | None = None,
) -> None:
    """Render and write the report: HTML, or PDF when `pdf` is set or the name ends in .pdf (laid out
    by WeasyPrint from the same page and its print styles; no browser involved). Written beside the
    target and renamed, so a failed write never replaces a good report."""
    from benchlog.views.report._html import render_report

    info = info or ReportInfo()
    as_pdf = pdf_wanted(path, pdf)
    if as_pdf and not info.paper:
        info = replace(info, paper="a4")
    page = render_report(
        ev.qualification,
        ev.incumbent,
        ev.candidate,
        spec_name=ev.spec_name,
        spec_text=ev.spec_text or repr(ev.spec),
        spec=ev.spec,
        store=ev.store,
        info=info,
        captures=captures,
    )
    if as_pdf:
        data = _pdf_bytes(page)
    else:
        data = page.encode("utf-8")
    out = os.path.abspath(path)
    tmp = None
    try:
        fd, tmp = tempfile.mkstemp(
            prefix=".report-", suffix=".pdf" if as_pdf else ".html", dir=os.path.dirname(out)
        )
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)
        os.replace(tmp, out)
    except OSError as exc:
        if tmp and os.path.exists(tmp):
            os.unlink(tmp)
        raise ConfigError(f"cannot write {path}: {exc.strerror or exc}") from exc


def _pdf_bytes(page: str) -> bytes:
    try:
        import weasyprint
    except (ImportError, OSError) as exc:  # OSError: the module is there but Pango is not
        raise ConfigError(
            "PDF output needs WeasyPrint and the Pango library: pip install 'benchlog[pdf]' "
            f"(and the Debian package libpango-1.0-0) ({str(exc).splitlines()[0]})"
        ) from exc
    import logging

    logging.getLogger("weasyprint").setLevel(logging.ERROR)  # it logs every CSS property it ignores
    return weasyprint.HTML(string=page, base_url=None).write_pdf()

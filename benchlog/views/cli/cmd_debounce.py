"""`benchlog debounce`: a firmware debounce setting, or R and C before a Schmitt input, from recorded bounce.

Reads recorded contacts from one of:

- the store (`--db URL` with `--unit`, `--part`, `--lot`, `--run`): raw edges and measured actuations of
  each selected unit in each of its runs;
- a capture file (`--capture FILE`: the bytes a sampler sent, either form), decoded by the wire stage,
  placed in time by the clock stage and measured by the analysis stage;
- an edge file (`--edges FILE`: CSV with columns t_ns,channel,level, or a .npz with those arrays),
  grouped into makes and breaks by the quiet gap (`--quiet-ms`).
"""

from __future__ import annotations

import argparse
import json
import math
from pathlib import Path

from benchlog.views.cli._args import JSON_HELP

NAME = "debounce"
HELP = "Choose a software debounce, or R and C for a Schmitt input, from recorded bounce."


def _pos_float(text: str) -> float:
    try:
        v = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a number: {text!r}") from None
    if not v > 0 or math.isinf(v):
        raise argparse.ArgumentTypeError(f"must be positive: {text!r}")
    return v


def _pct(text: str) -> float:
    try:
        v = float(text.rstrip("%"))
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a percentage: {text!r}") from None
    if not 0 <= v < 100:
        raise argparse.ArgumentTypeError(f"percentage must be in 0..100: {text!r}")
    return v / 100.0


def _ohms(text: str) -> float:
    t = text.strip().lower().replace("ohm", "").replace("r", "").strip()
    mult = 1.0
    if t and t[-1] in "km":
        mult = 1e3 if t[-1] == "k" else 1e6
        t = t[:-1]
    try:
        v = float(t) * mult
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a resistance: {text!r} (e.g. 4700, 4.7k, 1M)") from None
    if v < 0 or math.isinf(v):
        raise argparse.ArgumentTypeError(f"impossible resistance: {text!r}")
    return v


def _range(text: str) -> tuple[float, float]:
    lo, sep, hi = text.partition(":")
    if not sep:
        raise argparse.ArgumentTypeError(f"expected LOW:HIGH, got {text!r}")
    a, b = _ohms(lo), _ohms(hi)
    if not 0 < a <= b:
        raise argparse.ArgumentTypeError(f"expected 0 < LOW <= HIGH, got {text!r}")
    return a, b


def _farads(text: str) -> float:
    t = text.strip().lower().rstrip("f")
    mult = {"p": 1e-12, "n": 1e-9, "u": 1e-6, "m": 1e-3}.get(t[-1:] if t else "", 1.0)
    if mult != 1.0:
        t = t[:-1]
    try:
        v = float(t) * mult
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a capacitance: {text!r} (e.g. 100n, 2.2u)") from None
    if not v > 0:
        raise argparse.ArgumentTypeError(f"impossible capacitance: {text!r}")
    return v


def add_arguments(p: argparse.ArgumentParser) -> None:
    src = p.add_argument_group("recorded contacts (one source)")
    src.add_argument("--db", help="store URL or SQLite path (default $BENCHLOG_DB, then ./benchlog.sqlite)")
    src.add_argument("--unit", action="append", default=[], help="unit id or serial (repeatable)")
    src.add_argument("--part", help="every unit of this part number")
    src.add_argument("--lot", help="every unit of this lot code")
    src.add_argument("--run", type=int, action="append", default=[], help="only these run ids (repeatable)")
    src.add_argument("--capture", type=Path, help="a file of the raw bytes a sampler sent")
    src.add_argument("--edges", type=Path, help="an edge file: CSV t_ns,channel,level, or .npz")
    src.add_argument("--channel", type=int, action="append", default=[], help="only these channels (files)")
    src.add_argument(
        "--quiet-ms",
        type=_pos_float,
        default=10.0,
        help="edge files: a gap this long ends a make or break (default 10)",
    )
    sw = p.add_argument_group("software debounce")
    sw.add_argument("--sample-ms", type=_pos_float, default=1.0, help="firmware sampling period (default 1)")
    sw.add_argument(
        "--target-rate",
        type=_pos_float,
        default=1e-6,
        help="acceptable false transitions per actuation (default 1e-6)",
    )
    sw.add_argument(
        "--kinds",
        default="lockout,stable,integrator,confirm",
        help="debouncers to try, comma separated (default: all four)",
    )
    sw.add_argument("--life-windows", type=int, default=4, help="split the life into N windows (default 4)")
    hw = p.add_argument_group("RC filter before a Schmitt input")
    hw.add_argument("--input", help="threshold table row (name or a unique fragment); enables the RC design")
    hw.add_argument("--thresholds", type=Path, help="a threshold table file instead of the shipped one")
    hw.add_argument("--list-inputs", action="store_true", help="list the threshold table and exit")
    hw.add_argument("--supply", type=_pos_float, help="supply volts (default: the table row's)")
    hw.add_argument("--supply-tol", type=_pct, default=0.05, help="supply tolerance, %% (default 5)")
    hw.add_argument("--pullup", type=_ohms, default=10e3, help="external pull-up ohms (default 10k)")
    hw.add_argument(
        "--pullup-tol", type=_pct, default=0.01, help="external pull-up tolerance, %% (default 1)"
    )
    hw.add_argument(
        "--pullup-range",
        type=_range,
        metavar="LOW:HIGH",
        help="an internal pull-up given as a range, e.g. 20k:50k",
    )
    hw.add_argument(
        "--internal-pullup", action="store_true", help="use the table row's internal pull-up range"
    )
    hw.add_argument("--series", default="auto", help="series resistor: ohms, 'none' or 'auto' (default)")
    hw.add_argument("--series-tol", type=_pct, default=0.05, help="series resistor tolerance, %% (default 5)")
    hw.add_argument("--cap-tol", type=_pct, default=0.10, help="capacitor tolerance, %% (default 10)")
    hw.add_argument(
        "--preferred", choices=("E12", "E24"), default="E12", help="preferred values (default E12)"
    )
    hw.add_argument(
        "--margin", type=float, default=0.2, help="volts to stay clear of a threshold (default 0.2)"
    )
    hw.add_argument("--try", dest="try_rc", metavar="R,C", help="also check this pair, e.g. 1k,220n")
    out = p.add_argument_group("output")
    out.add_argument("--json", action="store_true", help=JSON_HELP)
    out.add_argument("--plot", type=Path, metavar="DIR", help="write PNG plots to DIR")


# -- reading -----------------------------------------------------------------------------------------------


def _records_from_edges(edges, actuations, channels, quiet_ns, t_end_ns=None, label=""):
    import numpy as np

    from benchlog.design import channel_record
    from benchlog.errors import DataError

    recs, names = [], []
    for ch in sorted(set(np.unique(edges.channel).tolist())):
        if channels and ch not in channels:
            continue
        m = edges.channel == ch
        try:
            recs.append(
                channel_record(edges.t_ns[m], edges.level[m], actuations, int(ch), quiet_ns, t_end_ns)
            )
        except DataError:
            continue
        names.append(f"{label}channel {ch}")
    return recs, names


def _read_edge_file(path: Path):
    import numpy as np

    from benchlog.errors import ConfigError
    from benchlog.events import TimedEdges

    try:
        if path.suffix.lower() == ".npz":
            with np.load(path) as z:
                t, ch, lv = z["t_ns"], z["channel"], z["level"]
        else:
            rows = np.loadtxt(
                path,
                delimiter=",",
                dtype=np.int64,
                ndmin=2,
                skiprows=1 if path.read_text("utf-8")[:1].isalpha() else 0,
            )
            if rows.shape[1] != 3:
                raise ValueError("expected three columns t_ns,channel,level")
            t, ch, lv = rows[:, 0], rows[:, 1], rows[:, 2]
    except (OSError, ValueError, KeyError, UnicodeDecodeError) as exc:
        raise ConfigError(f"cannot read edge file {path}: {' '.join(str(exc).split())}") from exc
    lv = np.asarray(lv)
    if (
        len(t) == 0
        or not np.isin(lv, (0, 1)).all()
        or (np.asarray(ch) < 0).any()
        or (np.asarray(ch) > 15).any()
    ):
        raise ConfigError(f"edge file {path}: needs rows of t_ns, channel 0-15, level 0/1")
    return TimedEdges(np.asarray(t, np.int64), np.asarray(ch, np.uint8), lv.astype(np.uint8))


def _read_capture(path: Path):
    """Bytes -> records (wire) -> run time (clock) -> actuations (analysis)."""
    import numpy as np

    from benchlog.analysis import measure
    from benchlog.clock import Timeline
    from benchlog.errors import ConfigError
    from benchlog.events import TimedDrives, TimedEdges
    from benchlog.wire import Decoder

    try:
        data = path.read_bytes()
    except OSError as exc:
        raise ConfigError(f"cannot read capture file {path}: {exc}") from exc
    dec, tl = Decoder(), Timeline()
    edges, drives, incidents = [], [], []
    chunk = 1 << 16
    for i in range(0, max(len(data), 1), chunk):
        timed = tl.push(dec.feed(data[i : i + chunk]), 0)
        edges.append(timed.edges)
        drives.append(timed.drives)
        incidents.extend(timed.incidents)
    e = TimedEdges.concat(edges)
    d = TimedDrives(*(np.concatenate([getattr(x, f) for x in drives]) for f in ("t_ns", "channel", "level")))
    if len(e) == 0:
        raise ConfigError(f"capture file {path}: no edges decoded ({dec.counters.faults} decode faults)")
    return e, d, incidents, measure(e, d, incidents), max(tl.run_ns, int(e.t_ns.max()))


# the columns the designers read (benchlog/design): a night is millions of rows
_FIELDS = (
    "unit_id",
    "run_id",
    "channel",
    "kind",
    "cycle",
    "t_start_ns",
    "t_first_ns",
    "t_settle_ns",
    "transit_us",
    "bounce_us",
    "bounce_count",
    "transfer_us",
    "flags",
)


def _read_store(args):
    import numpy as np

    from benchlog.analysis import ACTUATION_DTYPE
    from benchlog.design import channel_record
    from benchlog.errors import ConfigError, DataError, UsageError
    from benchlog.store import Store

    store = Store.open(args.db, readonly=True)
    try:
        units = []
        if args.unit:
            all_units = store.units()
            for u in args.unit:
                hit = [x for x in all_units if str(x.id) == u or x.serial == u]
                if not hit:
                    raise ConfigError(f"no unit {u!r} in the store")
                units.extend(hit)
        if args.part or args.lot:
            units.extend(store.units(part=args.part, lot=args.lot))
        if not units:
            raise UsageError("choose units from the store with --unit, --part or --lot")
        ids = sorted({u.id for u in units})
        serial = {u.id: u.serial for u in units}
        acts = store.actuations(units=ids, runs=args.run or None, fields=_FIELDS)
        if len(acts) == 0:
            raise DataError("the selected units have no recorded actuations")
        recs, names = [], []
        # one record per (unit, run): rows come by unit and cycle, so each run's rows are together
        key = acts["unit_id"].astype(np.int64) * (int(acts["run_id"].max()) + 1) + acts["run_id"]
        if (np.diff(key) < 0).any():
            order = np.argsort(key, kind="stable")
            acts, key = acts[order], key[order]
        cuts = np.concatenate((np.flatnonzero(np.diff(key)) + 1, [len(key)]))
        for lo, hi in zip(np.concatenate(([0], cuts[:-1])), cuts, strict=True):
            sel = acts[lo:hi]
            uid, rid = int(sel["unit_id"][0]), int(sel["run_id"][0])
            rows = np.zeros(len(sel), ACTUATION_DTYPE)
            for f in ACTUATION_DTYPE.names:
                if f in sel.dtype.names:
                    rows[f] = sel[f]
            edges = store.edges(uid, run_id=rid)
            if len(edges) == 0:
                continue
            ch = int(rows["channel"][0])
            m = edges.channel == ch
            if not m.any():
                continue
            try:
                recs.append(
                    channel_record(
                        edges.t_ns[m],
                        edges.level[m],
                        rows,
                        ch,
                        int(args.quiet_ms * 1e6),
                    )
                )
            except DataError:
                continue
            names.append(f"unit {serial[uid]} run {rid}")
        return recs, names
    finally:
        store.close()


def load_records(args):
    """The recorded channels the command designs for, and a label for each."""
    from benchlog.errors import ConfigError, DataError

    sources = [x for x in (args.capture, args.edges) if x is not None]
    use_store = bool(args.unit or args.part or args.lot or args.run)
    if len(sources) + use_store != 1:
        raise ConfigError(
            "give one source: --capture FILE, --edges FILE, or store units (--unit/--part/--lot)"
        )
    quiet = int(args.quiet_ms * 1e6)
    if args.capture is not None:
        e, _d, _inc, acts, t_end = _read_capture(args.capture)
        recs, names = _records_from_edges(e, acts, set(args.channel), quiet, t_end)
    elif args.edges is not None:
        recs, names = _records_from_edges(_read_edge_file(args.edges), None, set(args.channel), quiet)
    else:
        recs, names = _read_store(args)
    if not recs:
        raise DataError("no channel with recorded makes and breaks in the selection")
    return recs, names


# -- running -----------------------------------------------------------------------------------------------


def _circuit(args):
    from benchlog.design import Circuit, find_input, load_thresholds
    from benchlog.errors import ConfigError

    table = load_thresholds(args.thresholds)
    row = find_input(table, args.input)
    supply = args.supply or row.supply
    if args.pullup_range:
        pull = args.pullup_range
    elif args.internal_pullup:
        if row.pullup_ohms is None:
            raise ConfigError(f"the input {row.name!r} has no internal pull-up range in the table")
        pull = row.pullup_ohms
    else:
        if args.pullup <= 0:
            raise ConfigError("the pull-up must be positive")
        pull = (args.pullup * (1 - args.pullup_tol), args.pullup * (1 + args.pullup_tol))
    return Circuit(supply, args.supply_tol, pull, args.series_tol, args.cap_tol, row)


def run(args) -> int:
    import numpy as np

    from benchlog.design import (
        KINDS,
        check_rc,
        design_rc,
        design_software,
        load_thresholds,
        plot_latency,
        plot_node_voltage,
        plot_tradeoff,
    )
    from benchlog.errors import ConfigError, UsageError

    if args.list_inputs:
        for row in load_thresholds(args.thresholds).values():
            pull = f", pull-up {row.pullup_ohms[0]:g}-{row.pullup_ohms[1]:g} ohm" if row.pullup_ohms else ""
            print(
                f"{row.name}: VT+ {row.vt_plus[0]:g}-{row.vt_plus[1]:g} V, VT- {row.vt_minus[0]:g}-"
                f"{row.vt_minus[1]:g} V at {row.supply:g} V{pull} [{row.source}]"
            )
        return 0
    kinds = tuple(k.strip() for k in args.kinds.split(",") if k.strip())
    bad = [k for k in kinds if k not in KINDS]
    if bad or not kinds:
        raise UsageError(f"unknown debouncer {', '.join(bad) or '(none)'}: choose from {', '.join(KINDS)}")
    if not 0 <= args.margin < 100:
        raise UsageError(f"--margin must be 0 or more volts, got {args.margin:g}")
    if args.life_windows < 0 or args.life_windows > 50:
        raise UsageError("--life-windows must be between 0 and 50")
    series: str | float = args.series
    if args.series in ("none", "0"):
        series = 0.0
    elif args.series != "auto":
        series = _ohms(args.series)
    circuit = _circuit(args) if args.input else None
    try_pair = None
    if args.try_rc:
        if circuit is None:
            raise UsageError("--try needs --input (the threshold row)")
        r_text, sep, c_text = args.try_rc.partition(",")
        if not sep:
            raise UsageError(f"--try expects R,C such as 1k,220n, got {args.try_rc!r}")
        try:
            try_pair = (_ohms(r_text), _farads(c_text))
        except argparse.ArgumentTypeError as exc:
            raise UsageError(f"--try: {exc}") from None
    from benchlog.views.cli._progress import Progress

    bar = Progress("debounce", 2 + len(kinds) + (circuit is not None) + (try_pair is not None))
    try:
        bar.draw("reading the recordings", force=True)
        recs, names = load_records(args)
        bar.step(f"{len(recs)} recordings")
        ts = int(round(args.sample_ms * 1e6))
        soft = design_software(
            recs, ts, args.target_rate, kinds, args.life_windows, on_step=lambda what: bar.step(what)
        )
        if circuit is not None:
            bar.draw("RC at every tolerance corner", force=True)
            hard = design_rc(recs, circuit, series, args.preferred, min_margin_v=args.margin)
            bar.step()
        else:
            hard = None
        tried = check_rc(recs, circuit, *try_pair, args.margin) if try_pair else None
    finally:
        bar.close()
    if args.plot:
        try:
            args.plot.mkdir(parents=True, exist_ok=True)
            (args.plot / "debounce-delay.png").write_bytes(plot_latency(soft.sweeps))
            if hard is not None:
                shown = hard.chosen or (hard.tradeoff[0] if hard.tradeoff else None)
                if shown is not None:
                    (args.plot / "rc-node-voltage.png").write_bytes(plot_node_voltage(recs, circuit, shown))
                if hard.tradeoff:
                    (args.plot / "rc-tradeoff.png").write_bytes(plot_tradeoff(hard.tradeoff))
            if tried is not None:
                (args.plot / "rc-tried.png").write_bytes(plot_node_voltage(recs, circuit, tried))
        except OSError as exc:
            raise ConfigError(f"cannot write plots to {args.plot}: {exc}") from exc
    if args.json:
        print(json.dumps(_as_json(names, soft, hard, tried), indent=2, default=_jsonable))
    else:
        print(_as_text(names, soft, hard, tried, np))
    return 0


# -- output ------------------------------------------------------------------------------------------------


def _jsonable(x):
    import numpy as np

    if isinstance(x, np.integer):
        return int(x)
    if isinstance(x, np.floating):
        return None if not np.isfinite(x) else float(x)
    if isinstance(x, np.ndarray):
        return x.tolist()
    raise TypeError(type(x).__name__)


def _clean(obj):
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if isinstance(obj, dict):
        return {k: _clean(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_clean(v) for v in obj]
    return obj


def _life_json(row, ts_ns):
    out = {
        "cycle_lo": row.cycle_lo,
        "cycle_hi": row.cycle_hi,
        "actuations": row.actuations,
        "bounce_max_ms": row.bounce_max_ms,
        "choices": {},
    }
    for deb, (m, b, p99) in row.choices.items():
        if m < 0:
            out["choices"][deb] = {"status": "none clean" if m == -1 else "tail unbounded"}
        else:
            out["choices"][deb] = {
                "window_ms": m * ts_ns / 1e6,
                "break_window_ms": b * ts_ns / 1e6,
                "delay_p99_ms": p99,
                "replayed": math.isfinite(p99),
            }
    return out


def _as_json(names, soft, hard, tried):
    from dataclasses import asdict

    out = {
        "recordings": names,
        "software": {
            "sample_ms": soft.ts_ns / 1e6,
            "target_rate": soft.target_rate,
            "actuations": soft.actuations,
            "choices": {k: asdict(c) for k, c in soft.choices.items()},
            "sweeps": {k: [asdict(p) for p in v] for k, v in soft.sweeps.items()},
            "life": [_life_json(r, soft.ts_ns) for r in soft.life],
        },
    }
    if hard is not None:
        c = hard.circuit
        out["rc"] = {
            "input": c.thresholds.name,
            "threshold_source": c.thresholds.source,
            "supply_v": c.supply,
            "pullup_ohms": list(c.pullup),
            "preferred": hard.series_name,
            "min_margin_v": hard.min_margin_v,
            "chosen": asdict(hard.chosen) if hard.chosen else None,
            "tradeoff": [asdict(x) for x in hard.tradeoff],
            "note": hard.note,
        }
    if tried is not None:
        out["rc_tried"] = asdict(tried)
    return _clean(out)


def _ms(x: float) -> str:
    return "-" if not math.isfinite(x) else f"{x:.3g}"


def _as_text(names, soft, hard, tried, np) -> str:
    from benchlog.design import format_si

    lines = [
        f"Recorded: {', '.join(names)}; {soft.actuations} complete makes and breaks judged.",
        f"Firmware sampling every {soft.ts_ns / 1e6:g} ms; target {soft.target_rate:g} false transitions "
        "per actuation.",
        "",
        "Recommended software debounce (delay from the first contact transition):",
        f"  {'debouncer':<22}{'setting':<22}{'false':>6}{'missed':>7}{'p50 ms':>8}{'p99 ms':>8}"
        f"{'max ms':>8}  {'est. rate':>10}{'95% bound':>11}",
    ]
    label = {
        "lockout": "lockout",
        "stable": "stable for n samples",
        "integrator": "up/down integrator",
        "confirm": "confirm after window",
    }
    for deb, c in soft.choices.items():
        if c.point is None:
            lines.append(f"  {label[deb]:<22}none ({c.note})")
            continue
        p = c.point
        if deb == "confirm":
            setting = f"make {p.window_ms:g} / break {p.brk_ms:g} ms"
        elif deb == "lockout":
            setting = f"{p.window_ms:g} ms"
        else:
            setting = f"n = {p.make} ({p.window_ms:g} ms)"
        rate = "-" if not math.isfinite(c.rate) else f"{c.rate:.1e}"
        lines.append(
            f"  {label[deb]:<22}{setting:<22}{p.false:>6}{p.missed:>7}{_ms(p.delay_p50_ms):>8}"
            f"{_ms(p.delay_p99_ms):>8}{_ms(p.delay_max_ms):>8}  {rate:>10}{c.rate_upper:>11.1e}"
            + (f"  ({c.note})" if c.note else "")
        )
    first = next(iter(soft.choices.values()))
    lines += [
        "",
        "  Rates extrapolate the tail of the figure each debouncer is sensitive to:",
        f"    makes:  {first.tail_make}",
        f"    breaks: {first.tail_break}",
        f"  Without any model, {soft.actuations} clean actuations bound the rate by "
        f"{first.zero_event_bound:.1e} (95 %).",
        "",
        "Sweep (false transitions / p99 delay ms):",
    ]
    for deb, pts in soft.sweeps.items():
        groups = [(label[deb], pts, "window_ms")]
        if deb == "confirm":
            half = len(pts) // 2
            groups = [
                (f"confirm, make (break {pts[0].brk_ms:g} ms)", pts[:half], "window_ms"),
                (f"confirm, break (make {pts[half].window_ms:g} ms)", pts[half:], "brk_ms"),
            ]
        for name, group, field in groups:
            step = max(1, len(group) // 10)
            cells = [f"{getattr(p, field):g}ms:{p.false}/{_ms(p.delay_p99_ms)}" for p in group[::step]]
            lines.append(f"  {name:<30}" + "  ".join(cells))
    if soft.life:
        lines += [
            "",
            "Over the unit's life (smallest clean setting in each window, p99 delay):",
            f"  {'cycles':<18}{'actuations':>11}{'max bounce ms':>14}  "
            + "".join(f"{label[d]:>24}" for d in soft.choices),
        ]
        for r in soft.life:
            cells = []
            for d in soft.choices:
                m, b, p99 = r.choices[d]
                if m < 0:
                    cells.append(f"{'none clean' if m == -1 else 'tail unbounded':>24}")
                    continue
                w = m * soft.ts_ns / 1e6
                text = f"{w:g}/{b * soft.ts_ns / 1e6:g} ms" if d == "confirm" else f"{w:g} ms"
                cells.append(f"{text + ', ' + _ms(p99) + ' ms':>24}")
            lines.append(
                f"  {f'{r.cycle_lo}-{r.cycle_hi}':<18}{r.actuations:>11}{r.bounce_max_ms:>14.3g}  "
                + "".join(cells)
            )
    if hard is not None:
        c = hard.circuit
        lines += [
            "",
            f"RC filter before: {c.thresholds.name} ({c.thresholds.source})",
            f"  supply {c.supply:g} V +-{c.supply_tol:.0%}, pull-up {format_si(c.pullup[0], 'ohm')} to "
            f"{format_si(c.pullup[1], 'ohm')}, series R +-{c.r_tol:.0%}, C +-{c.c_tol:.0%}, margin "
            f"{hard.min_margin_v:g} V, {hard.series_name} values",
        ]
        if hard.chosen:
            lines.append("  Recommended: " + _rc_line(hard.chosen, format_si))
        else:
            lines.append(f"  No recommendation: {hard.note}")
        if hard.tradeoff:
            lines += [
                "  Delay against margin, worst corner:",
                f"    {'series R':>10}{'C':>10}{'margin V':>10}{'press ms':>10}{'release ms':>11}  status",
            ]
            full_n = max(x.actuations for x in hard.tradeoff)
            for x in hard.tradeoff[:12]:
                if x.actuations == full_n:
                    status = "passes on every actuation" if x.passes else "fails on the full data"
                else:
                    status = f"passes on the {x.actuations} worst" if x.passes else "fails"
                    status += " (not replayed on all)" if x.passes else ""
                lines.append(
                    f"    {format_si(x.series, 'ohm'):>10}{format_si(x.cap, 'F'):>10}"
                    f"{_ms(x.margin_worst_v):>10}{_ms(x.press_worst_ms):>10}{_ms(x.release_worst_ms):>11}"
                    f"  {status}"
                )
    if tried is not None:
        lines += ["", "Checked pair: " + _rc_line(tried, format_si)]
    return "\n".join(lines)


def _rc_line(x, format_si) -> str:
    series = "no series R" if x.series == 0 else f"series {format_si(x.series, 'ohm')}"
    verdict = (
        "rejects every recorded bounce"
        if x.passes
        else (
            f"{x.false_worst} bounce(s) pass through at the worst corner"
            if x.false_worst
            else f"{x.missed_worst} missed"
            if x.missed_worst
            else "margin below the asked margin"
        )
    )
    return (
        f"{series}, C {format_si(x.cap, 'F')}: {verdict} over {x.corners} corners; margin "
        f"{_ms(x.margin_worst_v)} V worst ({_ms(x.margin_nominal_v)} V nominal); press delay "
        f"{_ms(x.press_ms[1])} ms p99 nominal, {_ms(x.press_worst_ms)} ms worst; release "
        f"{_ms(x.release_ms[1])} ms p99 nominal, {_ms(x.release_worst_ms)} ms worst"
    )

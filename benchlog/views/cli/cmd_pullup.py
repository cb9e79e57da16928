"""`benchlog pullup`: estimate an input's internal pull-up from two voltmeter readings (divider method)."""

from __future__ import annotations

import argparse
import json
import math

from benchlog.views.cli._args import JSON_HELP
from benchlog.views.cli.cmd_debounce import _ohms, _pct, _pos_float

NAME = "pullup"
HELP = "Estimate an internal pull-up from the open-pin voltage and the voltage across a known resistor."


def _ohms_or_inf(text: str) -> float:
    if text.strip().lower() in ("inf", "none", "ignore"):
        return math.inf
    v = _ohms(text)
    if v <= 0:
        raise argparse.ArgumentTypeError(f"meter input resistance must be positive: {text!r}")
    return v


def _digits(text: str) -> int:
    try:
        v = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a whole number of digits: {text!r}") from None
    if not 0 <= v <= 1000:
        raise argparse.ArgumentTypeError(f"digits must be 0-1000: {text!r}")
    return v


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "--open",
        dest="v_open",
        type=_pos_float,
        required=True,
        help="volts on the pin with nothing connected (pull-up enabled)",
    )
    p.add_argument(
        "--loaded",
        dest="v_load",
        type=_pos_float,
        required=True,
        help="volts on the pin with the known resistor from pin to ground",
    )
    p.add_argument("--resistor", type=_ohms, required=True, help="the known resistor, ohms (e.g. 33k)")
    p.add_argument("--resistor-tol", type=_pct, default=0.01, help="its tolerance, %% (default 1)")
    p.add_argument("--meter-pct", type=float, default=0.5, help="meter accuracy, %% of reading (default 0.5)")
    p.add_argument("--meter-digits", type=_digits, default=2, help="meter accuracy, digits (default 2)")
    p.add_argument(
        "--meter-step",
        type=_pos_float,
        default=0.001,
        help="volts per digit on the range used (default 0.001)",
    )
    p.add_argument(
        "--meter-input",
        type=_ohms_or_inf,
        default=10e6,
        help="meter input resistance, ohms, or 'inf' to ignore its loading (default 10M)",
    )
    p.add_argument("--json", action="store_true", help=JSON_HELP)


def run(args) -> int:
    from benchlog.design import Meter, estimate_pullup, format_si
    from benchlog.errors import UsageError

    if not 0 <= args.meter_pct < 100:
        raise UsageError("--meter-pct must be between 0 and 100")
    meter = Meter(args.meter_pct, args.meter_digits, args.meter_step, args.meter_input)
    est = estimate_pullup(args.v_open, args.v_load, args.resistor, args.resistor_tol, meter)
    if args.json:
        print(
            json.dumps(
                {
                    "pullup_ohms": est.ohms,
                    "worst_case_ohms": [est.low, est.high],
                    "standard_uncertainty_ohms": est.std_ohms,
                    "expanded_uncertainty_ohms_k2": est.expanded_ohms,
                    "supply_v": est.supply_v,
                },
                indent=2,
            )
        )
        return 0
    rel = est.expanded_ohms / est.ohms
    print(
        f"Pull-up: {format_si(est.ohms, 'ohm')} +- {format_si(est.expanded_ohms, 'ohm')} "
        f"({rel:.1%}, k = 2, from the meter's accuracy and the resistor's tolerance)"
    )
    print(f"Worst case over the accuracy limits: {format_si(est.low, 'ohm')} to {format_si(est.high, 'ohm')}")
    print(f"Open-circuit pin voltage (meter loading removed): {est.supply_v:.4g} V")
    if not 0.3 < est.ohms / args.resistor < 3:
        print(f"Tip: a known resistor near {format_si(est.ohms, 'ohm')} gives the smallest uncertainty.")
    return 0

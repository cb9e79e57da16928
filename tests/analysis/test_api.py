"""The public surface other stages build on (store, dashboard, qualification)."""

from __future__ import annotations

import inspect

import numpy as np

import benchlog.analysis as analysis
from benchlog.analysis import ACTUATION_DTYPE, Analyzer, Segmenter, measure


def test_every_public_name_exists_and_nothing_private_leaks():
    assert len(set(analysis.__all__)) == len(analysis.__all__)
    for name in analysis.__all__:
        assert hasattr(analysis, name), name
        assert not name.startswith("_")


def test_contract_columns_stay_in_place():
    # the columns the skeleton fixed come first, in order; added ones follow
    fixed = [
        "channel", "kind", "cycle", "t_start_ns", "t_first_ns", "t_settle_ns", "transit_us", "bounce_us",
        "bounce_count", "longest_gap_us", "wrong_state_us", "glitches", "chatter", "transfer_us", "flags",
        "verdict",
    ]  # fmt: skip
    assert list(ACTUATION_DTYPE.names[: len(fixed)]) == fixed
    assert list(ACTUATION_DTYPE.names[len(fixed) :]) == ["t_end_ns", "drive_level"]


def test_signatures_used_from_notebooks():
    assert Segmenter is Analyzer
    assert list(inspect.signature(Analyzer).parameters) == ["settings", "spec"]
    assert list(inspect.signature(Analyzer.push).parameters)[1:4] == ["edges", "drives", "incidents"]
    assert list(inspect.signature(measure).parameters)[:4] == ["edges", "drives", "incidents", "settings"]
    assert measure(_empty()).dtype == ACTUATION_DTYPE


def _empty():
    from benchlog.events import TimedEdges

    return TimedEdges.empty()


def test_empty_input_gives_an_empty_table():
    rows = measure(_empty())
    assert isinstance(rows, np.ndarray) and len(rows) == 0

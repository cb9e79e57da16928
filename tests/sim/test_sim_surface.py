"""The public surfaces of the sim, link and ingest stages, and their place in the layering."""

from __future__ import annotations

from pathlib import Path

import benchlog.ingest
import benchlog.link
import benchlog.sim
from tests.conftest import imports_of

ROOT = Path(benchlog.sim.__file__).parents[1]


def test_public_surfaces():
    assert {"Bench", "PtySampler", "Truth", "SimConfig", "load_preset", "parse_config"} <= set(
        benchlog.sim.__all__
    )
    assert set(benchlog.link.__all__) == {"Chunk", "Link", "Outage", "PortInfo", "list_ports"}
    ingest = {"CaptureFeed", "Feed", "FeedCounters", "merge_timed", "empty_timed"}
    assert set(benchlog.ingest.__all__) == ingest
    for mod in (benchlog.sim, benchlog.link, benchlog.ingest):
        assert all(hasattr(mod, name) for name in mod.__all__)


def test_layering():
    # the link knows nothing of the protocol; the sim nothing of pyserial or the host stages
    assert not {m for m in imports_of("link") if m.startswith(("benchlog.wire", "benchlog.clock"))}
    sim = imports_of("sim")
    assert not {
        m for m in sim if m.startswith(("serial", "benchlog.link", "benchlog.clock", "benchlog.ingest"))
    }
    assert not {m for m in imports_of("ingest") if m.startswith(("benchlog.store", "benchlog.views"))}
    # presets are package data inside benchlog/, so they install with it
    assert (ROOT / "presets" / "demo.toml").is_file()

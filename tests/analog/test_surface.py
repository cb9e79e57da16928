"""The analog stage's public surface and its place in the layering."""

from __future__ import annotations

import benchlog.analog
from tests.conftest import imports_of


def test_public_surface():
    assert all(hasattr(benchlog.analog, name) for name in benchlog.analog.__all__)
    assert {"read_capture", "measure_capture", "fraction_levels", "Capture"} <= set(benchlog.analog.__all__)


def test_layering():
    # analog may use analysis, design, the simulator's physics and the shared bottom modules; nothing above
    above = (
        "benchlog.store",
        "benchlog.views",
        "benchlog.recorder",
        "benchlog.ingest",
        "benchlog.link",
        "benchlog.stats",
        "benchlog.wire",
        "benchlog.clock",
        "serial",
        "textual",
        "sqlalchemy",
    )
    assert not {m for m in imports_of("analog") if m.startswith(above)}
    for lower in ("analysis", "design", "sim"):
        assert not {m for m in imports_of(lower) if m.startswith("benchlog.analog")}

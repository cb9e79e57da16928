"""The design stage's public surface: every exported name exists, and the stage imports nothing above it."""

from __future__ import annotations

import subprocess
import sys

import benchlog.design as design


def test_every_exported_name_exists():
    assert sorted(design.__all__) == sorted(set(design.__all__))
    for name in design.__all__:
        assert hasattr(design, name), name


def test_design_does_not_import_views_store_or_plotting_at_import():
    code = (
        "import sys, benchlog.design; "
        "bad = [m for m in sys.modules if m.startswith(('benchlog.views', 'benchlog.store', 'matplotlib'))]; "
        "print(bad); sys.exit(1 if bad else 0)"
    )
    assert subprocess.run([sys.executable, "-c", code], capture_output=True).returncode == 0

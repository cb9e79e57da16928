"""The public surface of the wire and clock stages, and their place in the layering."""

from __future__ import annotations

import subprocess
import sys

import benchlog.clock
import benchlog.wire


def test_all_names_exist():
    for mod in (benchlog.wire, benchlog.clock):
        assert mod.__all__ and len(set(mod.__all__)) == len(mod.__all__)
        for name in mod.__all__:
            assert hasattr(mod, name), (mod.__name__, name)


def test_wire_and_clock_import_no_io_and_no_higher_stage():
    code = (
        "import sys, benchlog.wire, benchlog.clock; "
        "bad = [m for m in sys.modules if m == 'serial' or m.startswith(('serial.', 'benchlog.link', "
        "'benchlog.store', 'benchlog.analysis', 'benchlog.views', 'sqlalchemy', 'textual'))]; "
        "print(bad); sys.exit(1 if bad else 0)"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert done.returncode == 0, done.stdout + done.stderr

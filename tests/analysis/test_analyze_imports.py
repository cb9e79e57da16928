"""What `benchlog analyze` loads, and the small helpers that keep it short.

`benchlog analyze` is timed against a plain Python loop (tests/benchmarks/bench_scale.py); a module it
never uses costs every run its import. These tests hold the command to the modules it needs (no timing
here: whether a module is loaded does not depend on the machine's load)."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

import benchlog
from benchlog.analysis._analyzer import channels_in
from tests.clock.test_clock_replay import recording

# modules the command does not need without --spec: the spec module (with the TOML parser), the host
# commands, and numpy.ma (np.unique's hashing path imports it on first use)
NOT_NEEDED = ("benchlog.analysis._spec", "tomllib", "benchlog.wire._commands", "numpy.ma")

PROBE = """
import contextlib, io, json, sys
from benchlog.views.cli import main
with contextlib.redirect_stdout(io.StringIO()):
    code = main(["analyze", sys.argv[1], "--json"])
import gc
print(json.dumps([code, sorted(sys.modules), gc.get_freeze_count()]))
"""


def test_analyze_loads_no_module_it_does_not_use(tmp_path):
    from benchlog.sim import load_preset

    path = tmp_path / "capture.bin"
    # a reset mid-run and flipped bits: the reset and fault paths run too
    path.write_bytes(recording(load_preset("demo").with_faults(reset_at_cycle=8, flip_rate=1e-4), 2.0))
    # the child imports the benchlog under test, whatever the working directory
    env = dict(os.environ, PYTHONPATH=str(Path(benchlog.__file__).resolve().parents[1]))
    cmd = [sys.executable, "-c", PROBE, str(path)]
    out = subprocess.run(cmd, capture_output=True, text=True, check=True, env=env, cwd=tmp_path)
    code, modules, frozen = json.loads(out.stdout)
    assert code == 0
    # the modules' objects were moved out of the collector's reach once loaded (gc.freeze)
    assert frozen > 10_000
    assert "benchlog.analysis._analyzer" in modules  # the probe did measure
    assert [m for m in NOT_NEEDED if m in modules] == []


def test_channels_in_is_numpys_unique():
    rng = np.random.default_rng(1)
    for n in (0, 1, 5, 1000):
        for hi in (1, 8, 16, 256):
            channel = rng.integers(0, hi, n).astype(np.uint8)
            # numpy's own unique as the reference
            assert channels_in(channel) == np.unique(channel).tolist()
    wide = np.array([300, 2, 300, 7], np.int64)  # not uint8: the general path
    assert channels_in(wide) == [2, 7, 300]


FAULTS = """
import resource, sys
import numpy as np
import pytest
from benchlog.views.cli.cmd_analyze import reuse_freed_memory
took = reuse_freed_memory() if sys.argv[1] == "keep" else None
before = resource.getrusage(resource.RUSAGE_SELF).ru_minflt
for _ in range(20):  # a batch's arrays, made and dropped again and again
    batch = [np.ones(1 << 15) for _ in range(64)]  # 64 arrays of 256 KiB
    del batch
print(took, resource.getrusage(resource.RUSAGE_SELF).ru_minflt - before)
"""


def test_freed_batch_memory_is_reused_not_faulted_in_again(tmp_path):
    env = dict(os.environ, PYTHONPATH=str(Path(benchlog.__file__).resolve().parents[1]))

    def faults(mode: str) -> tuple[str, int]:
        cmd = [sys.executable, "-c", FAULTS, mode]
        took, n = subprocess.run(cmd, capture_output=True, text=True, check=True, env=env).stdout.split()
        return took, int(n)

    took, kept = faults("keep")
    if took != "True":
        pytest.skip("the C library here has no glibc mallopt")
    _, default = faults("default")
    # 20 rounds of 16 MiB: about 80,000 page faults when each round's memory is handed back and taken
    # again (a 4 KiB page each), about the first round's 4,000 when it is kept (page counts, not times)
    assert default > 40_000
    assert kept < default / 5


def test_rows_by_channel_are_a_stable_sorts_groups():
    from benchlog.analysis._analyzer import _by_channel

    rng = np.random.default_rng(5)
    for n in (1, 7, 5000):
        channel = rng.integers(0, 16, n).astype(np.uint8)
        # numpy's stable argsort as the reference: each channel's rows in order, channels ascending
        order = np.argsort(channel, kind="stable")
        want = [(int(c), order[channel[order] == c]) for c in np.unique(channel)]
        got = _by_channel(channel, np.arange(n), channel)  # the rows themselves, and the channel column
        assert [c for c, _ in got] == [c for c, _ in want]
        assert all(np.array_equal(g, w) for (_, (g, _)), (_, w) in zip(got, want, strict=True))
        assert all((cols[1] == c).all() for c, cols in got)

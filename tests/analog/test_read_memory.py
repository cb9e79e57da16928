"""The block reader's memory from block to block: parsing more blocks maps no more memory than their
values take.

Counted in minor page faults (getrusage), not time: a page the process maps and touches for the first
time is one fault, so a reader that allocates fresh arrays of a few MB for every block, which the C
library hands back to the kernel when they are freed, pays hundreds of faults a block, where one that
reuses its scratch arrays pays only for the columns it returns. The reads run in a process of their
own, so its count holds only the reader's faults, from a heap no earlier test has shaped.
"""

from __future__ import annotations

import json
import resource
import subprocess
import sys
from pathlib import Path

import numpy as np

from benchlog.analog import _csv as csv_reader

PAGE = resource.getpagesize()


def _write(path, text: bytes, size: int) -> None:
    """A %g export of about `size` bytes: the same lines over and over (read_columns does not ask for
    time to increase)."""
    with path.open("wb") as f:
        f.write(b"Time,CH1,CH2\n")
        for _ in range(size // len(text) + 1):
            f.write(text)


def _faults_of_second_read(path) -> tuple[int, int]:
    """(minor faults of the second of two reads of `path`, bytes of the columns it returned): the first
    read warms what is made once (imports, the page cache, the C library's heap)."""
    layout = csv_reader.sniff(path)
    csv_reader.read_columns(path, layout, [0, 1, 2], workers=2)
    before = resource.getrusage(resource.RUSAGE_SELF).ru_minflt
    cols = csv_reader.read_columns(path, layout, [0, 1, 2], workers=2)
    faults = resource.getrusage(resource.RUSAGE_SELF).ru_minflt - before
    return faults, sum(c.nbytes for c in cols)


def _in_own_process(*paths: Path) -> list[tuple[int, int]]:
    """`_faults_of_second_read` of each path, in a fresh interpreter."""
    code = (
        "import json, sys; from pathlib import Path; from tests.analog.test_read_memory import "
        "_faults_of_second_read as f; print(json.dumps([f(Path(p)) for p in sys.argv[1:]]))"
    )
    root = Path(__file__).resolve().parents[2]
    out = subprocess.run(
        [sys.executable, "-c", code, *map(str, paths)], cwd=root, capture_output=True, text=True, check=True
    )
    return [tuple(r) for r in json.loads(out.stdout)]


def test_more_blocks_map_no_more_memory_than_their_values(tmp_path):
    rng = np.random.default_rng(23)
    t = (np.arange(20_000) - 5_000) * 1e-7
    v = np.round(rng.normal(2.5, 2.6, (20_000, 2)), 4)
    text = "".join(f"{a:g},{b:g},{c:g}\n" for a, (b, c) in zip(t, v, strict=True)).encode()
    small, large = tmp_path / "small.csv", tmp_path / "large.csv"
    # both files give columns of more than 4 MB (which are mapped afresh for each read, page by page)
    _write(small, text, 12 * csv_reader.CHUNK_BYTES)
    _write(large, text, 44 * csv_reader.CHUNK_BYTES)
    (faults_small, bytes_small), (faults_large, bytes_large) = _in_own_process(small, large)
    # the 32 more blocks of the large file may map the pages of their values (the columns returned)
    # and nothing else of any size: a block's scratch arrays are those of the block before
    values_pages = (bytes_large - bytes_small) / PAGE
    extra = faults_large - faults_small
    assert extra < 1.25 * values_pages + 2000, (
        f"{extra} more page faults for {values_pages:.0f} more pages of values "
        f"(small file {faults_small}, large file {faults_large})"
    )

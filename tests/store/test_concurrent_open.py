"""Several recorders opening one new SQLite file at the same moment all get the whole schema."""

from __future__ import annotations

import multiprocessing as mp

from benchlog.store import Store
from tests.conftest import HANG_S


def _open(path: str, results) -> None:
    try:
        Store.open(path).close()
        results.put("ok")
    except Exception as exc:  # the test reports what went wrong in the child
        results.put(f"{type(exc).__name__}: {exc}")


def test_simultaneous_first_opens_never_see_half_a_schema(tmp_path):
    ctx = mp.get_context("fork")
    for i in range(6):
        path = str(tmp_path / f"bench{i}.sqlite")
        results = ctx.Queue()
        procs = [ctx.Process(target=_open, args=(path, results)) for _ in range(3)]
        try:
            for p in procs:
                p.start()
            got = [results.get(timeout=HANG_S) for _ in procs]
        finally:
            for p in procs:  # never outlives the test
                p.join(HANG_S)
                if p.is_alive():
                    p.kill()
                    p.join()
                p.close()
            results.close()
            results.join_thread()
        assert got == ["ok"] * 3
        with Store.open(path, readonly=True) as store:
            assert store.runs() == []

"""Several recorders opening one new SQLite file at the same moment all get the whole schema."""

from __future__ import annotations

import multiprocessing as mp

from benchlog.store import Store


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
        for p in procs:
            p.start()
        for p in procs:
            p.join(30)
        assert [results.get(timeout=5) for _ in procs] == ["ok"] * 3
        with Store.open(path, readonly=True) as store:
            assert store.runs() == []

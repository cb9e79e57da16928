"""The same qualification from a PostgreSQL store (own schema), as the lab's shared store would be."""

import json
import uuid

import pytest
from sqlalchemy import create_engine, text
from storefill import fill

from benchlog.views.cli import main
from tests.conftest import need_postgres_url


@pytest.mark.postgres
def test_qualify_reads_postgresql(tmp_path, capsys):
    base = need_postgres_url()
    schema = "q_" + uuid.uuid4().hex[:12]
    url = f"{base}{'&' if '?' in base else '?'}options=-csearch_path%3D{schema}"
    admin = create_engine(base)
    with admin.begin() as c:
        c.execute(text(f'CREATE SCHEMA "{schema}"'))
    try:
        fill(url, units_per_lot=6, recorded=150, seed=3)
        sqlite = fill(tmp_path / "same.sqlite", units_per_lot=6, recorded=150, seed=3)
        results = []
        for db in (url, sqlite):
            out = tmp_path / f"q{len(results)}.json"
            code = main(
                [
                    "qualify",
                    "--db",
                    db,
                    "--incumbent",
                    "AG-MS5",
                    "--candidate",
                    "VS-505",
                    "--json",
                    "-o",
                    str(out),
                    "--resamples",
                    "200",
                ]
            )
            doc = json.loads(out.read_text())
            results.append((code, [(c["name"], c["outcome"]) for c in doc["criteria"]]))
        capsys.readouterr()
        assert results[0] == results[1]  # the engine makes no difference to the verdict
        from benchlog.views.report import data_checksum, evaluate

        sums = []
        for db in (url, sqlite):
            ev = evaluate(db, "AG-MS5", "VS-505", resamples=100)
            sums.append(data_checksum([ev.incumbent, ev.candidate]))
        assert sums[0] == sums[1]  # the report's checksum is of the data, not of the store holding it
    finally:
        with admin.begin() as c:
            c.execute(text(f'DROP SCHEMA "{schema}" CASCADE'))
        admin.dispose()

from tests.store.conftest import db_url, open_store, pg_url, sqlite_url, store  # noqa: F401  (shared)

from tests.store.conftest import db_url, open_store, sqlite_url, store  # noqa: F401  (shared fixtures)

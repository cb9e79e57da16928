"""Alembic environment for benchlog. benchlog passes its own engine in `config.attributes["engine"]`;
run standalone (`alembic -x url=...`) it builds one from the given URL."""

from __future__ import annotations

from alembic import context

from benchlog.store._schema import metadata

config = context.config
target_metadata = metadata


def _run(connection) -> None:
    context.configure(
        connection=connection,
        target_metadata=target_metadata,
        render_as_batch=connection.dialect.name == "sqlite",
        transactional_ddl=True,
    )
    with context.begin_transaction():
        if connection.dialect.name == "sqlite":
            # the same for SQLite: take the write lock before reading the revision, so a second
            # process waits (busy_timeout) and then finds the whole schema, never half of it
            connection.exec_driver_sql("BEGIN IMMEDIATE")
        if connection.dialect.name == "postgresql":
            # two recorders opening a new shared database at once: the second waits here, then
            # finds the schema current (the key is arbitrary but fixed for benchlog)
            connection.exec_driver_sql("SELECT pg_advisory_xact_lock(7311020407)")
        context.run_migrations()


engine = config.attributes.get("engine")
if engine is None:
    from benchlog.store._engine import make_engine, resolve_url

    engine = make_engine(resolve_url(context.get_x_argument(as_dictionary=True).get("url")))

if context.is_offline_mode():
    context.configure(url=engine.url, target_metadata=target_metadata, literal_binds=True)
    with context.begin_transaction():
        context.run_migrations()
else:
    with engine.connect() as connection:
        _run(connection)
        connection.commit()

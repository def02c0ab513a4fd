"""Alembic environment for the fishway database.

Run through :func:`db.migrate.upgrade`, which passes an open connection in
``config.attributes["connection"]``; no alembic.ini is needed. With the ``alembic``
command line, set ``sqlalchemy.url`` (or ``FISHWAY_DATABASE_URL``) and
``script_location = db/migrations`` in an ini file of your own.
"""
from __future__ import annotations

from alembic import context

from db.engine import make_engine
from db.models import Base

config = context.config
target_metadata = Base.metadata


def _run(connection) -> None:
    context.configure(
        connection=connection,
        target_metadata=target_metadata,
        render_as_batch=True,
        compare_type=True,
    )
    with context.begin_transaction():
        context.run_migrations()


def run_migrations_online() -> None:
    connection = config.attributes.get("connection")
    if connection is not None:
        _run(connection)
        return
    engine = make_engine(config.get_main_option("sqlalchemy.url") or None)
    try:
        with engine.begin() as conn:
            _run(conn)
    finally:
        engine.dispose()


if context.is_offline_mode():
    raise RuntimeError("offline (SQL script) migrations are not supported; use db.migrate")
run_migrations_online()

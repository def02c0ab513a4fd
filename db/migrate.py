"""Create or upgrade the fishway database with alembic, without an ini file on disk.

>>> eng = make_engine("sqlite://")
>>> upgrade(eng) == head_revision()
True
>>> current_revision(eng) == head_revision()
True
>>> eng.dispose()

``upgrade`` is safe to run at every start-up: at head it does nothing, and migrations
only ever add to the schema (see ``db/migrations/script.py.mako``). New revisions are
written with ``alembic -c <your ini> revision -m "..."`` with ``script_location`` set to
``db/migrations``; the versions folder is shipped as package data.
"""
from __future__ import annotations

from pathlib import Path

from alembic import command
from alembic.config import Config
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory
from sqlalchemy.engine import Engine

from db.engine import make_engine

__all__ = ["MIGRATIONS_DIR", "alembic_config", "current_revision", "head_revision", "upgrade"]

MIGRATIONS_DIR = Path(__file__).resolve().parent / "migrations"


def alembic_config() -> Config:
    """Alembic configuration pointing at ``db/migrations`` (no ini file)."""
    cfg = Config()
    cfg.set_main_option("script_location", str(MIGRATIONS_DIR))
    return cfg


def head_revision() -> str:
    """Identifier of the newest migration."""
    head = ScriptDirectory.from_config(alembic_config()).get_current_head()
    assert head is not None
    return head


def current_revision(engine: Engine) -> str | None:
    """Revision the database is at (None for an empty database)."""
    with engine.connect() as conn:
        return MigrationContext.configure(conn).get_current_revision()


def upgrade(url_or_engine: str | Engine | None = None, revision: str = "head") -> str | None:
    """Bring a database to ``revision`` (default: the newest) in one transaction.

    Parameters
    ----------
    url_or_engine : str, Engine or None
        A SQLAlchemy URL, an engine, or None for :func:`db.engine.make_engine`'s default.
    revision : str
        Target revision.

    Returns
    -------
    str or None
        The revision the database is at afterwards.
    """
    own = not isinstance(url_or_engine, Engine)
    engine = make_engine(url_or_engine) if own else url_or_engine
    try:
        cfg = alembic_config()
        with engine.begin() as conn:
            cfg.attributes["connection"] = conn
            command.upgrade(cfg, revision)
        return current_revision(engine)
    finally:
        if own:
            engine.dispose()

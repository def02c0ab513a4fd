"""Database engines: embedded SQLite by default, any SQLAlchemy URL otherwise.

Which database
--------------
``make_engine(url=None, *, sqlite_path=None)`` picks, in this order:

1. the ``url`` argument (any SQLAlchemy URL, e.g.
   ``postgresql+psycopg://user@host:5432/fishway``);
2. ``sqlite_path`` (a file path for an embedded database);
3. the environment variable ``FISHWAY_DATABASE_URL``;
4. the default file ``<data dir>/fishway.sqlite``, where the data dir is
   ``FISHWAY_DATA_DIR`` or ``var/`` in the current working directory (created if missing).

SQLite settings
---------------
Every SQLite connection runs in WAL mode with ``synchronous=NORMAL`` (durable at each
checkpoint, safe against corruption; a power cut may lose the last commits), foreign
keys on and a 30 s busy timeout. The driver's own implicit transaction handling is
switched off and SQLAlchemy emits ``BEGIN`` itself (the recipe in the SQLAlchemy
pysqlite documentation), so DDL in migrations is transactional and ``BEGIN IMMEDIATE``
can be used by the ingest path (:mod:`db.readings`).

Example
-------
>>> eng = make_engine("sqlite://")          # in-memory, for experiments
>>> eng.dialect.name
'sqlite'
>>> with eng.connect() as c:
...     c.exec_driver_sql("PRAGMA foreign_keys").scalar()
1
>>> eng.dispose()
"""
from __future__ import annotations

import os
from pathlib import Path

import sqlalchemy as sa
from sqlalchemy import event
from sqlalchemy.engine import Engine

__all__ = [
    "DATABASE_URL_ENV",
    "DATA_DIR_ENV",
    "default_data_dir",
    "default_sqlite_path",
    "is_postgresql",
    "is_sqlite",
    "make_engine",
]

DATABASE_URL_ENV = "FISHWAY_DATABASE_URL"
DATA_DIR_ENV = "FISHWAY_DATA_DIR"
SQLITE_FILE_NAME = "fishway.sqlite"
SQLITE_BUSY_TIMEOUT_S = 30.0
SQLITE_CACHE_KIB = 65536  # page cache per connection (64 MiB)
SQLITE_WAL_AUTOCHECKPOINT_PAGES = 10000  # checkpoint the WAL every ~40 MB, not every 4 MB


def default_data_dir() -> Path:
    """Folder for local data: ``$FISHWAY_DATA_DIR`` or ``./var`` (not created here).

    >>> isinstance(default_data_dir(), Path)
    True
    """
    configured = os.environ.get(DATA_DIR_ENV, "").strip()
    return Path(configured) if configured else Path.cwd() / "var"


def default_sqlite_path() -> Path:
    """Default embedded database file, ``<data dir>/fishway.sqlite``.

    >>> default_sqlite_path().name
    'fishway.sqlite'
    """
    return default_data_dir() / SQLITE_FILE_NAME


def _install_sqlite_settings(engine: Engine) -> None:
    """Per-connection PRAGMAs and SQLAlchemy-managed BEGIN for pysqlite."""

    @event.listens_for(engine, "connect")
    def _on_connect(dbapi_connection, _record) -> None:  # pragma: no cover - trivial
        dbapi_connection.isolation_level = None  # we emit BEGIN ourselves
        cur = dbapi_connection.cursor()
        try:
            cur.execute("PRAGMA journal_mode=WAL")
            cur.execute("PRAGMA synchronous=NORMAL")
            cur.execute("PRAGMA foreign_keys=ON")
            cur.execute(f"PRAGMA busy_timeout={int(SQLITE_BUSY_TIMEOUT_S * 1000)}")
            cur.execute(f"PRAGMA cache_size=-{SQLITE_CACHE_KIB}")
            cur.execute(f"PRAGMA wal_autocheckpoint={SQLITE_WAL_AUTOCHECKPOINT_PAGES}")
        finally:
            cur.close()

    @event.listens_for(engine, "begin")
    def _on_begin(conn) -> None:  # pragma: no cover - trivial
        conn.exec_driver_sql("BEGIN")


def make_engine(url: str | None = None, *, sqlite_path: str | os.PathLike | None = None,
                echo: bool = False) -> Engine:
    """Create the SQLAlchemy engine for the fishway database.

    Parameters
    ----------
    url : str or None
        Any SQLAlchemy URL; wins over everything else.
    sqlite_path : path or None
        File for an embedded SQLite database (parent folders are created).
    echo : bool
        Log every statement (debugging).

    Returns
    -------
    Engine
        SQLite engines come configured as described in the module docstring.

    Raises
    ------
    ValueError
        If both ``url`` and ``sqlite_path`` are given.
    """
    if url is not None and sqlite_path is not None:
        raise ValueError("give either url or sqlite_path, not both")
    if url is None and sqlite_path is None:
        url = os.environ.get(DATABASE_URL_ENV, "").strip() or None
        if url is None:
            sqlite_path = default_sqlite_path()
    if sqlite_path is not None:
        path = Path(sqlite_path)
        path.parent.mkdir(parents=True, exist_ok=True)
        url = f"sqlite:///{path}"
    assert url is not None
    sa_url = sa.make_url(url)
    kwargs: dict = {"echo": echo}
    if sa_url.get_backend_name() == "sqlite":
        kwargs["connect_args"] = {"timeout": SQLITE_BUSY_TIMEOUT_S, "check_same_thread": False}
    else:
        kwargs["pool_pre_ping"] = True
    engine = sa.create_engine(sa_url, **kwargs)
    if engine.dialect.name == "sqlite":
        _install_sqlite_settings(engine)
    return engine


def is_sqlite(engine: Engine | sa.Connection) -> bool:
    """True when the engine (or connection) talks to SQLite."""
    return engine.dialect.name == "sqlite"


def is_postgresql(engine: Engine | sa.Connection) -> bool:
    """True when the engine (or connection) talks to PostgreSQL."""
    return engine.dialect.name == "postgresql"

"""Nightly online backup of the embedded SQLite database, keeping the last N.

``backup_sqlite(engine, now, *, backup_dir=None, keep=7) -> Path | None`` copies the live
database with SQLite's online backup API (:meth:`sqlite3.Connection.backup`, one step: in WAL
mode the copy reads one consistent snapshot while the ingest goes on writing) to
``<backup_dir>/fishway-YYYYMMDD.sqlite`` (``now``'s UTC date; ``backup_dir`` defaults to
``backups/`` beside the database file). The copy is written under a temporary name, checked
with ``PRAGMA quick_check`` and only then renamed, so a crash never leaves a half backup under
the final name; a backup of the same day is replaced. Afterwards only the ``keep`` newest
``fishway-*.sqlite`` files of the folder are kept. Returns the path, or None when the
database is not a SQLite file (PostgreSQL is backed up with its own tools, e.g. ``pg_dump``).

Reference: SQLite, "The Online Backup API" (sqlite.org/backup.html); Python ``sqlite3``
``Connection.backup``.

>>> import tempfile, pathlib
>>> from datetime import datetime, timezone
>>> from db.engine import make_engine
>>> from db.migrate import upgrade
>>> folder = pathlib.Path(tempfile.mkdtemp())
>>> eng = make_engine(sqlite_path=folder / "fishway.sqlite"); _ = upgrade(eng)
>>> backup_sqlite(eng, datetime(2026, 7, 1, 2, 0, tzinfo=timezone.utc)).name
'fishway-20260701.sqlite'
>>> eng.dispose()
"""
from __future__ import annotations

import contextlib
import os
import re
import sqlite3
from datetime import datetime
from pathlib import Path

from sqlalchemy.engine import Engine

from db.engine import is_sqlite
from db.types import to_utc

__all__ = ["BACKUP_PATTERN", "backup_sqlite", "sqlite_file"]

BACKUP_PATTERN = re.compile(r"^fishway-(\d{8})\.sqlite$")


def sqlite_file(engine: Engine) -> Path | None:
    """The database file of a SQLite engine (None for in-memory or other engines)."""
    if not is_sqlite(engine):
        return None
    name = engine.url.database
    if not name or name == ":memory:" or name.startswith("file:"):
        return None
    return Path(name).resolve()


def backup_sqlite(engine: Engine, now: datetime, *, backup_dir: str | os.PathLike | None = None,
                  keep: int = 7) -> Path | None:
    """Online backup of the SQLite database; see the module docstring."""
    if keep < 1:
        raise ValueError("keep must be at least 1")
    source = sqlite_file(engine)
    if source is None:
        return None
    folder = Path(backup_dir) if backup_dir is not None else source.parent / "backups"
    folder.mkdir(parents=True, exist_ok=True)
    target = folder / f"fishway-{to_utc(now):%Y%m%d}.sqlite"
    partial = target.with_name(target.name + ".partial")
    with contextlib.suppress(FileNotFoundError):
        partial.unlink()
    src = sqlite3.connect(source, timeout=30.0)
    try:
        dst = sqlite3.connect(partial)
        try:
            src.backup(dst)
            check = dst.execute("PRAGMA quick_check").fetchone()[0]
        finally:
            dst.close()
    finally:
        src.close()
    if check != "ok":
        partial.unlink()
        raise RuntimeError(f"backup of {source} failed its check: {check}")
    os.replace(partial, target)
    backups = sorted(p for p in folder.iterdir() if BACKUP_PATTERN.match(p.name))
    for old in backups[:-keep]:
        old.unlink()
    return target

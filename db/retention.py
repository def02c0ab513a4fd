"""Retention: raw readings are kept for a set period, rollups forever.

``prune(engine, now, keep_days=400, batch=50_000) -> PruneReport`` deletes raw readings
older than ``now − keep_days`` (UTC). Rollups are never touched: they were updated when
each reading arrived, so trends and reports over old periods stay complete.

* SQLite: per tag, deletes of at most ``batch`` rows, each in its own short transaction
  (the ingest path waits at most one batch for the write lock).
* PostgreSQL: first drops the monthly partitions that lie wholly before the cut-off
  (:func:`db.partitions.drop_partitions_before`; instant, no dead rows), then deletes the
  rest in the same batched way as on SQLite.

A scheduled job calls it, e.g. daily. ``keep_days`` must be at least 1.

>>> from datetime import datetime, timezone
>>> from db.engine import make_engine
>>> from db.migrate import upgrade
>>> eng = make_engine("sqlite://"); _ = upgrade(eng)
>>> prune(eng, datetime(2027, 2, 4, tzinfo=timezone.utc))
PruneReport(cutoff=datetime.datetime(2025, 12, 31, 0, 0, tzinfo=datetime.timezone.utc), \
rows_deleted=0, partitions_dropped=())
>>> eng.dispose()
"""
from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime, timedelta

import sqlalchemy as sa
from sqlalchemy.engine import Engine

from db.partitions import drop_partitions_before
from db.types import to_epoch_ms, to_utc

__all__ = ["DEFAULT_KEEP_DAYS", "PruneReport", "prune"]

DEFAULT_KEEP_DAYS = 400


@dataclass(frozen=True)
class PruneReport:
    """What one prune did: cut-off, rows deleted by batches, partitions dropped."""

    cutoff: datetime
    rows_deleted: int
    partitions_dropped: tuple[str, ...]


_TAGS = sa.text("SELECT id FROM tags ORDER BY id")
_EDGE = sa.text("SELECT ts_ms FROM readings WHERE tag_id = :tag AND ts_ms < :cut "
                "ORDER BY ts_ms LIMIT 1 OFFSET :skip")
_DELETE_UPTO = sa.text("DELETE FROM readings WHERE tag_id = :tag AND ts_ms <= :edge")
_DELETE_BEFORE = sa.text("DELETE FROM readings WHERE tag_id = :tag AND ts_ms < :cut")


def prune(engine: Engine, now: datetime, keep_days: float = DEFAULT_KEEP_DAYS,
          batch: int = 50_000) -> PruneReport:
    """Delete raw readings older than ``now − keep_days``; keep every rollup.

    Parameters
    ----------
    engine : Engine
    now : datetime
        Tz-aware reference time (the caller's clock).
    keep_days : float
        Retention of raw readings [days], ≥ 1.
    batch : int
        Most rows deleted per transaction, ≥ 1.
    """
    if not keep_days >= 1:
        raise ValueError("keep_days must be at least 1")
    if int(batch) != batch or batch < 1:
        raise ValueError("batch must be a positive integer")
    cutoff = to_utc(now) - timedelta(days=keep_days)
    cut_ms = to_epoch_ms(cutoff)
    dropped = tuple(drop_partitions_before(engine, cutoff))
    deleted = 0
    with engine.connect() as conn:
        tag_ids = [int(t) for t in conn.execute(_TAGS).scalars()]
    for tag in tag_ids:
        while True:
            with engine.begin() as conn:
                edge = conn.execute(_EDGE, {"tag": tag, "cut": cut_ms,
                                            "skip": int(batch) - 1}).scalar()
                if edge is None:
                    deleted += conn.execute(_DELETE_BEFORE, {"tag": tag, "cut": cut_ms}).rowcount
                    break
                deleted += conn.execute(_DELETE_UPTO, {"tag": tag, "edge": edge}).rowcount
    return PruneReport(cutoff=cutoff, rows_deleted=int(deleted), partitions_dropped=dropped)

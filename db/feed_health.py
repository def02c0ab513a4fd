"""Health of each data feed, one row per feed, for the dashboard and the alarm rules.

``update_feed_health(engine, feed, now, *, ok, readings_per_min=None, lag_s=None,
error=None)`` records one poll cycle: when ``ok`` the success time, rate [readings/min]
and lag [s] (newest reading's age at ``now``) are set and the count of failed polls in a row
goes back to 0; otherwise ``error`` (required) and its time are recorded, the count goes up by
one (in the same upsert, so the database keeps it across restarts of the ingest) and the last
success is kept, so a failing feed shows as such.
``feed_health_frame(engine)`` → index ``feed``; columns last_success_at, readings_per_min,
lag_s, last_error, last_error_at, updated_at (times tz-aware UTC), consecutive_errors.

>>> from datetime import datetime, timezone
>>> from db.engine import make_engine
>>> from db.migrate import upgrade
>>> eng = make_engine("sqlite://"); _ = upgrade(eng)
>>> t = datetime(2026, 7, 1, 14, 0, tzinfo=timezone.utc)
>>> update_feed_health(eng, "opcua", t, ok=True, readings_per_min=120.0, lag_s=1.5)
>>> update_feed_health(eng, "opcua", t, ok=False, error="connection refused")
>>> row = feed_health_frame(eng).loc["opcua"]
>>> update_feed_health(eng, "opcua", t, ok=False, error="connection refused")
>>> row = feed_health_frame(eng).loc["opcua"]
>>> row["readings_per_min"], row["last_error"], int(row["consecutive_errors"])
(np.float64(120.0), 'connection refused', 2)
>>> update_feed_health(eng, "opcua", t, ok=True, readings_per_min=118.0, lag_s=1.2)
>>> int(feed_health_frame(eng).loc["opcua", "consecutive_errors"])
0
>>> eng.dispose()
"""
from __future__ import annotations

import math
from datetime import datetime

import pandas as pd
import sqlalchemy as sa
from sqlalchemy.dialects import postgresql, sqlite
from sqlalchemy.engine import Engine

from db.models import FeedHealth
from db.types import to_utc

__all__ = ["feed_health_frame", "update_feed_health"]


def _upsert(dialect: str):
    table = FeedHealth.__table__
    if dialect == "sqlite":
        return sqlite.insert(table)
    if dialect == "postgresql":
        return postgresql.insert(table)
    raise NotImplementedError(f"feed health supports SQLite and PostgreSQL, not {dialect}")


def _finite_or_none(name: str, value: float | None) -> float | None:
    if value is not None and not (math.isfinite(value) and value >= 0):
        raise ValueError(f"{name} must be a finite number >= 0")
    return value


def update_feed_health(engine: Engine, feed: str, now: datetime, *, ok: bool,
                       readings_per_min: float | None = None, lag_s: float | None = None,
                       error: str | None = None) -> None:
    """Record the outcome of one poll cycle of ``feed`` at ``now``."""
    now = to_utc(now)
    table = FeedHealth.__table__
    if ok:
        values = {"last_success_at": now,
                  "readings_per_min": _finite_or_none("readings_per_min", readings_per_min),
                  "lag_s": _finite_or_none("lag_s", lag_s), "consecutive_errors": 0}
        update = dict(values)
    else:
        if not error:
            raise ValueError("a failed poll must say what went wrong (error)")
        values = {"last_error": error, "last_error_at": now, "consecutive_errors": 1}
        update = {**values, "consecutive_errors": table.c.consecutive_errors + 1}
    values["updated_at"] = update["updated_at"] = now
    stmt = _upsert(engine.dialect.name).values(feed=feed, **values)
    stmt = stmt.on_conflict_do_update(index_elements=["feed"], set_=update)
    with engine.begin() as conn:
        conn.execute(stmt)


def feed_health_frame(engine: Engine) -> pd.DataFrame:
    """All feeds' health (index ``feed``)."""
    table = FeedHealth.__table__
    with engine.connect() as conn:
        result = conn.execute(sa.select(table).order_by(table.c.feed))
        frame = pd.DataFrame(result.all(), columns=list(result.keys()))
    for col in ("last_success_at", "last_error_at", "updated_at"):
        frame[col] = pd.to_datetime(frame[col], utc=True)
    return frame.set_index("feed")

"""Monthly range partitions of ``readings`` on PostgreSQL (no-ops on SQLite).

On PostgreSQL ``readings`` is declared ``PARTITION BY RANGE (ts_ms)``; partition
``readings_pYYYYMM`` holds the UTC calendar month ``[first day 00:00, next first day)``
in epoch milliseconds. The initial migration creates the current and the next month.
A scheduled job calls :func:`ensure_partitions` (e.g. daily, ``until`` = now + 2 months);
:func:`db.readings.store_batch` also creates any missing month a batch needs (back-fill),
so a reading never fails for want of a partition. :func:`db.retention.prune` drops whole
partitions that lie entirely before the retention cut-off.

>>> month_bounds_ms(2026, 12)
(1796083200000, 1798761600000)
>>> partition_name(2026, 12)
'readings_p202612'
>>> months_between_ms(1796083200000, 1798761600000 + 1)
[(2026, 12), (2027, 1)]
"""
from __future__ import annotations

import re
import weakref
from datetime import UTC, datetime

import sqlalchemy as sa
from sqlalchemy.engine import Engine

from db.engine import is_postgresql
from db.types import ms_to_datetime, to_epoch_ms

__all__ = ["drop_partitions_before", "ensure_partitions", "ensure_partitions_ms",
           "existing_partitions", "month_bounds_ms", "months_between_ms", "partition_name"]

#: Months known to exist, per engine (filled by ensure_partitions_ms, cleared on drop).
_KNOWN: weakref.WeakKeyDictionary[Engine, set[tuple[int, int]]] = weakref.WeakKeyDictionary()

_NAME = re.compile(r"^readings_p(\d{4})(\d{2})$")


def _next_month(year: int, month: int) -> tuple[int, int]:
    return (year + 1, 1) if month == 12 else (year, month + 1)


def month_bounds_ms(year: int, month: int) -> tuple[int, int]:
    """Epoch-millisecond bounds ``[start, end)`` of a UTC calendar month."""
    if not 1 <= month <= 12:
        raise ValueError(f"month {month} out of 1..12")
    start = datetime(year, month, 1, tzinfo=UTC)
    end = datetime(*_next_month(year, month), 1, tzinfo=UTC)
    return to_epoch_ms(start), to_epoch_ms(end)


def partition_name(year: int, month: int) -> str:
    """Name of the partition holding a month."""
    return f"readings_p{year:04d}{month:02d}"


def months_between_ms(start_ms: int, end_ms: int) -> list[tuple[int, int]]:
    """(year, month) of every UTC month that overlaps ``[start_ms, end_ms)``."""
    if end_ms <= start_ms:
        return []
    first = ms_to_datetime(start_ms)
    last = ms_to_datetime(end_ms - 1)
    months, ym = [], (first.year, first.month)
    while ym <= (last.year, last.month):
        months.append(ym)
        ym = _next_month(*ym)
    return months


def existing_partitions(engine: Engine | sa.Connection) -> dict[tuple[int, int], str]:
    """Monthly partitions attached to ``readings`` (empty on SQLite)."""
    if not is_postgresql(engine):
        return {}
    sql = sa.text(
        "SELECT c.relname FROM pg_inherits i JOIN pg_class c ON c.oid = i.inhrelid "
        "JOIN pg_class p ON p.oid = i.inhparent WHERE p.relname = 'readings'"
    )

    def _read(conn: sa.Connection) -> dict[tuple[int, int], str]:
        found = {}
        for (name,) in conn.execute(sql):
            m = _NAME.match(name)
            if m:
                found[(int(m.group(1)), int(m.group(2)))] = name
        return found

    if isinstance(engine, sa.Connection):
        return _read(engine)
    with engine.connect() as conn:
        return _read(conn)


def ensure_partitions(engine: Engine, until: datetime, since: datetime | None = None) -> list[str]:
    """Create the monthly partitions covering ``[since, until]`` that do not exist yet.

    Parameters
    ----------
    engine : Engine
        The database; on SQLite nothing is done.
    until : datetime
        Tz-aware; the month containing it is included.
    since : datetime or None
        Tz-aware; default: the current month (UTC).

    Returns
    -------
    list of str
        Names of the partitions created (empty when all existed).
    """
    if not is_postgresql(engine):
        return []
    since = since or datetime.now(UTC)
    start_ms, end_ms = to_epoch_ms(since), to_epoch_ms(until) + 1
    if end_ms <= start_ms:
        raise ValueError("until must not be before since")
    return _create_months(engine, months_between_ms(start_ms, end_ms))


def ensure_partitions_ms(engine: Engine, start_ms: int, end_ms: int) -> list[str]:
    """Make sure every month overlapping ``[start_ms, end_ms)`` has a partition.

    Cheap when nothing is missing (remembers the months it has seen per engine); this is
    what the ingest path calls before each batch. No-op on SQLite.
    """
    if not is_postgresql(engine):
        return []
    known = _KNOWN.setdefault(engine, set())
    missing = [ym for ym in months_between_ms(start_ms, end_ms) if ym not in known]
    if not missing:
        return []
    created = _create_months(engine, missing)
    known.update(missing)
    return created


#: Advisory lock key serialising partition creation (CREATE TABLE IF NOT EXISTS is not
#: safe against a concurrent creator of the same table on PostgreSQL).
_PARTITION_LOCK_KEY = 0x46495348  # "FISH"


def _create_months(engine: Engine, months: list[tuple[int, int]]) -> list[str]:
    created = []
    with engine.begin() as conn:
        conn.execute(sa.text("SELECT pg_advisory_xact_lock(:k)"), {"k": _PARTITION_LOCK_KEY})
        have = existing_partitions(conn)
        for ym in months:
            if ym in have:
                continue
            lo, hi = month_bounds_ms(*ym)
            name = partition_name(*ym)
            conn.exec_driver_sql(
                f"CREATE TABLE IF NOT EXISTS {name} PARTITION OF readings "
                f"FOR VALUES FROM ({lo}) TO ({hi})"
            )
            created.append(name)
    return created


def drop_partitions_before(engine: Engine, cutoff: datetime) -> list[str]:
    """Drop the partitions whose whole month ends at or before ``cutoff`` (PostgreSQL).

    Used by retention; rollups are not touched. Returns the dropped names.
    """
    if not is_postgresql(engine):
        return []
    cutoff_ms = to_epoch_ms(cutoff)
    _KNOWN.pop(engine, None)
    dropped = []
    for ym, name in sorted(existing_partitions(engine).items()):
        if month_bounds_ms(*ym)[1] <= cutoff_ms:
            with engine.begin() as conn:
                conn.execute(sa.text("SELECT pg_advisory_xact_lock(:k)"),
                             {"k": _PARTITION_LOCK_KEY})
                conn.exec_driver_sql(f"DROP TABLE IF EXISTS {name}")
            dropped.append(name)
    return dropped

"""Retention (db/retention.py) and partitions (db/partitions.py).

References: the cut-off is plain calendar arithmetic (``now - keep_days``), checked
against pandas; month bounds against Python's ``datetime`` (proleptic Gregorian).
"""
from __future__ import annotations

from datetime import UTC, datetime, timedelta

import numpy as np
import pandas as pd
import pytest
import sqlalchemy as sa

from db.engine import is_postgresql
from db.partitions import (
    ensure_partitions,
    existing_partitions,
    month_bounds_ms,
    months_between_ms,
    partition_name,
)
from db.readings import readings_frame, store_batch
from db.retention import prune
from db.rollups import RESOLUTIONS_S, rollups_frame

NOW = datetime(2027, 6, 15, 12, 0, tzinfo=UTC)


def hourly_rows(tag: int, start: datetime, hours: int) -> list[tuple]:
    s0 = int(start.timestamp())
    return [(tag, s0 + 3600 * i, float(i % 97), 1) for i in range(hours)]


def test_prune_deletes_old_raw_and_keeps_rollups(db_engine, tags):
    start = NOW - timedelta(days=500)
    for tag in (tags["level"], tags["temp"]):
        store_batch(db_engine, hourly_rows(tag, start, 500 * 24))
    lo, hi = start - timedelta(days=1), NOW + timedelta(days=1)
    before = {(t, r): rollups_frame(db_engine, t, r, lo, hi)
              for t in (tags["level"], tags["temp"]) for r in RESOLUTIONS_S}
    raw_before = readings_frame(db_engine, tags["level"], lo, hi)

    report = prune(db_engine, NOW, keep_days=400, batch=700)

    cutoff = pd.Timestamp(NOW) - pd.Timedelta(days=400)   # reference: pandas arithmetic
    assert report.cutoff == cutoff
    raw_after = readings_frame(db_engine, tags["level"], lo, hi)
    pd.testing.assert_frame_equal(raw_after, raw_before[raw_before.index >= cutoff])
    for key, frame in before.items():
        pd.testing.assert_frame_equal(rollups_frame(db_engine, *key, lo, hi), frame)
    with db_engine.connect() as conn:
        left = conn.execute(sa.text("SELECT count(*) FROM readings")).scalar()
    assert left == 2 * len(raw_after)
    if is_postgresql(db_engine):
        assert report.partitions_dropped  # whole old months went at once
        assert all(name < partition_name(cutoff.year, cutoff.month)
                   for name in report.partitions_dropped)
    else:
        assert report.partitions_dropped == ()
        assert report.rows_deleted == 2 * (len(raw_before) - len(raw_after))
    # a second run finds nothing more
    assert prune(db_engine, NOW, keep_days=400, batch=700).rows_deleted == 0


def test_prune_argument_checks(db_engine):
    with pytest.raises(ValueError):
        prune(db_engine, NOW, keep_days=0)
    with pytest.raises(ValueError):
        prune(db_engine, NOW, batch=0)
    with pytest.raises(ValueError):
        prune(db_engine, datetime(2027, 1, 1))  # naive


@pytest.mark.parametrize("year, month", [(2026, 1), (2026, 12), (2028, 2), (2027, 2)])
def test_month_bounds(year, month):
    lo, hi = month_bounds_ms(year, month)
    first = datetime(year, month, 1, tzinfo=UTC)
    nxt = datetime(year + month // 12, month % 12 + 1, 1, tzinfo=UTC)
    assert (lo, hi) == (int(first.timestamp()) * 1000, int(nxt.timestamp()) * 1000)
    assert months_between_ms(lo, hi) == [(year, month)]
    assert months_between_ms(lo - 1, hi + 1)[1:-1] == [(year, month)]


def test_ensure_partitions(db_engine, tags):
    since = datetime(2029, 11, 20, tzinfo=UTC)
    until = datetime(2030, 2, 1, tzinfo=UTC)
    created = ensure_partitions(db_engine, until=until, since=since)
    if not is_postgresql(db_engine):
        assert created == [] and existing_partitions(db_engine) == {}
        return
    assert created == ["readings_p202911", "readings_p202912", "readings_p203001",
                       "readings_p203002"]
    assert ensure_partitions(db_engine, until=until, since=since) == []  # idempotent
    have = existing_partitions(db_engine)
    assert {(2029, 11), (2030, 2)} <= set(have)
    # a reading lands in its month's partition
    store_batch(db_engine, [(tags["level"], datetime(2030, 1, 31, 23, 59, 59, 999000,
                                                     tzinfo=UTC), 1.0, 1)])
    with db_engine.connect() as conn:
        assert conn.execute(sa.text("SELECT count(*) FROM readings_p203001")).scalar() == 1
        assert conn.execute(sa.text("SELECT count(*) FROM readings_p203002")).scalar() == 0


def test_store_batch_creates_missing_partitions(db_engine, tags):
    when = [datetime(2031, 7, 1, tzinfo=UTC), datetime(2024, 2, 29, tzinfo=UTC)]
    assert store_batch(db_engine, [(tags["temp"], w, 1.0, 1) for w in when]) == 2
    got = readings_frame(db_engine, tags["temp"], when[1], when[0] + timedelta(1))
    np.testing.assert_array_equal(got.index, pd.DatetimeIndex(sorted(when)).as_unit("ms"))
    if is_postgresql(db_engine):
        assert {(2031, 7), (2024, 2)} <= set(existing_partitions(db_engine))

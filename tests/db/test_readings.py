"""Ingest write path and raw queries (db/readings.py), on SQLite and PostgreSQL.

The reference for stored data is the data sent (pandas frames built independently of
the storage code); flags are the QARTOD flags of the IOOS manuals (1, 2, 3, 4, 9;
seen in ioos-qc's ``QartodFlags``).
"""
from __future__ import annotations

import random
from datetime import UTC, datetime, timedelta, timezone

import numpy as np
import pandas as pd
import pytest
import sqlalchemy as sa
from ioos_qc.qartod import QartodFlags

from db import readings as readings_module
from db.readings import latest_values, readings_frame, store_batch, validate_batch

T0 = datetime(2026, 3, 1, tzinfo=UTC)
T0_S = int(T0.timestamp())


def count(engine, table: str) -> int:
    with engine.connect() as conn:
        return conn.execute(sa.text(f"SELECT count(*) FROM {table}")).scalar()


def expected_frame(rows) -> pd.DataFrame:
    """Independent reference: first occurrence per (tag, ts) wins, sorted by time."""
    df = pd.DataFrame(rows, columns=["tag", "ts_s", "value", "flag"])
    df = df.drop_duplicates(["tag", "ts_s"], keep="first").sort_values("ts_s")
    df.index = pd.to_datetime(df["ts_s"].to_numpy() * 1000, unit="ms", utc=True)
    return df


def test_qartod_flag_values_match_ioos_qc():
    # Source: ioos-qc QartodFlags (QARTOD flags manual v1.2, 2020).
    assert (QartodFlags.GOOD, QartodFlags.UNKNOWN, QartodFlags.SUSPECT, QartodFlags.FAIL,
            QartodFlags.MISSING) == (1, 2, 3, 4, 9)


def test_round_trip_keeps_values_flags_and_utc_index(db_engine, tags):
    rows = [(tags["level"], T0_S + 10 * i, 100.0 + 0.001 * i, 1 if i % 7 else 3)
            for i in range(500)]
    assert store_batch(db_engine, rows) == 500
    got = readings_frame(db_engine, tags["level"], T0, T0 + timedelta(days=1))
    ref = expected_frame(rows)
    assert str(got.index.tz) == "UTC"
    np.testing.assert_array_equal(got.index.as_unit("ms").asi8, ref["ts_s"].to_numpy() * 1000)
    np.testing.assert_array_equal(got["value"].to_numpy(), ref["value"].to_numpy())  # float64 kept
    np.testing.assert_array_equal(got["flag"].to_numpy(), ref["flag"].to_numpy())


def test_reingest_is_a_no_op(db_engine, tags):
    rows = [(tags["temp"], T0_S + 60 * i, 12.0 + 0.01 * i, 1) for i in range(300)]
    assert store_batch(db_engine, rows) == 300
    before = (count(db_engine, "readings"), _rollups(db_engine))
    assert store_batch(db_engine, rows) == 0
    assert store_batch(db_engine, list(reversed(rows[100:200]))) == 0
    assert (count(db_engine, "readings"), _rollups(db_engine)) == before


def test_partly_new_batch_stores_only_the_new(db_engine, tags):
    rows = [(tags["temp"], T0_S + 60 * i, float(i), 1) for i in range(100)]
    store_batch(db_engine, rows[:60])
    # a changed value for an already stored key is ignored: the first stored value stays
    resent = [(t, s, v + 1000.0, f) for t, s, v, f in rows[40:60]] + rows[60:]
    assert store_batch(db_engine, resent) == 40
    got = readings_frame(db_engine, tags["temp"], T0, T0 + timedelta(days=1))
    np.testing.assert_array_equal(got["value"].to_numpy(), np.arange(100.0))


def test_out_of_order_arrivals_are_stored_in_place(db_engine, tags):
    rows = [(tags["level"], T0_S + i, 50.0 + i, 1) for i in range(1000)]
    shuffled = rows[:]
    random.Random(4).shuffle(shuffled)
    for i in range(0, 1000, 137):
        store_batch(db_engine, shuffled[i:i + 137])
    got = readings_frame(db_engine, tags["level"], T0, T0 + timedelta(hours=1))
    assert got.index.is_monotonic_increasing
    np.testing.assert_array_equal(got["value"].to_numpy(), 50.0 + np.arange(1000))


def test_first_of_two_equal_keys_in_a_batch_wins(db_engine, tags):
    rows = [(tags["do"], T0_S, 9.1, 1), (tags["do"], T0_S, 7.7, 3), (tags["do"], T0_S + 60, 9.0, 1)]
    assert store_batch(db_engine, rows) == 2
    got = readings_frame(db_engine, tags["do"], T0, T0 + timedelta(hours=1))
    assert got["value"].tolist() == [9.1, 9.0]


@pytest.mark.parametrize("bad_row, message", [
    ((1, T0_S + 5, 1.0, float("nan")), "flag"),           # NaN flag
    ((1, T0_S + 5, 1.0, 5), "QARTOD"),                      # not a QARTOD flag
    ((999_999, T0_S + 5, 1.0, 1), "unknown tag"),           # tag that does not exist
    ((1, datetime(2026, 3, 1, 0, 0, 5), 1.0, 1), "naive"),  # naive datetime
    ((1, T0_S + 5, float("inf"), 1), "infinite"),
    ((1, T0_S + 5, float("nan"), 1), "flag 9"),             # missing value must be flagged 9
    ((1, T0_S + 5, "high", 1), "not a number"),
    ((1, T0_S + 5, 1.0), "tuple"),                           # wrong shape
])
def test_a_bad_row_leaves_nothing_behind(db_engine, tags, bad_row, message):
    good = [(tags["level"], T0_S + i, 1.0 + i, 1) for i in range(5)]
    if bad_row[0] == 1:
        bad_row = (tags["level"], *bad_row[1:])
    with pytest.raises(ValueError, match=message):
        store_batch(db_engine, [*good, bad_row, *good[:2]])
    assert count(db_engine, "readings") == 0
    assert count(db_engine, "rollups") == 0


def test_failure_after_the_insert_rolls_everything_back(db_engine, tags, monkeypatch):
    def broken(*args, **kwargs):
        raise RuntimeError("rollup computation failed")

    monkeypatch.setattr(readings_module, "rollup_deltas", broken)
    with pytest.raises(RuntimeError, match="rollup computation failed"):
        store_batch(db_engine, [(tags["level"], T0_S + i, 1.0, 1) for i in range(50)])
    assert count(db_engine, "readings") == 0
    monkeypatch.undo()
    assert store_batch(db_engine, [(tags["level"], T0_S, 1.0, 1)]) == 1  # engine still usable


def test_time_forms_agree(db_engine, tags):
    plus_two = timezone(timedelta(hours=2))
    when = datetime(2026, 3, 1, 2, 0, 0, 250_000, tzinfo=plus_two)  # = 00:00:00.250 UTC
    rows = [(tags["level"], when, 1.0, 1), (tags["level"], T0_S + 0.250, 2.0, 1),
            (tags["level"], pd.Timestamp("2026-03-01T00:00:01Z"), 3.0, 1)]
    assert store_batch(db_engine, rows) == 2  # the first two are the same instant
    got = readings_frame(db_engine, tags["level"], T0, T0 + timedelta(seconds=2))
    assert got.index.tolist() == [pd.Timestamp("2026-03-01T00:00:00.250Z"),
                                  pd.Timestamp("2026-03-01T00:00:01Z")]


def test_missing_values_are_stored_as_missing(db_engine, tags):
    rows = [(tags["do"], T0_S, None, 9), (tags["do"], T0_S + 60, float("nan"), 9),
            (tags["do"], T0_S + 120, 8.5, 1)]
    assert store_batch(db_engine, rows) == 3
    got = readings_frame(db_engine, tags["do"], T0, T0 + timedelta(hours=1))
    assert got["flag"].tolist() == [9, 9, 1]
    assert np.isnan(got["value"].to_numpy()[:2]).all() and got["value"].iloc[2] == 8.5
    roll = _rollups(db_engine)
    assert {r[3] for r in roll} == {1}  # only the one real value is aggregated


def test_latest_values(db_engine, tags):
    store_batch(db_engine, [(tags["level"], T0_S + i, float(i), 1) for i in range(10)])
    store_batch(db_engine, [(tags["temp"], T0_S + 5, 11.5, 3), (tags["temp"], T0_S - 5, 11.0, 1)])
    latest = latest_values(db_engine)
    assert latest.index.tolist() == [tags["level"], tags["temp"]]  # "do" has no readings
    assert latest.loc[tags["level"], "value"] == 9.0
    assert latest.loc[tags["temp"], "ts"] == pd.Timestamp(T0 + timedelta(seconds=5))
    assert latest.loc[tags["temp"], "flag"] == 3
    only = latest_values(db_engine, [tags["temp"]])
    assert only.index.tolist() == [tags["temp"]]
    assert latest_values(db_engine, []).empty


def test_empty_batch_and_range_checks(db_engine, tags):
    assert store_batch(db_engine, []) == 0
    with pytest.raises(ValueError):
        readings_frame(db_engine, tags["level"], T0, T0)
    assert readings_frame(db_engine, tags["level"], T0, T0 + timedelta(1)).empty


def test_validate_batch_sorts_and_dedupes():
    tag, ts, value, flag = validate_batch([(2, 3, 1.0, 1), (1, 5, 2.0, 1), (2, 1, 3.0, 4),
                                           (2, 3, 9.0, 1)])
    assert tag.tolist() == [1, 2, 2] and ts.tolist() == [5000, 1000, 3000]
    assert value.tolist() == [2.0, 3.0, 1.0] and flag.tolist() == [1, 4, 1]


def _rollups(engine) -> list[tuple]:
    with engine.connect() as conn:
        return [tuple(r) for r in conn.execute(sa.text(
            "SELECT tag_id, res_s, bucket_ms, n, vsum, vmin, vmax, vfirst, vlast, flag_max "
            "FROM rollups ORDER BY tag_id, res_s, bucket_ms"))]


def test_concurrent_writers_never_double_count(db_engine, tags):
    # Four threads send the same 2000 readings in different shuffled batches at once.
    from concurrent.futures import ThreadPoolExecutor

    rows = [(tags["level"], T0_S + 7 * i, float(i % 50), 1) for i in range(2000)]

    def send(seed: int) -> int:
        mine = rows[:]
        random.Random(seed).shuffle(mine)
        return sum(store_batch(db_engine, mine[i:i + 250]) for i in range(0, 2000, 250))

    with ThreadPoolExecutor(4) as pool:
        new = list(pool.map(send, range(4)))
    assert sum(new) == 2000
    assert count(db_engine, "readings") == 2000
    with db_engine.connect() as conn:
        per_res = dict(conn.execute(sa.text(
            "SELECT res_s, sum(n) FROM rollups GROUP BY res_s")).all())
    assert per_res == {60: 2000, 900: 2000, 3600: 2000, 86400: 2000}

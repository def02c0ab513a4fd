"""Rollups (db/rollups.py) against pandas ``resample`` of the raw data.

Reference: pandas ``Series.resample(...).agg(count, min, max, mean, first, last)`` and
``idxmin``/``idxmax`` over the readings with a value, buckets left-closed and aligned
to the UTC epoch (pandas' default origin "start_day" equals the epoch alignment for
these widths, which all divide a day).
"""
from __future__ import annotations

import random
from datetime import UTC, datetime, timedelta

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from db.readings import readings_frame, store_batch
from db.rollups import RESOLUTIONS_S, rollup_deltas, rollups_frame

T0 = datetime(2026, 4, 10, 21, 0, tzinfo=UTC)
T0_S = int(T0.timestamp())


def make_readings(tag: int, n: int, seed: int) -> list[tuple]:
    """Irregular times (gaps up to 3 min), quantised values (ties happen), some flags."""
    rng = np.random.default_rng(seed)
    ts = T0_S + np.cumsum(rng.integers(1, 180, n))
    values = np.round(rng.normal(10.0, 2.0, n), 1)
    flags = rng.choice([1, 1, 1, 1, 2, 3, 4], n)
    rows = [(tag, int(t), float(v), int(f)) for t, v, f in zip(ts, values, flags, strict=True)]
    for i in range(0, n, 97):  # missing readings
        rows[i] = (tag, rows[i][1], None, 9)
    return rows


def pandas_rollup(raw: pd.DataFrame, res_s: int) -> pd.DataFrame:
    good = raw[raw["value"].notna()]
    grouped = good.resample(f"{res_s}s", origin="epoch")
    ref = grouped["value"].agg(["count", "min", "max", "mean", "first", "last", "sum"])
    ref["flag_max"] = grouped["flag"].max()
    ref = ref[ref["count"] > 0]
    # idxmin/idxmax refuse empty resample bins: group by the epoch-aligned floor instead
    by_bucket = good["value"].groupby(good.index.floor(f"{res_s}s"))
    ref["min_ts"] = by_bucket.idxmin()
    ref["max_ts"] = by_bucket.idxmax()
    return ref


@pytest.fixture
def shuffled_duplicated_ingest(db_engine, tags):
    """Two tags, ~3 days of readings, sent in shuffled, overlapping, repeated batches."""
    rows = make_readings(tags["level"], 2500, 1) + make_readings(tags["temp"], 2500, 2)
    batches = [rows[i:i + 300] for i in range(0, len(rows), 300)]
    batches += [rows[i:i + 450] for i in range(150, len(rows), 1100)]  # overlaps
    batches += random.Random(3).sample(batches, 5)                     # exact repeats
    order = random.Random(5).sample(range(len(batches)), len(batches))
    for i in order:
        batch = batches[i][:]
        random.Random(i).shuffle(batch)
        store_batch(db_engine, batch)
    return db_engine, tags


@pytest.mark.parametrize("res_s", RESOLUTIONS_S)
def test_rollups_equal_pandas_resample(shuffled_duplicated_ingest, res_s):
    engine, tags = shuffled_duplicated_ingest
    start, end = T0 - timedelta(days=1), T0 + timedelta(days=10)
    for tag in (tags["level"], tags["temp"]):
        raw = readings_frame(engine, tag, start, end)
        assert len(raw) == 2500  # nothing lost, nothing doubled
        ref = pandas_rollup(raw, res_s)
        got = rollups_frame(engine, tag, res_s, start, end)
        np.testing.assert_array_equal(got.index.as_unit("ms").asi8,
                                      ref.index.as_unit("ms").asi8)
        np.testing.assert_array_equal(got["count"].to_numpy(), ref["count"].to_numpy())
        for col in ("min", "max", "first", "last", "flag_max"):
            np.testing.assert_array_equal(got[col].to_numpy(), ref[col].to_numpy(), err_msg=col)
        # sums are added in a different order: float64 rounding only
        np.testing.assert_allclose(got["mean"].to_numpy(), ref["mean"].to_numpy(), rtol=1e-12)
        np.testing.assert_allclose(got["sum"].to_numpy(), ref["sum"].to_numpy(), rtol=1e-12)
        for col in ("min_ts", "max_ts"):  # ties: earliest, as pandas idxmin/idxmax
            assert (got[col] == ref[col]).all(), col


def test_first_and_last_times(shuffled_duplicated_ingest):
    engine, tags = shuffled_duplicated_ingest
    raw = readings_frame(engine, tags["level"], T0, T0 + timedelta(days=10))
    good = raw[raw["value"].notna()]
    hourly = good.reset_index().resample("3600s", on="ts", origin="epoch")["ts"]
    ref = pd.DataFrame({"first_ts": hourly.min(), "last_ts": hourly.max()}).dropna()
    got = rollups_frame(engine, tags["level"], 3600, T0, T0 + timedelta(days=10))
    assert (got["first_ts"].to_numpy() == ref["first_ts"].to_numpy()).all()
    assert (got["last_ts"].to_numpy() == ref["last_ts"].to_numpy()).all()


def test_rollups_frame_rejects_unknown_resolution(db_engine, tags):
    with pytest.raises(ValueError, match="resolution"):
        rollups_frame(db_engine, tags["level"], 300, T0, T0 + timedelta(1))


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(st.integers(1, 3), st.integers(0, 20_000),
                          st.sampled_from([-1.5, 0.0, 0.5, 2.25, 7.0]),
                          st.sampled_from([1, 2, 3, 4])),
                min_size=1, max_size=60, unique_by=lambda r: (r[0], r[1])))
def test_rollup_deltas_match_pandas_groupby(rows):
    # Pure function, checked against a pandas groupby on the same rows.
    tag, ts_s, value, flag = (np.array(c) for c in zip(*rows, strict=True))
    ts_ms = ts_s.astype("int64") * 1000
    got = rollup_deltas(tag.astype("int64"), ts_ms, value.astype("float64"),
                        flag.astype("int64"), (60, 900))
    df = pd.DataFrame({"tag": tag, "ts": ts_ms, "v": value, "f": flag}).sort_values(["tag", "ts"])
    expected = []
    for res in (60, 900):
        df["b"] = df["ts"] // (res * 1000) * res * 1000
        for (t, b), g in df.groupby(["tag", "b"], sort=True):
            imin, imax = g["v"].idxmin(), g["v"].idxmax()
            expected.append((t, res, b, len(g), g["v"].sum(), g["v"].min(), g.loc[imin, "ts"],
                             g["v"].max(), g.loc[imax, "ts"], g["v"].iloc[0], g["ts"].iloc[0],
                             g["v"].iloc[-1], g["ts"].iloc[-1], g["f"].max()))
    assert len(got) == len(expected)
    for a, b in zip(got, expected, strict=True):
        assert a[:4] == b[:4]
        assert a[4] == pytest.approx(b[4], rel=1e-12, abs=1e-12)
        assert a[5:] == b[5:]

"""M4 trend (db/trends.py) against an M4 computed by pandas from the raw data.

Reference: the M4 definition of Jugel, Jerzak, Hackenbroich & Markl (2014), PVLDB 7(10):
per pixel column the points with the first and last time and the min and max value.
Computed here with a pandas groupby over the raw readings; columns are assigned as the
module documents (a reading by its own time on raw data; by its rollup bucket's start
on rollups, except in the two partial buckets at the ends of the range).
"""
from __future__ import annotations

from datetime import UTC, datetime, timedelta

import numpy as np
import pandas as pd
import pytest

from db.readings import readings_frame, store_batch
from db.retention import prune
from db.trends import choose_resolution_s, m4_indices, trend

T0 = datetime(2026, 5, 1, tzinfo=UTC)
T0_S = int(T0.timestamp())


def store_series(engine, tag: int, n: int, step_s: int, seed: int) -> None:
    rng = np.random.default_rng(seed)
    values = np.round(rng.normal(0.0, 1.0, n).cumsum(), 2)  # 2 decimals: ties happen
    flags = rng.choice([1, 1, 1, 3], n)
    rows = [(tag, T0_S + i * step_s, float(v), int(f))
            for i, (v, f) in enumerate(zip(values, flags, strict=True))]
    for i in range(0, n, 20_000):
        store_batch(engine, rows[i:i + 20_000])


def reference_m4(raw: pd.DataFrame, start_ms: int, end_ms: int, width_px: int,
                 res_s: int) -> pd.DataFrame:
    ts = raw.index.as_unit("ms").asi8
    key = ts.copy()
    if res_s:
        w = res_s * 1000
        inner_lo, inner_hi = -(-start_ms // w) * w, (end_ms // w) * w
        inner = (ts >= inner_lo) & (ts < inner_hi)
        key[inner] = ts[inner] // w * w
    df = pd.DataFrame({"ts": ts, "value": raw["value"].to_numpy(),
                       "col": (key - start_ms) * width_px // (end_ms - start_ms)})
    g = df.groupby("col")
    picks = pd.concat([g["ts"].idxmin(), g["ts"].idxmax(), g["value"].idxmin(),
                       g["value"].idxmax()])
    return df.loc[np.unique(picks.to_numpy())].set_index("ts")


def assert_m4(got: pd.DataFrame, raw: pd.DataFrame, start: datetime, end: datetime,
              width_px: int) -> None:
    start_ms, end_ms = int(start.timestamp() * 1000), int(end.timestamp() * 1000)
    ref = reference_m4(raw, start_ms, end_ms, width_px, got.attrs["res_s"])
    got_ms = got.index.as_unit("ms").asi8
    np.testing.assert_array_equal(got_ms, ref.index.to_numpy())
    np.testing.assert_array_equal(got["value"].to_numpy(), ref["value"].to_numpy())
    # every point is a real reading, with its value; at most 4 per column
    assert got.index.isin(raw.index).all()
    np.testing.assert_array_equal(got["value"].to_numpy(), raw.loc[got.index, "value"].to_numpy())
    assert ref["col"].value_counts().max() <= 4
    assert len(got) <= 4 * width_px
    # global extremes kept
    assert got["value"].max() == raw["value"].max()
    assert got["value"].min() == raw["value"].min()


def test_raw_path_short_range(db_engine, tags):
    store_series(db_engine, tags["level"], 7200, 1, seed=1)
    start, end = T0 + timedelta(seconds=333), T0 + timedelta(seconds=6999)
    got = trend(db_engine, tags["level"], start, end, width_px=200)
    assert got.attrs == {"source": "raw", "res_s": 0, "width_px": 200}
    raw = readings_frame(db_engine, tags["level"], start, end)
    assert_m4(got, raw, start, end, 200)
    # raw flags are the readings' own
    np.testing.assert_array_equal(got["flag"].to_numpy(), raw.loc[got.index, "flag"].to_numpy())
    assert str(got.index.tz) == "UTC"


@pytest.mark.parametrize("width_px, res_s", [(300, 3600), (700, 900), (3000, 60)])
def test_rollup_path_matches_m4_of_raw(db_engine, tags, width_px, res_s):
    store_series(db_engine, tags["temp"], 30 * 1440, 60, seed=2)  # 30 days of 1-min data
    start = T0 + timedelta(hours=5, minutes=17, seconds=13)       # unaligned on purpose
    end = T0 + timedelta(days=29, hours=3, minutes=41)
    got = trend(db_engine, tags["temp"], start, end, width_px=width_px)
    assert got.attrs["source"] == "rollup" and got.attrs["res_s"] == res_s
    raw = readings_frame(db_engine, tags["temp"], start, end)
    assert_m4(got, raw, start, end, width_px)


def test_trend_after_raw_pruned_uses_rollups_and_keeps_extremes(db_engine, tags):
    store_series(db_engine, tags["do"], 20 * 1440, 60, seed=3)
    start, end = T0 + timedelta(hours=7, minutes=30), T0 + timedelta(days=19, hours=2)
    before = trend(db_engine, tags["do"], start, end, width_px=150)
    raw = readings_frame(db_engine, tags["do"], start, end)
    prune(db_engine, T0 + timedelta(days=400), keep_days=380)  # drops the first 20 days
    assert readings_frame(db_engine, tags["do"], start, end).empty
    after = trend(db_engine, tags["do"], start, end, width_px=150)
    assert after["value"].max() == raw["value"].max()
    assert after["value"].min() == raw["value"].min()
    # interior columns do not depend on raw rows at all
    inner = (after.index > before.index[3]) & (after.index < before.index[-4])
    assert after[inner].equals(before[(before.index > before.index[3])
                                      & (before.index < before.index[-4])])
    assert after.index.isin(raw.index).all()


def test_empty_and_invalid(db_engine, tags):
    got = trend(db_engine, tags["level"], T0, T0 + timedelta(days=365))
    assert got.empty and list(got.columns) == ["value", "flag"]
    with pytest.raises(ValueError):
        trend(db_engine, tags["level"], T0, T0)
    with pytest.raises(ValueError):
        trend(db_engine, tags["level"], T0, T0 + timedelta(1), width_px=0)


@pytest.mark.parametrize("span_s, width_px, expected", [
    (365 * 86400, 1500, 3600),   # a year: 5.8 h columns -> 1 h rollups
    (10 * 365 * 86400, 1500, 86400),
    (7 * 86400, 1500, 60),        # a week: 6.7 min columns -> 1 min rollups
    (30 * 86400, 1500, 900),      # 28.8 min columns -> 15 min
    (86400, 1500, 0),             # a day: 57.6 s columns -> raw
    (86400, 1440, 60),            # exactly one minute per column -> 1 min
])
def test_resolution_choice(span_s, width_px, expected):
    assert choose_resolution_s(span_s * 1000, width_px) == expected


def test_m4_indices_against_brute_force():
    rng = np.random.default_rng(7)
    col = np.sort(rng.integers(0, 40, 2000))
    value = np.round(rng.normal(size=2000), 1)
    got = m4_indices(col, value)
    expected = set()
    for c in np.unique(col):
        idx = np.flatnonzero(col == c)
        expected |= {idx[0], idx[-1], idx[np.argmin(value[idx])], idx[np.argmax(value[idx])]}
    assert got.tolist() == sorted(expected)

"""The fast paths of the ingest give what the reference paths give.

References: ``ops_logic.qc.flat_line_test`` (itself checked against ioos-qc's QARTOD flat line
test in tests/ops_logic/test_qc.py), ``climatology_test`` with months taken by pandas, and
``db.readings.store_batch`` (rows) for ``store_arrays`` (columns).
"""

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from db.catalog import add_fishway, add_site, add_tag
from db.engine import make_engine
from db.ingest.live_qc import _flat_line_tail
from db.migrate import upgrade
from db.readings import readings_frame, store_arrays, store_batch
from ops_logic.qc import SeasonalRange, climatology_test, flat_line_test


@settings(max_examples=150, deadline=None)
@given(n=st.integers(1, 80), k=st.integers(1, 40), seed=st.integers(0, 10_000),
       stuck=st.booleans())
def test_flat_line_tail_equals_the_whole_series_test(n, k, seed, stuck):
    rng = np.random.default_rng(seed)
    t = np.cumsum(rng.uniform(5.0, 15.0, n))
    x = np.round(rng.normal(0.0, 0.01, n), 3)
    if stuck:
        x[n // 3:] = x[n // 3]
    x[rng.random(n) < 0.05] = np.nan
    k = min(k, n)
    ref = flat_line_test(t, x, 0.002, 60.0, 120.0)[-k:]
    assert np.array_equal(_flat_line_tail(t, x, 0.002, 60.0, 120.0, k), ref)


@pytest.mark.parametrize("tz", ["UTC", "Etc/GMT+8", "Etc/GMT-11"])
def test_climatology_with_given_months_equals_computed_months(tz):
    times = pd.date_range("2026-01-30", "2026-03-02", freq="7h", tz="UTC")
    values = np.linspace(0.0, 20.0, len(times))
    ranges = [SeasonalRange(1, 1, (0.0, 8.0)), SeasonalRange(2, 3, (2.0, 12.0), (0.0, 18.0))]
    months = times.tz_convert(tz).month.to_numpy()  # pandas' own calendar months
    assert np.array_equal(climatology_test(times, values, ranges, tz=tz, months=months),
                          climatology_test(times, values, ranges, tz=tz))


def test_store_arrays_stores_what_store_batch_stores(tmp_path):
    engines = []
    for name in ("rows", "columns"):
        eng = make_engine(sqlite_path=tmp_path / f"{name}.sqlite")
        upgrade(eng)
        fw = add_fishway(eng, add_site(eng, "Test site"), "T")
        tags = [add_tag(eng, fw, f"t.{i}", "water_level", "m", poll_period_s=10)
                for i in range(3)]
        engines.append((eng, tags))
    rng = np.random.default_rng(3)
    ts = 1_767_225_600_000 + 10_000 * np.arange(400)
    (e1, tags1), (e2, tags2) = engines
    rows, cols = [], [[], [], [], []]
    for i in range(3):
        v = rng.normal(70.0, 0.1, ts.size)
        f = np.where(rng.random(ts.size) < 0.1, 3, 1)
        rows += [(tags1[i], int(t) / 1000.0, float(a), int(b))
                 for t, a, b in zip(ts, v, f, strict=True)]
        for c, arr in zip(cols, (np.full(ts.size, tags2[i]), ts, v, f), strict=True):
            c.append(arr)
    t_col, ts_col, v_col, f_col = (np.concatenate(c) for c in cols)
    assert store_batch(e1, rows) == store_arrays(e2, t_col, ts_col, v_col, f_col) == 1200
    assert store_arrays(e2, t_col, ts_col, v_col, f_col) == 0  # idempotent
    start, end = ts[0] / 1000.0, ts[-1] / 1000.0 + 1
    for a, b in zip(tags1, tags2, strict=True):
        pd.testing.assert_frame_equal(readings_frame(e1, a, start, end),
                                      readings_frame(e2, b, start, end))
    for eng, _ in engines:
        eng.dispose()

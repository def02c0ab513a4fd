"""The 7DADM helper against its definition: the mean of seven consecutive daily maxima (US EPA
Region 10 2003 temperature guidance, EPA 910-B-03-002; definition from memory)."""

from __future__ import annotations

import math
from datetime import UTC, date, datetime, timedelta
from zoneinfo import ZoneInfo

import numpy as np
import pandas as pd
import pytest

from ops_logic.alarms.temperature import seven_day_average_daily_max


def _days(maxima, start=datetime(2026, 7, 1, tzinfo=UTC), per_day=24):
    """Hourly readings whose daily maximum is ``maxima[k]`` (reached at 15:00), minimum 3 °C
    below."""
    t, v = [], []
    for k, m in enumerate(maxima):
        for h in range(per_day):
            t.append(start + timedelta(days=k, hours=h))
            v.append(m if h == 15 else m - 3.0 + 0.1 * (h % 5))
    return pd.DatetimeIndex(t), np.array(v)


def test_mean_of_seven_daily_maxima():
    t, v = _days([15, 16, 17, 18, 19, 20, 21, 22])
    out = seven_day_average_daily_max(t, v)
    assert out.index[0] == date(2026, 7, 1) and len(out) == 8
    assert out.iloc[:6].isna().all()  # fewer than seven days: no 7DADM, never a partial mean
    assert out.loc[date(2026, 7, 7)] == pytest.approx(18.0, abs=1e-12)  # mean(15 … 21)
    assert out.loc[date(2026, 7, 8)] == pytest.approx(19.0, abs=1e-12)  # mean(16 … 22)


def test_a_day_without_readings_breaks_the_windows_that_hold_it():
    t, v = _days([15.0] * 10)
    keep = ~((t >= datetime(2026, 7, 3, tzinfo=UTC)) & (t < datetime(2026, 7, 4, tzinfo=UTC)))
    out = seven_day_average_daily_max(t[keep], v[keep])
    assert len(out) == 10  # the missing day is still a row
    assert out.loc[date(2026, 7, 9)] != out.loc[date(2026, 7, 9)]  # NaN: window 3 … 9 July
    assert out.loc[date(2026, 7, 10)] == pytest.approx(15.0)  # window 4 … 10 July


def test_days_are_local_calendar_days():
    # one reading of 25 °C at 23:30 local time (UTC-8) on 7 July = 07:30 UTC on 8 July
    zone = ZoneInfo("Etc/GMT+8")
    start = datetime(2026, 7, 1, 0, 0, tzinfo=zone)
    t = [start + timedelta(hours=h) for h in range(8 * 24)]
    v = [10.0] * len(t)
    i = t.index(datetime(2026, 7, 7, 23, 0, tzinfo=zone))
    t[i] += timedelta(minutes=30)
    v[i] = 24.0
    local = seven_day_average_daily_max(pd.DatetimeIndex(t), v, time_zone="Etc/GMT+8")
    assert local.loc[date(2026, 7, 7)] == pytest.approx((6 * 10.0 + 24.0) / 7)
    as_utc = seven_day_average_daily_max(pd.DatetimeIndex(t), v, time_zone="UTC")
    assert as_utc.loc[date(2026, 7, 8)] == pytest.approx((6 * 10.0 + 24.0) / 7)


def test_against_a_plain_loop():
    rng = np.random.default_rng(7)
    t = pd.date_range("2026-06-01", periods=20 * 96, freq="15min", tz="UTC")
    v = 14.0 + 4.0 * np.sin(np.arange(len(t)) / 96 * 2 * np.pi) + rng.normal(0, 0.5, len(t))
    daily: dict[date, float] = {}
    for ts, x in zip(t, v, strict=True):
        d = ts.date()
        daily[d] = max(daily.get(d, -math.inf), x)
    days = sorted(daily)
    out = seven_day_average_daily_max(t, v)
    for i in range(6, len(days)):
        expected = sum(daily[d] for d in days[i - 6:i + 1]) / 7
        assert out.loc[days[i]] == pytest.approx(expected, abs=1e-12)


def test_min_readings_per_day():
    t, v = _days([15.0] * 7)
    keep = t >= datetime(2026, 7, 1, 12, tzinfo=UTC)  # day 1 keeps 12 readings (max included)
    assert math.isnan(seven_day_average_daily_max(t[keep], v[keep],
                                                  min_readings_per_day=13).iloc[-1])
    assert seven_day_average_daily_max(t[keep], v[keep],
                                       min_readings_per_day=12).iloc[-1] == 15.0


@pytest.mark.parametrize(("times", "values", "match"), [
    (pd.date_range("2026-07-01", periods=3, freq="h"), [1.0, 2.0, 3.0], "time-zone aware"),
    (pd.date_range("2026-07-01", periods=3, freq="h", tz="UTC"), [1.0, 2.0], "same length"),
    (pd.date_range("2026-07-01", periods=2, freq="h", tz="UTC"), [12.0, 60.0], "not a water"),
])
def test_bad_input_is_refused(times, values, match):
    with pytest.raises(ValueError, match=match):
        seven_day_average_daily_max(times, values)

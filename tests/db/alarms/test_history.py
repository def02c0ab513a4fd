"""Alarm history from the database (db/alarm/history.py), both engines.

The filters run in SQL; the reference is the pure filter on the whole table
(ops_logic.alarms.performance.alarm_history). The performance figures use a hand-built history
with known answers: annunciations counted per 10-minute period, chattering = 3 or more within
60 s, stale = active for more than 24 h (ISA-18.2 / EEMUA 191, from memory, REFERENCES.md).
"""
from __future__ import annotations

import io
from datetime import timedelta

import pandas as pd
import pytest

from db.alarm.history import alarm_history_csv, alarm_history_frame, alarm_performance_report
from db.alarm.store import site_ids
from db.alarms import record_alarm_event
from ops_logic.alarms.performance import alarm_history
from tests.db.alarms.conftest import T0

M = timedelta(minutes=1)


@pytest.fixture
def events(db_engine, demo_site):
    ids = site_ids(db_engine, demo_site)

    def add(key, minutes, kind="raised", state="unacknowledged", priority="low", **kw):
        rule, where = key.split("@")
        fishway = where.split(".")[0]
        record_alarm_event(db_engine, key, T0 + minutes * M, kind=kind, state=state,
                           priority=priority, rule=rule,
                           fishway_id=ids.fishways.get(fishway),
                           tag_id=ids.tags.get(where), **kw)

    add("stale_tag@east.do", -25 * 60)                        # raised 25 h before, never cleared
    add("do_low@west", -30 * 60, priority="medium")
    add("do_low@west", -2 * 60, "cleared", "rtn_unacknowledged", priority="medium")
    for i in range(6):                                         # six in the first 10 minutes
        add(f"head_drop@{'east' if i % 2 else 'west'}", i, priority="low")
    add("pump_trip@east.PS1", 20, priority="medium", value=1.0, message="tripped")
    add("pump_trip@east.PS1", 20.3, "cleared", "rtn_unacknowledged", priority="medium")
    add("pump_trip@east.PS1", 20.5, priority="medium")
    add("pump_trip@east.PS1", 20.6, "cleared", "rtn_unacknowledged", priority="medium")
    add("pump_trip@east.PS1", 20.8, priority="medium")         # 3 raises in 48 s: chattering
    add("pump_trip@east.PS1", 21, "acknowledged", "acknowledged", priority="medium",
        who="ana", why="pump reset")
    add("do_low_low@east", 40, priority="high", value=3.8)
    add("do_low@east", 45, "limit_changed", "normal", priority="medium", value=6.0,
        old_value=5.0, who="sam", why="warmer water")
    add("feed_comms@plant", 50, priority="medium")
    return ids


FILTERS = [{}, {"fishway": "east"}, {"fishway": "west"}, {"priority": "medium"},
           {"priority": 1}, {"rule": "pump_trip"}, {"state": "acknowledged"},
           {"fishway": "east", "priority": "medium", "rule": "pump_trip",
            "state": "rtn_unacknowledged"}]


@pytest.mark.parametrize("filters", FILTERS)
def test_sql_filters_match_the_pure_filter(db_engine, events, filters):
    start, end = T0, T0 + 60 * M
    every = alarm_history_frame(db_engine, T0 - 48 * 60 * M, T0 + 120 * M)
    expected = alarm_history(every, start, end, **filters)
    got = alarm_history_frame(db_engine, start, end, **filters)
    assert got["event_id"].tolist() == expected["event_id"].tolist()
    assert len(got) > 0  # every filter above selects something


def test_history_columns(db_engine, events):
    h = alarm_history_frame(db_engine, T0, T0 + 60 * M)
    trip = h[h["key"] == "pump_trip@east.PS1"].iloc[0]
    assert (trip["fishway_id"], trip["tag"], trip["message"], trip["value"]) == (
        "east", None, "tripped", 1.0)
    limit = h[h["kind"] == "limit_changed"].iloc[0]
    assert (limit["old_value"], limit["value"], limit["who"]) == (5.0, 6.0, "sam")
    assert pd.isna(h[h["key"] == "feed_comms@plant"]["fishway_id"].iloc[0])  # a feed's alarm
    assert str(h.index.tz) == "UTC" and h.index.is_monotonic_increasing
    with pytest.raises(ValueError, match="unknown alarm state"):
        alarm_history_frame(db_engine, T0, T0 + M, state="panicking")
    with pytest.raises(ValueError, match="end must be after start"):
        alarm_history_frame(db_engine, T0, T0)


def test_csv_export_round_trips(db_engine, events, tmp_path):
    path = tmp_path / "alarms.csv"
    text = alarm_history_csv(db_engine, T0, T0 + 60 * M, path, rule="pump_trip")
    assert path.read_text(encoding="utf-8") == text
    back = pd.read_csv(io.StringIO(text))
    assert back["kind"].tolist() == ["raised", "cleared", "raised", "cleared", "raised",
                                     "acknowledged"]
    assert back["ts"].iloc[0] == "2026-07-01T06:20:00.000000Z"
    assert back["who"].iloc[-1] == "ana"


def test_performance_of_a_known_history(db_engine, events):
    perf, table = alarm_performance_report(db_engine, T0, T0 + 60 * M)
    # annunciations in [T0, T0 + 1 h): 6 head drops, 3 pump trips, 1 DO, 1 feed = 11
    assert perf.periods == 6 and perf.annunciations == 11
    assert perf.average_per_10min == pytest.approx(11 / 6)
    assert perf.peak_per_10min == 6
    assert perf.chattering == ("pump_trip@east.PS1",)
    # raised 25 h before the period and never cleared: stale; the west DO alarm cleared
    # before the period began: not
    assert perf.stale == ("stale_tag@east.do",)
    assert dict(perf.priority_pct) == pytest.approx(
        {"low": 600 / 11, "medium": 400 / 11, "high": 100 / 11})
    assert set(table["figure"]) >= {"average alarms per 10 min", "chattering alarms"}
    east, _ = alarm_performance_report(db_engine, T0, T0 + 60 * M, fishway="east")
    assert east.annunciations == 3 + 3 + 1 and east.stale == ("stale_tag@east.do",)

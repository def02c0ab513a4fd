"""Alarm state and events (db/alarms.py), both engines.

State names are those of ANSI/ISA-18.2-2016 as listed in shared/REFERENCES.md (seen in
an open implementation); the sequence below is the standard raise → acknowledge →
clear cycle.
"""
from __future__ import annotations

from datetime import UTC, datetime, timedelta

import pandas as pd
import pytest

from db.alarms import alarm_events_frame, alarms_frame, record_alarm_event
from db.models import ALARM_STATES

T = datetime(2026, 9, 1, 10, 0, tzinfo=UTC)
M = timedelta(minutes=1)


def test_isa_18_2_state_names():
    assert set(ALARM_STATES) == {"normal", "unacknowledged", "acknowledged",
                                 "rtn_unacknowledged", "shelved", "suppressed_by_design",
                                 "out_of_service"}


def event(engine, key, ts, kind, state, priority, **kwargs):
    return record_alarm_event(engine, key, ts, kind=kind, state=state, priority=priority,
                              **kwargs)


def test_raise_acknowledge_clear_cycle(db_engine):
    key = "temp_high@1"
    event(db_engine, key, T, "raised", "unacknowledged", "medium",
          rule="temp_high", value=21.4, why="7DADM above 20 C", message="hot")
    event(db_engine, key, T + 3 * M, "acknowledged", "acknowledged", "medium",
          rule="temp_high", who="op1")
    event(db_engine, key, T + 40 * M, "cleared", "normal", "medium", rule="temp_high",
          value=19.6)
    state = alarms_frame(db_engine).loc[key]
    assert state["state"] == "normal" and state["last_value"] == 19.6
    assert state["acknowledged_by"] == "op1"
    assert state["acknowledged_at"].to_pydatetime() == T + 3 * M
    assert pd.isna(state["active_since"])
    events = alarm_events_frame(db_engine, T, T + 60 * M, key=key)
    assert list(events["kind"]) == ["raised", "acknowledged", "cleared"]
    assert list(events["state"]) == ["unacknowledged", "acknowledged", "normal"]
    assert events.index[0].to_pydatetime() == T and str(events.index.tz) == "UTC"


def test_active_filter_and_shelving(db_engine):
    event(db_engine, "a@1", T, "raised", "unacknowledged", "high", rule="a")
    event(db_engine, "b@1", T, "raised", "unacknowledged", "low", rule="b")
    event(db_engine, "b@1", T + M, "shelved", "shelved", "low", rule="b",
          who="sup1", why="sensor maintenance", shelved_until=T + 60 * M)
    active = alarms_frame(db_engine, states=["unacknowledged"])
    assert list(active.index) == ["a@1"]
    shelved = alarms_frame(db_engine).loc["b@1"]
    assert shelved["shelved_until"].to_pydatetime() == T + 60 * M
    assert shelved["active_since"].to_pydatetime() == T


@pytest.mark.parametrize("kind, state, priority, extra", [
    ("exploded", "normal", "low", {}),
    ("raised", "panicking", "low", {}),
    ("raised", "unacknowledged", "urgent", {}),
    ("acknowledged", "acknowledged", "low", {}),            # who is missing
    ("raised", "unacknowledged", "low", {"value": float("nan")}),
])
def test_invalid_events_are_refused(db_engine, kind, state, priority, extra):
    with pytest.raises(ValueError):
        record_alarm_event(db_engine, "x@1", T, kind=kind, state=state, priority=priority,
                           rule="x", **extra)
    assert alarms_frame(db_engine).empty

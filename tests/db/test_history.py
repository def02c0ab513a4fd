"""Recommendations, actuator settings and operator log (db/history.py), both engines.

Storage round trips: the reference is the data written; JSON payloads are compared with
Python's ``json`` round trip (RFC 8259 numbers).
"""
from __future__ import annotations

import json
from datetime import UTC, datetime, timedelta

import pandas as pd
import pytest
import sqlalchemy as sa

from db.catalog import add_fishway, add_site
from db.history import (
    actuator_settings_frame,
    add_log_entry,
    latest_actuator_settings,
    operator_log_frame,
    recommendations_frame,
    record_actuator_setting,
    record_recommendation,
)

T = datetime(2026, 8, 3, 6, 0, tzinfo=UTC)
DAY = timedelta(days=1)


@pytest.fixture
def fishway(db_engine):
    return add_fishway(db_engine, add_site(db_engine, "History site"), "History fishway")


def test_recommendation_round_trip(db_engine, fishway):
    payload = {"inputs": {"headwater_m": 104.31, "tailwater_m": 101.02, "temp_c": 14.5},
               "settings": {"entrance_gate_m": 0.42, "aux_valve_pct": 35.0},
               "predicted": {"drop_m": 0.29, "edf_w_m3": 151.0, "notes": ["ok"]}}
    rid = record_recommendation(db_engine, fishway, T, **payload, binding_constraint="drop_m",
                                feasible=True, reason="pool drop at its limit")
    record_recommendation(db_engine, fishway, T + timedelta(hours=1), inputs={}, settings={},
                          predicted={}, binding_constraint=None, feasible=False,
                          reason="tailwater out of range")
    frame = recommendations_frame(db_engine, fishway, T, T + DAY)
    assert list(frame["id"]) == [rid, rid + 1]
    assert str(frame.index.tz) == "UTC" and frame.index[0] == pd.Timestamp(T)
    first = frame.iloc[0]
    for name, value in payload.items():
        assert first[name] == json.loads(json.dumps(value))
    assert bool(first["feasible"]) and first["binding_constraint"] == "drop_m"
    assert pd.isna(frame.iloc[1]["binding_constraint"]) and not frame.iloc[1]["feasible"]


@pytest.mark.parametrize("bad", [{"x": float("nan")}, {"x": object()}, ["not", "a", "dict"]])
def test_recommendation_payload_must_be_plain_json(db_engine, fishway, bad):
    with pytest.raises(ValueError):
        record_recommendation(db_engine, fishway, T, inputs=bad, settings={}, predicted={},
                              binding_constraint=None, feasible=False)


def test_actuator_settings_history_and_latest(db_engine, fishway):
    rid = record_recommendation(db_engine, fishway, T, inputs={}, settings={"gate": 0.5},
                                predicted={}, binding_constraint=None, feasible=True)
    record_actuator_setting(db_engine, fishway, T, "gate", 0.5, unit="m", set_by="op1",
                            source="recommendation", recommendation_id=rid)
    record_actuator_setting(db_engine, fishway, T + timedelta(hours=2), "gate", 0.45, unit="m",
                            set_by="op2", source="manual", note="debris")
    record_actuator_setting(db_engine, fishway, T + timedelta(hours=1), "valve", 30.0, unit="%",
                            set_by="plc", source="plc")
    # back-filled older setting must not become "latest"
    record_actuator_setting(db_engine, fishway, T - timedelta(hours=5), "gate", 0.9, unit="m",
                            set_by="op1", source="import")
    hist = actuator_settings_frame(db_engine, fishway, T - DAY, T + DAY)
    assert list(hist["value"]) == [0.9, 0.5, 30.0, 0.45]
    assert hist.index.is_monotonic_increasing
    assert list(actuator_settings_frame(db_engine, fishway, T - DAY, T + DAY, "valve")["value"]) \
        == [30.0]
    latest = latest_actuator_settings(db_engine, fishway)
    assert latest.loc["gate", "value"] == 0.45 and latest.loc["gate", "set_by"] == "op2"
    assert latest.loc["valve", "ts"] == pd.Timestamp(T + timedelta(hours=1))
    with pytest.raises(ValueError):
        record_actuator_setting(db_engine, fishway, T, "gate", 0.5, set_by="x", source="magic")
    with pytest.raises(ValueError):
        record_actuator_setting(db_engine, fishway, T, "gate", float("inf"), set_by="x",
                                source="manual")


def test_operator_log_entries_and_corrections(db_engine, fishway):
    adj = add_log_entry(db_engine, T, "op1", "adjustment", fishway_id=fishway, actuator="gate",
                        from_value=0.5, to_value=0.45, text="raised attraction")
    add_log_entry(db_engine, T + timedelta(minutes=5), "op1", "observation",
                  text="fish holding below entrance", fishway_id=fishway)
    fix = add_log_entry(db_engine, T + timedelta(minutes=9), "sup1", "correction",
                        refers_to=adj, text="gate went to 0.40, not 0.45", fishway_id=fishway)
    log = operator_log_frame(db_engine, T, T + DAY, fishway_id=fishway)
    assert list(log["kind"]) == ["adjustment", "observation", "correction"]
    assert log.iloc[2]["refers_to"] == adj and log.iloc[2]["id"] == fix
    assert log.iloc[0]["from_value"] == 0.5 and log.iloc[0]["to_value"] == 0.45
    assert operator_log_frame(db_engine, T + DAY, T + 2 * DAY).empty
    with pytest.raises(sa.exc.DatabaseError, match="append-only"), db_engine.begin() as conn:
        conn.execute(sa.text("UPDATE operator_log SET text = 'rewritten' WHERE id = :i"),
                     {"i": adj})


@pytest.mark.parametrize("kwargs", [
    {"kind": "gossip"},
    {"kind": "correction"},                       # no refers_to
    {"kind": "adjustment", "actuator": "gate"},   # no to_value
    {"kind": "observation", "author": ""},
])
def test_operator_log_validation(db_engine, kwargs):
    args = {"author": "op1", **kwargs}
    with pytest.raises(ValueError):
        add_log_entry(db_engine, T, args.pop("author"), args.pop("kind"), **args)


def test_naive_times_are_refused(db_engine, fishway):
    with pytest.raises(ValueError, match="naive"):
        add_log_entry(db_engine, datetime(2026, 8, 3), "op1", "observation")

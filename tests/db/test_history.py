"""Recommendations, actuator settings and operator log (db/history.py), both engines, and
the frame and time-range helpers it shares with db/dashboard_queries.py.

Storage round trips: the reference is the data written; JSON payloads are compared with
Python's ``json`` round trip (RFC 8259 numbers); NaN and infinities as IEEE 754 defines them
(``math.isfinite``).
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
    finite_or_none,
    insert_row,
    latest_actuator_settings,
    operator_log_frame,
    recommendations_frame,
    record_actuator_setting,
    record_recommendation,
    rows_frame,
    ts_between,
    ts_frame,
)
from db.models import OperatorLogEntry

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


# -- helpers shared with db/dashboard_queries.py -------------------------------------------
HOUR = timedelta(hours=1)


@pytest.fixture
def three_entries(db_engine, fishway):
    """Log entries at T, T + 1 h, T + 2 h (ids in that order)."""
    return [add_log_entry(db_engine, T + i * HOUR, "op1", "observation", text=f"n{i}",
                          fishway_id=fishway) for i in range(3)]


@pytest.mark.parametrize(("start", "end", "picked"), [
    (None, None, [0, 1, 2]),
    (T + HOUR, None, [1, 2]),  # the start is inside: [start, …
    (None, T + HOUR, [0]),  # … end) is outside
    (T + HOUR, T + 2 * HOUR, [1]),
    (T + 2 * HOUR, T, []),  # an end before the start matches nothing (no check here)
])
def test_ts_between_is_start_inclusive_end_exclusive_with_open_bounds(db_engine, three_entries,
                                                                      start, end, picked):
    t = OperatorLogEntry.__table__
    stmt = sa.select(t.c.ts, t.c.id).where(*ts_between(t.c.ts, start, end)).order_by(t.c.id)
    frame = ts_frame(db_engine, stmt)
    assert frame["id"].tolist() == [three_entries[i] for i in picked]
    assert list(frame.index) == [pd.Timestamp(T + i * HOUR) for i in picked]


def test_ts_frame_index_is_utc_in_select_order_empty_or_not(db_engine, three_entries):
    t = OperatorLogEntry.__table__
    newest_first = sa.select(t.c.ts, t.c.text).order_by(t.c.ts.desc())
    frame = ts_frame(db_engine, newest_first)
    assert frame.index.name == "ts" and str(frame.index.tz) == "UTC"
    assert frame["text"].tolist() == ["n2", "n1", "n0"]
    empty = ts_frame(db_engine, newest_first.where(t.c.ts > T + DAY))
    assert empty.empty and list(empty.columns) == ["text"]
    assert isinstance(empty.index, pd.DatetimeIndex) and str(empty.index.tz) == "UTC"


def test_rows_frame_keeps_the_select_columns(db_engine, three_entries):
    t = OperatorLogEntry.__table__
    frame = rows_frame(db_engine, sa.select(t.c.id, t.c.author).order_by(t.c.id))
    assert list(frame.columns) == ["id", "author"] and frame["id"].tolist() == three_entries
    assert frame.index.tolist() == [0, 1, 2]
    assert list(rows_frame(db_engine, sa.select(t.c.id).where(t.c.id < 0)).columns) == ["id"]


def test_insert_row_returns_the_new_key(db_engine, fishway, three_entries):
    new = insert_row(db_engine, OperatorLogEntry.__table__,
                     {"ts": T, "author": "op2", "kind": "shift_note", "text": "direct"})
    assert new == three_entries[-1] + 1
    log = operator_log_frame(db_engine, T, T + DAY)
    assert log.set_index("id").loc[new, "author"] == "op2"


@pytest.mark.parametrize(("value", "want"), [(None, None), (2, 2.0), (-0.5, -0.5),
                                             ("1.25", 1.25), (1e308, 1e308)])
def test_finite_or_none_keeps_finite_values(value, want):
    got = finite_or_none("x", value)
    assert got == want and (got is None or type(got) is float)


@pytest.mark.parametrize("value", [float("nan"), float("inf"), float("-inf")])
def test_finite_or_none_refuses_nan_and_infinities(value):
    with pytest.raises(ValueError, match=r"^to_value must be finite$"):
        finite_or_none("to_value", value)

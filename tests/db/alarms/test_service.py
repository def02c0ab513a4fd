"""Operator and supervisor actions through the database (db/alarm/service.py), both engines.

The transitions are ISA-18.2's (ANSI/ISA-18.2-2016, states seen in REFERENCES.md; the
transition table itself is tested in tests/ops_logic/alarms/test_states.py): what is checked
here is that each action survives the round trip through the database — a new process (a fresh
store) sees it, every event is in the append-only history with who and why, and a refused
action stores nothing. The demo site's rules (ops_logic.alarms.config) give the delays: a pump
trip has none, low oxygen a 300 s on-delay.
"""
from __future__ import annotations

import threading
import time
from datetime import UTC, datetime

import pandas as pd
import pytest
import sqlalchemy as sa

from db.alarm.store import AlarmStore
from db.alarms import alarm_events_frame, alarms_frame
from db.dashboard_queries import setting_changes_frame
from db.history import operator_log_frame
from db.models import AlarmEngineState
from ops_logic.alarms.states import AlarmState, IllegalTransitionError

TRIP = "pump_trip@east.PS1"
DO_LOW = "do_low@east"


def run(evaluator, feed, at, minutes, **changes):
    events = []
    for m in minutes:
        feed(at(m), **changes)
        events += evaluator(at(m))
    return events


def stored(engine, key):
    return alarms_frame(engine).loc[key]


def history(engine, at, key=None):
    return alarm_events_frame(engine, at(-60), at(24 * 60), key=key)


def fresh_state(engine, site, key):
    """The state a new process loads (no cache)."""
    return AlarmStore(engine, site).load().alarms[key]


def version(engine):
    t = AlarmEngineState.__table__
    with engine.connect() as conn:
        return conn.execute(sa.select(t.c.version)).scalar_one()


def test_the_quiet_demo_site_raises_nothing(db_engine, evaluator, feed, at):
    events = run(evaluator, feed, at, range(0, 6))
    assert [e for e in events if e.annunciated] == []
    assert history(db_engine, at).empty
    # every alarm the engine judged has its row, in normal state, with its working record
    rows = alarms_frame(db_engine)
    assert len(rows) >= 100 and set(rows["state"]) == {"normal"}
    assert rows["record"].map(lambda r: r["state"]).eq("normal").all()


def test_acknowledge_round_trip(db_engine, demo_site, evaluator, service, users, feed, at):
    run(evaluator, feed, at, [0])
    ev = run(evaluator, feed, at, [1], east__PS1__trip=1.0)
    assert [(e.key, e.kind, e.state) for e in ev if e.annunciated] == [
        (TRIP, "raised", "unacknowledged")]
    ev = service.acknowledge([TRIP], users["operator"], "crew sent to the pump house",
                             now=at(2))
    assert [(e.kind, e.state, e.who) for e in ev] == [("acknowledged", "acknowledged", "ana")]
    row = stored(db_engine, TRIP)
    assert row["state"] == "acknowledged" and row["acknowledged_by"] == "ana"
    assert row["acknowledged_at"].to_pydatetime() == at(2)
    assert fresh_state(db_engine, demo_site, TRIP).state is AlarmState.ACKED
    events = history(db_engine, at, TRIP)
    assert events[["kind", "state", "previous_state"]].values.tolist() == [
        ["raised", "unacknowledged", "normal"],
        ["acknowledged", "acknowledged", "unacknowledged"]]
    assert events["why"].iloc[-1] == "crew sent to the pump house"
    # the evaluator (its cache is stale now) picks the acknowledgement up: the trip clears
    # into normal, not into "returned to normal unacknowledged"
    ev = run(evaluator, feed, at, [3])
    assert [(e.key, e.kind, e.state) for e in ev] == [(TRIP, "cleared", "normal")]


def test_refused_actions_store_nothing(db_engine, evaluator, service, users, feed, at):
    run(evaluator, feed, at, [0])
    before_events, before_version = len(history(db_engine, at)), version(db_engine)
    with pytest.raises(IllegalTransitionError, match="cannot acknowledge do_low@east: it is "
                       "normal"):
        service.acknowledge(DO_LOW, users["operator"], now=at(1))
    with pytest.raises(PermissionError, match="vic has the role viewer"):
        service.shelve(DO_LOW, users["viewer"], "testing", 600, now=at(1))
    with pytest.raises(PermissionError, match="ana has the role operator: to change alarm "
                       "limits needs the role supervisor"):
        service.change_limit("east", "do_low", "limit_mg_l", 6.0, users["operator"], now=at(1))
    with pytest.raises(PermissionError, match="not an active user"):
        service.acknowledge(DO_LOW, "mallory", now=at(1))
    with pytest.raises(ValueError, match="shelving time must be above 0 and at most 28800 s"):
        service.shelve(DO_LOW, users["operator"], "too long", 9 * 3600, now=at(1))
    assert len(history(db_engine, at)) == before_events
    assert version(db_engine) == before_version
    assert operator_log_frame(db_engine, at(-60), at(60)).empty


def test_shelve_expires_when_the_clock_passes_its_end(db_engine, demo_site, evaluator,
                                                      service, users, feed, at):
    run(evaluator, feed, at, [0, 1], east__PS1__trip=1.0)
    ev = service.shelve(TRIP, users["operator"], "pump under repair", 600, now=at(2))
    assert [(e.kind, e.state) for e in ev] == [("shelved", "shelved")]
    row = stored(db_engine, TRIP)
    assert row["state"] == "shelved" and row["shelved_until"].to_pydatetime() == at(12)
    ev = run(evaluator, feed, at, range(3, 12), east__PS1__trip=1.0)
    assert [e for e in ev if e.key == TRIP] == []  # still shelved at 11 min
    assert fresh_state(db_engine, demo_site, TRIP).state is AlarmState.SHELVED
    ev = run(evaluator, feed, at, [12], east__PS1__trip=1.0)  # the clock passes the end
    trip = [(e.kind, e.state, e.why) for e in ev if e.key == TRIP]
    assert trip == [("unshelved", "unacknowledged", "shelving time ended")]
    assert stored(db_engine, TRIP)["state"] == "unacknowledged"
    assert pd.isna(stored(db_engine, TRIP)["shelved_until"])
    kinds = history(db_engine, at, TRIP)["kind"].tolist()
    assert kinds == ["raised", "shelved", "unshelved"]


def test_maintenance_suppresses_by_design(db_engine, demo_site, evaluator, service, users,
                                          feed, at):
    run(evaluator, feed, at, [0])
    ev = service.set_fishway_mode("east", "maintenance", users["operator"],
                                  "east ladder dewatered for baffle repair", now=at(1))
    assert DO_LOW in {e.key for e in ev if e.kind == "suppressed"}
    assert {e.who for e in ev} == {"ana"}
    # oxygen falls in the dewatered ladder: the alarm is suppressed by design, not annunciated
    ev = run(evaluator, feed, at, range(2, 10), east__do=3.5)
    assert [e for e in ev if e.annunciated and e.fishway_id == "east"] == []
    assert stored(db_engine, DO_LOW)["state"] == "suppressed_by_design"
    assert stored(db_engine, DO_LOW)["suppressed_by"] == "maintenance"
    # the west ladder is not in maintenance: its alarm comes
    assert "do_low@west" not in {e.key for e in ev}
    ev = service.set_fishway_mode("east", "operating", users["operator"], "ladder watered",
                                  now=at(10))
    assert (DO_LOW, "unsuppressed", "unacknowledged") in {(e.key, e.kind, e.state)
                                                          for e in ev}
    assert fresh_state(db_engine, demo_site, DO_LOW).state is AlarmState.UNACK
    # the modes are in the operator log and in the dashboard's setting changes
    log = operator_log_frame(db_engine, at(0), at(60))
    assert log["text"].str.contains("East ladder in maintenance").sum() == 1
    changes = setting_changes_frame(db_engine)
    assert changes[["key", "old_text", "new_text", "set_by"]].values.tolist()[::-1] == [
        ["mode", "operating", "maintenance", "ana"], ["mode", "maintenance", "operating", "ana"]]


def test_limit_change_is_logged_with_old_and_new_value(db_engine, demo_site, evaluator,
                                                       service, users, feed, at):
    run(evaluator, feed, at, [0], east__do=5.5)
    assert stored(db_engine, DO_LOW)["state"] == "normal"  # 5.5 mg/L is above 5.0
    ev = service.change_limit("east", "do_low", "limit_mg_l", 6.0, users["supervisor"],
                              "early-run fish need more oxygen", now=at(1))
    assert [(e.kind, e.old_value, e.new_value, e.who) for e in ev] == [
        ("limit_changed", 5.0, 6.0, "sam")]
    row = history(db_engine, at, DO_LOW).iloc[-1]
    assert (row["kind"], row["old_value"], row["value"], row["who"]) == (
        "limit_changed", 5.0, 6.0, "sam")
    log = operator_log_frame(db_engine, at(0), at(60)).iloc[-1]
    assert (log["kind"], log["from_value"], log["to_value"], log["author"]) == (
        "adjustment", 5.0, 6.0, "sam")
    assert "do_low.limit_mg_l" in log["text"] and "early-run fish" in log["text"]
    change = setting_changes_frame(db_engine).iloc[0]
    assert (change["key"], change["old_value"], change["new_value"]) == (
        "alarms.do_low.limit_mg_l", 5.0, 6.0)
    # the new limit is in force, for a new process too: 5.5 mg/L is now low (300 s on-delay)
    assert service.settings("east").do_low.limit_mg_l == 6.0
    ev = run(evaluator, feed, at, range(2, 8), east__do=5.5)
    assert [(e.ts, e.kind) for e in ev if e.key == DO_LOW] == [(at(7), "raised")]
    # a priority edit is a priority_changed event; the alarm's priority follows
    ev = service.change_limit("east", "do_low", "priority", 1, users["supervisor"], now=at(9))
    assert [(e.kind, e.old_value, e.new_value) for e in ev] == [("priority_changed", 2.0, 1.0)]
    assert stored(db_engine, DO_LOW)["priority"] == "high"
    with pytest.raises(ValueError, match="only numeric alarm parameters"):
        service.change_limit("east", "temp_high", "basis", "instantaneous",
                             users["supervisor"], now=at(10))


def test_remove_from_and_return_to_service(db_engine, evaluator, service, users, feed, at):
    run(evaluator, feed, at, [0])
    ev = service.remove_from_service(DO_LOW, users["operator"], "probe sent for calibration",
                                     now=at(1))
    assert [(e.kind, e.state) for e in ev] == [("out_of_service", "out_of_service")]
    ev = run(evaluator, feed, at, range(2, 9), east__do=3.0)
    # the raise is recorded while out of service, not annunciated
    assert [(e.kind, e.state, e.annunciated) for e in ev if e.key == DO_LOW] == [
        ("raised", "out_of_service", False)]
    ev = service.return_to_service(DO_LOW, users["operator"], "probe back", now=at(9))
    assert [(e.kind, e.state) for e in ev] == [("returned_to_service", "unacknowledged")]
    assert stored(db_engine, DO_LOW)["state"] == "unacknowledged"


def test_two_writers_take_turns(db_engine, demo_site, evaluator, service, users, feed, at):
    """Two writers, as the ingest and a dashboard process: each with its own store and
    database connection. While one holds its transaction the other waits, then works on the
    state the first committed (nothing is lost or overwritten)."""
    run(evaluator, feed, at, [0, 1], east__PS1__trip=1.0)
    run(evaluator, feed, at, range(2, 8), east__PS1__trip=1.0, east__do=4.5)
    assert stored(db_engine, DO_LOW)["state"] == "unacknowledged"
    first = AlarmStore(db_engine, demo_site)
    done = threading.Event()
    seen = {}

    def dashboard():
        ev = service.acknowledge(DO_LOW, users["operator"], "seen on the wall display",
                                 now=at(8))
        seen["ack"] = ev
        done.set()

    with first.session(at(8)) as s:  # the first writer: shelving the trip
        s.add(s.alarm_engine.shelve(TRIP, at(8), "sam", "pump under repair", 3600))
        writer = threading.Thread(target=dashboard)
        writer.start()
        time.sleep(0.5)
        assert not done.is_set(), "the second writer did not wait for the lock"
    writer.join(30)
    assert done.is_set()
    assert [e.kind for e in seen["ack"]] == ["acknowledged"]
    state = AlarmStore(db_engine, demo_site).load()
    assert state.alarms[TRIP].state is AlarmState.SHELVED  # the first writer's change kept
    assert state.alarms[DO_LOW].state is AlarmState.ACKED  # the second's too
    # the evaluator (a third writer, its cache stale) keeps both
    run(evaluator, feed, at, [9], east__PS1__trip=1.0, east__do=4.5)
    state = AlarmStore(db_engine, demo_site).load()
    assert (state.alarms[TRIP].state, state.alarms[DO_LOW].state) == (AlarmState.SHELVED,
                                                                      AlarmState.ACKED)


def test_concurrent_writers_lose_no_update(db_engine, demo_site, evaluator, service, users,
                                           feed, at):
    """The evaluator cycles in one thread while another acknowledges, shelves and unshelves:
    every session is counted once in the version, and the actions all hold afterwards."""
    run(evaluator, feed, at, [0, 1], east__PS1__trip=1.0)
    run(evaluator, feed, at, range(2, 8), east__PS1__trip=1.0, east__do=4.5)
    start = version(db_engine)
    errors = []

    def cycles():
        try:
            for m in range(8, 28):
                feed(at(m), east__PS1__trip=1.0, east__do=4.5)
                evaluator(at(m))
        except Exception as exc:  # reported below
            errors.append(exc)

    t = threading.Thread(target=cycles)
    t.start()
    service.acknowledge(DO_LOW, users["operator"], now=at(8))
    for _ in range(5):  # an hour: no shelve may expire in the evaluator's 20 minutes
        service.shelve(TRIP, users["operator"], "checking", 3600, now=at(8))
        service.unshelve(TRIP, users["operator"], now=at(8))
    service.shelve(TRIP, users["operator"], "pump under repair", 28800, now=at(8))
    t.join(60)
    assert errors == []
    assert version(db_engine) == start + 20 + 12
    state = AlarmStore(db_engine, demo_site).load()
    assert state.alarms[DO_LOW].state is AlarmState.ACKED
    assert state.alarms[TRIP].state is AlarmState.SHELVED
    kinds = history(db_engine, at, TRIP)["kind"].tolist()
    assert kinds.count("shelved") == 6 and kinds.count("unshelved") == 5
    assert history(db_engine, at, DO_LOW)["kind"].tolist().count("acknowledged") == 1


def test_now_defaults_to_the_wall_clock(db_engine, evaluator, service, users, feed, at):
    run(evaluator, feed, at, [0])
    before = datetime.now(UTC)
    ev = service.remove_from_service(DO_LOW, users["operator"], "probe out")
    assert before <= ev[0].ts <= datetime.now(UTC)


def test_threads_sharing_one_service_take_turns(db_engine, demo_site, evaluator, service,
                                                users, feed, at):
    """A dashboard's request threads share one service (and its cached state)."""
    run(evaluator, feed, at, [0])
    start = version(db_engine)
    keys = ["do_low@east", "do_low@west", "do_low_low@east", "do_low_low@west"]
    errors = []

    def worker(key):
        try:
            for _ in range(5):
                service.shelve(key, users["operator"], "inspection", 600, now=at(1))
                service.unshelve(key, users["operator"], now=at(1))
        except Exception as exc:  # reported below
            errors.append(exc)

    threads = [threading.Thread(target=worker, args=(k,)) for k in keys]
    for t in threads:
        t.start()
    for t in threads:
        t.join(60)
    assert errors == [] and version(db_engine) == start + 40
    for key in keys:
        assert history(db_engine, at, key)["kind"].tolist() == ["shelved", "unshelved"] * 5
    assert {r.state for k, r in AlarmStore(db_engine, demo_site).load().alarms.items()
            if k in keys} == {AlarmState.NORMAL}

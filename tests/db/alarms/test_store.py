"""The stored engine state (db/alarm/store.py): what a new process loads, atomicity, quiet cycles.

No published values here: the checks are that storage loses nothing (a fresh load equals the
state the writer kept in memory) and that a failed transaction leaves no trace.
"""
from __future__ import annotations

import pytest
import sqlalchemy as sa
from sqlalchemy import event

from db.alarm.store import WORKING_FIELDS, AlarmStore
from db.alarms import alarm_events_frame

TRIP = "pump_trip@east.PS1"


def working(state):
    return {k: tuple(getattr(r, f) for f in WORKING_FIELDS) for k, r in state.alarms.items()}


def test_a_new_process_loads_what_the_writer_holds(db_engine, demo_site, evaluator, service,
                                                   users, feed, at):
    for m in range(0, 8):
        feed(at(m), east__PS1__trip=1.0 if m >= 1 else 0.0, east__do=4.0 if m >= 2 else 9.5)
        evaluator(at(m))
    service.acknowledge(TRIP, users["operator"], now=at(8))
    service.shelve("do_low@east", users["operator"], "aerator on its way", 3600, now=at(8))
    service.change_limit("west", "do_low", "limit_mg_l", 5.5, users["supervisor"], now=at(8))
    service.set_fishway_mode("west", "out_of_service", users["operator"], now=at(8))
    feed(at(9), east__PS1__trip=1.0, east__do=4.0)
    evaluator(at(9))
    held = evaluator.store._cache.alarm_engine.state
    loaded = AlarmStore(db_engine, demo_site).load()
    assert working(loaded) == working(held)
    assert (loaded.modes, loaded.overrides) == (held.modes, held.overrides)
    assert loaded.annunciations == held.annunciations
    assert loaded.last_evaluated == held.last_evaluated == at(9)


def test_a_failed_session_leaves_nothing(db_engine, demo_site, evaluator, feed, at):
    feed(at(0))
    evaluator(at(0))
    feed(at(1), east__PS1__trip=1.0)
    store = evaluator.store
    with pytest.raises(RuntimeError, match="boom"), store.session(at(1)) as s:
        s.add(s.alarm_engine.evaluate(at(1), evaluator.reader.read(at(1))))
        assert store._cache is None  # dropped while the transaction is open
        raise RuntimeError("boom")
    assert alarm_events_frame(db_engine, at(0), at(60)).empty
    assert AlarmStore(db_engine, demo_site).load().last_evaluated == at(0)
    with store.session(at(1)) as s:
        assert s.reloaded  # the memory of the failed session is not trusted
        assert s.alarm_engine.state.alarms[TRIP].state.value == "normal"


def test_a_quiet_cycle_rewrites_no_alarm_row(db_engine, evaluator, feed, at):
    feed(at(0))
    evaluator(at(0))  # the first cycle writes every alarm's row
    feed(at(1))
    seen = []

    def on_exec(_c, _cur, statement, *_a):
        seen.append(" ".join(statement.split()[:3]).upper())

    event.listen(db_engine, "before_cursor_execute", on_exec)
    try:
        assert evaluator(at(1)) == []
    finally:
        event.remove(db_engine, "before_cursor_execute", on_exec)
    writes = [s for s in seen if s.startswith(("UPDATE", "INSERT", "DELETE"))]
    assert writes == ["UPDATE ALARM_ENGINE_STATE SET", "UPDATE ALARM_ENGINE_STATE SET"]


def test_a_second_site_with_the_same_tag_names_is_refused(db_engine, demo_site):
    AlarmStore(db_engine, demo_site)
    other = demo_site.model_copy(update={"site": demo_site.site.model_copy(
        update={"name": "Another invented dam"})})
    with pytest.raises(ValueError, match="already belongs to fishway"):
        AlarmStore(db_engine, other)  # same tag names: the catalogue refuses, no mix-up
    with db_engine.connect() as conn:
        assert conn.execute(sa.text("SELECT count(*) FROM alarm_engine_state")).scalar() == 1

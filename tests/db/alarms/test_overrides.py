"""The dashboard's limit and mode changes reach the alarm engine (db/alarm/overrides.py).

The Site & settings page writes ``setting_changes`` rows (db.dashboard_queries); the next
evaluation applies them through the engine, so each becomes an event credited to whoever made
it, with the old and new value; a revert returns to the site file's value. Values are the demo
site's (ops_logic.alarms.config: do_low 5.0 mg/L, from memory of US EPA 1986; the east ladder's
trash-rack limit 0.4 ft in the site file).
"""
from __future__ import annotations

import pytest

from db.alarm.store import AlarmStore
from db.alarms import alarm_events_frame, alarms_frame
from db.dashboard_queries import record_setting_change

FT = 0.3048  # m, exact


def changes(db_engine, at, key):
    return alarm_events_frame(db_engine, at(-60), at(600), key=key)


def test_a_limit_set_on_the_dashboard_becomes_an_event(db_engine, demo_site, evaluator, feed,
                                                       at):
    feed(at(0))
    evaluator(at(0))
    fw = evaluator.store.ids.fishways["east"]
    record_setting_change(db_engine, fw, "alarms.do_low.limit_mg_l", at(1), action="set",
                          set_by="sam", old_value=5.0, new_value=6.5, note="warm year")
    feed(at(1))
    ev = evaluator(at(1))
    assert [(e.key, e.kind, e.old_value, e.new_value, e.who, e.why) for e in ev] == [
        ("do_low@east", "limit_changed", 5.0, 6.5, "sam", "warm year")]
    assert AlarmStore(db_engine, demo_site).load().overrides == {
        "east": {"do_low": {"limit_mg_l": 6.5}}}
    feed(at(2))
    assert evaluator(at(2)) == []  # applied once
    record_setting_change(db_engine, fw, "alarms.do_low.limit_mg_l", at(3), action="revert",
                          set_by="sam", old_value=6.5, new_value=5.0)
    feed(at(3))
    ev = evaluator(at(3))
    assert [(e.kind, e.old_value, e.new_value, e.who) for e in ev] == [
        ("limit_changed", 6.5, 5.0, "sam")]
    assert AlarmStore(db_engine, demo_site).load().overrides == {}
    assert changes(db_engine, at, "do_low@east")["kind"].tolist() == ["limit_changed"] * 2


def test_a_revert_returns_to_the_site_files_value(db_engine, evaluator, feed, at):
    feed(at(0))
    evaluator(at(0))
    fw = evaluator.store.ids.fishways["east"]
    record_setting_change(db_engine, fw, "alarms.trash_rack_dp_high.limit_m", at(1),
                          action="set", set_by="sam", old_value=0.4 * FT, new_value=0.2)
    feed(at(1))
    evaluator(at(1))
    record_setting_change(db_engine, fw, "alarms.trash_rack_dp_high.limit_m", at(2),
                          action="revert", set_by="sam", old_value=0.2, new_value=0.4 * FT)
    feed(at(2))
    ev = evaluator(at(2))
    assert [e.new_value for e in ev] == [pytest.approx(0.4 * FT, abs=1e-12)]
    assert evaluator.store.load().overrides == {}


def test_a_mode_set_on_the_dashboard_suppresses(db_engine, evaluator, service, feed, at):
    feed(at(0))
    evaluator(at(0))
    fw = evaluator.store.ids.fishways["west"]
    record_setting_change(db_engine, fw, "mode", at(1), action="set", set_by="sam",
                          old_text="operating", new_text="maintenance", note="dewatered")
    feed(at(1))
    ev = evaluator(at(1))
    suppressed = {e.key for e in ev if e.kind == "suppressed"}
    assert "do_low@west" in suppressed and {e.who for e in ev} == {"sam"}
    assert alarms_frame(db_engine).loc["do_low@west", "suppressed_by"] == "maintenance"
    # an operator action in between sees the same mode (the service syncs first)
    assert service.store.load().modes == {"west": "maintenance"}
    record_setting_change(db_engine, fw, "mode", at(2), action="revert", set_by="sam",
                          old_text="maintenance", new_text="operating")
    feed(at(2))
    ev = evaluator(at(2))
    assert "do_low@west" in {e.key for e in ev if e.kind == "unsuppressed"}


def test_an_override_the_engine_refuses_is_reported_not_applied(db_engine, evaluator, feed,
                                                                at):
    feed(at(0))
    evaluator(at(0))
    fw = evaluator.store.ids.fishways["east"]
    record_setting_change(db_engine, fw, "alarms.do_low.limit_mg_l", at(1), action="set",
                          set_by="sam", old_value=5.0, new_value=-1.0)
    feed(at(1))
    assert evaluator(at(1)) == []
    assert any("alarms.do_low.limit_mg_l not applied" in p for p in evaluator.problems)
    assert evaluator.store.load().overrides == {}

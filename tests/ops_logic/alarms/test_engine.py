"""The engine over time: lifecycle, operator actions, suppression by design, grouping, flood.

States and transitions per ANSI/ISA-18.2-2016 (states seen, REFERENCES.md; transitions from
memory, see test_states.py); flood per EEMUA 191: more than 10 alarms in 10 minutes, ending
below 5 (seen, REFERENCES.md). The plant is the quiet invented ladder of ``conftest.py``
(30 tags on one feed); ``engine`` has evaluated it once at ``at(0)``.
"""

from __future__ import annotations

import json
from datetime import datetime, timedelta

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from ops_logic.alarms.engine import AlarmEngine, EngineState
from ops_logic.alarms.states import AlarmState, IllegalTransitionError

S = AlarmState


def run(engine, plant, at, minutes, **change):
    """Evaluate once a minute over ``minutes`` (a range) with the same disturbance."""
    events = []
    for m in minutes:
        events += engine.evaluate(at(m), plant.inputs(at(m), **change))
    return events


def kinds(events, key):
    return [(e.kind, e.state) for e in events if e.key == key]


def state(engine, key):
    return engine.state.alarms[key].state


def test_lifecycle_raise_acknowledge_clear(engine, plant, at):
    low = {"values": {"t1.do": 4.8}}
    ev = run(engine, plant, at, range(1, 6), **low)
    assert ev == []  # on-delay 300 s: seen from minute 1, not yet 300 s
    ev = run(engine, plant, at, [6], **low)
    assert kinds(ev, "do_low@t1") == [("raised", "unacknowledged")]
    assert ev[0].annunciated and ev[0].value == 4.8 and ev[0].priority_name == "medium"
    ev = engine.acknowledge("do_low@t1", at(7), who="operator1", why="checking aerator")
    assert kinds(ev, "do_low@t1") == [("acknowledged", "acknowledged")]
    assert ev[0].who == "operator1" and ev[0].why == "checking aerator"
    ev = run(engine, plant, at, range(8, 13), values={"t1.do": 5.3})
    assert ev == []  # off-delay 300 s
    ev = run(engine, plant, at, [13], values={"t1.do": 5.3})
    assert kinds(ev, "do_low@t1") == [("cleared", "normal")]


def test_return_to_normal_unacknowledged_then_acknowledge(engine, plant, at):
    run(engine, plant, at, [1], values={"t1.PS1.trip": 1.0})  # pump trip: no delays
    assert state(engine, "pump_trip@t1.PS1") is S.UNACK
    ev = run(engine, plant, at, [2])
    assert kinds(ev, "pump_trip@t1.PS1") == [("cleared", "rtn_unacknowledged")]
    ev = run(engine, plant, at, [3], values={"t1.PS1.trip": 1.0})  # trips again: re-annunciates
    assert kinds(ev, "pump_trip@t1.PS1") == [("raised", "unacknowledged")] and ev[0].annunciated
    run(engine, plant, at, [4])
    ev = engine.acknowledge(["pump_trip@t1.PS1"], at(5), who="operator1")
    assert kinds(ev, "pump_trip@t1.PS1") == [("acknowledged", "normal")]


def test_acknowledging_a_normal_alarm_is_refused(engine, plant, at):
    run(engine, plant, at, [1], values={"t1.PS1.trip": 1.0})
    with pytest.raises(IllegalTransitionError, match="cannot acknowledge do_low@t1: it is normal"):
        engine.acknowledge(["pump_trip@t1.PS1", "do_low@t1"], at(2), who="operator1")
    assert state(engine, "pump_trip@t1.PS1") is S.UNACK  # all or none
    with pytest.raises(ValueError, match="records who"):
        engine.acknowledge("pump_trip@t1.PS1", at(2), who="")
    with pytest.raises(ValueError, match="no alarm 'pump_trip@t9'"):
        engine.acknowledge("pump_trip@t9", at(2), who="operator1")


def test_shelve_expires_on_the_next_evaluation(engine, plant, at):
    trip = {"values": {"t1.PS1.trip": 1.0}}
    run(engine, plant, at, [1], **trip)
    ev = engine.shelve("pump_trip@t1.PS1", at(2), "operator1", "pump under repair", 600.0)
    assert kinds(ev, "pump_trip@t1.PS1") == [("shelved", "shelved")]
    assert ev[0].shelved_until == at(12)
    assert run(engine, plant, at, range(3, 12), **trip) == []
    ev = run(engine, plant, at, [12], **trip)  # time is up, still tripped: annunciates again
    assert kinds(ev, "pump_trip@t1.PS1") == [("unshelved", "unacknowledged")]
    assert ev[0].annunciated and ev[0].who is None and ev[0].why == "shelving time ended"


def test_shelve_expiry_with_the_condition_gone_returns_to_normal(engine, plant, at):
    run(engine, plant, at, [1], values={"t1.PS1.trip": 1.0})
    engine.shelve("pump_trip@t1.PS1", at(2), "operator1", "pump under repair", 300.0)
    ev = run(engine, plant, at, range(3, 8))
    assert kinds(ev, "pump_trip@t1.PS1") == [("cleared", "shelved"), ("unshelved", "normal")]
    assert not any(e.annunciated for e in ev)


def test_shelving_needs_a_reason_and_a_bounded_time(engine, at):
    with pytest.raises(ValueError, match="needs a reason"):
        engine.shelve("do_low@t1", at(1), "operator1", " ", 600.0)
    with pytest.raises(ValueError, match="at most 43200 s"):
        engine.shelve("do_low@t1", at(1), "operator1", "noisy", 86400.0)
    engine.shelve("do_low@t1", at(1), "operator1", "noisy", 600.0)
    ev = engine.unshelve("do_low@t1", at(2), "operator1")
    assert kinds(ev, "do_low@t1") == [("unshelved", "normal")]
    with pytest.raises(IllegalTransitionError, match="not shelved"):
        engine.unshelve("do_low@t1", at(3), "operator1")


def test_maintenance_suppresses_temperature_alarms_by_design(engine, plant, at):
    hot = {"values": {"t1.water_temp": 23.0}}
    run(engine, plant, at, range(1, 12), **hot)  # 600 s on-delay
    assert state(engine, "temp_high_high@t1") is S.UNACK
    ev = engine.set_fishway_mode("t1", "maintenance", at(12), "operator1", "dewatered")
    assert ("suppressed", "suppressed_by_design") in kinds(ev, "temp_high_high@t1")
    assert kinds(ev, "pump_trip@t1.PS1") == []  # not suppressed in maintenance
    assert kinds(ev, "stale_tag@t1.do") == []
    ev = run(engine, plant, at, range(13, 40), values={"t1.water_temp": 24.0,
                                                        "t1.do": 3.0})
    assert not any(e.annunciated for e in ev)  # dewatered: nothing about the water
    ev = engine.set_fishway_mode("t1", "operating", at(40), "operator1", "watered up")
    assert kinds(ev, "temp_high_high@t1") == [("unsuppressed", "unacknowledged")]
    assert kinds(ev, "do_low_low@t1") == [("unsuppressed", "unacknowledged")]  # still low
    assert state(engine, "head_drop@t1") is S.NORMAL


def test_out_of_service_suppresses_entrance_not_temperature(engine, plant, at):
    ev = run(engine, plant, at, [1], mode="out_of_service")  # the mode may come with inputs
    assert ("suppressed", "suppressed_by_design") in kinds(ev, "entrance_head@t1")
    assert kinds(ev, "temp_high_high@t1") == []
    lvl = plant.values["t1.P16.level"]
    ev = run(engine, plant, at, range(2, 20), mode="out_of_service",
             values={"t1.P16.level": lvl + 0.4, "t1.P16.level_b": lvl + 0.4,
                     "t1.water_temp": 23.0})
    assert [e.key for e in ev if e.annunciated] == ["temp_high_high@t1"]


def test_remove_from_and_return_to_service(engine, plant, at):
    with pytest.raises(ValueError, match="needs a reason"):
        engine.remove_from_service("do_low@t1", at(1), "technician", "")
    ev = engine.remove_from_service("do_low@t1", at(1), "technician", "probe replaced")
    assert kinds(ev, "do_low@t1") == [("out_of_service", "out_of_service")]
    ev = run(engine, plant, at, range(2, 10), values={"t1.do": 4.0})
    assert not any(e.annunciated for e in ev if e.key == "do_low@t1")
    assert engine.state.alarms["do_low@t1"].active  # followed, not shown
    ev = engine.return_to_service("do_low@t1", at(10), "technician")
    assert kinds(ev, "do_low@t1") == [("returned_to_service", "unacknowledged")]
    with pytest.raises(IllegalTransitionError, match="not out of service"):
        engine.return_to_service("do_low@t1", at(11), "technician")


def test_return_to_service_during_maintenance_lands_suppressed(engine, at):
    engine.remove_from_service("temp_high@t1", at(1), "technician", "probe replaced")
    engine.set_fishway_mode("t1", "maintenance", at(2), "operator1")
    ev = engine.return_to_service("temp_high@t1", at(3), "technician")
    assert [k for k, _ in kinds(ev, "temp_high@t1")] == ["returned_to_service", "suppressed"]
    assert state(engine, "temp_high@t1") is S.SUPPRESSED


def test_limit_change_is_an_event_with_old_and_new_values(engine, plant, at):
    ev = engine.change_limit("t1", "do_low", "limit_mg_l", 5.5, at(1), "supervisor1",
                             "warm summer")
    assert [(e.kind, e.old_value, e.new_value, e.who) for e in ev] == [
        ("limit_changed", 5.0, 5.5, "supervisor1")]
    assert ev[0].db_fields()["value"] == 5.5
    ev = run(engine, plant, at, range(2, 8), values={"t1.do": 5.3})
    assert kinds(ev, "do_low@t1") == [("raised", "unacknowledged")]  # 5.3 < 5.5 now
    with pytest.raises(ValueError, match="has no parameter 'limit_mgl'"):
        engine.change_limit("t1", "do_low", "limit_mgl", 5.5, at(9), "supervisor1")
    ev = engine.change_limit("t1", "do_low", "priority", 1, at(9), "supervisor1")
    assert engine.state.alarms["do_low@t1"].priority == 1 and ev[0].priority == 1
    assert (ev[0].kind, ev[0].old_value, ev[0].new_value) == ("priority_changed", 2.0, 1.0)


def test_feed_failure_over_30_tags_is_one_annunciation(engine, plant, at):
    assert len(plant.tags) == 30
    ages = {t.name: 200.0 for t in plant.tags}  # every reading older than 120 s
    down = {"feed_ok": False, "last_success": at(0), "ages": ages}
    ev = run(engine, plant, at, range(1, 10), **down)
    assert [e.key for e in ev if e.annunciated] == ["feed_comms@plant"]
    children = engine.grouped_under("feed_comms@plant")
    assert len(children) == 30 and all(k.startswith("stale_tag@") for k in children)
    for k in children:
        rec = engine.state.alarms[k]
        assert rec.state is S.SUPPRESSED and rec.active and rec.parent == "feed_comms@plant"
    grouped = [e for e in ev if e.kind == "suppressed"]
    assert len(grouped) == 30 and {e.parent for e in grouped} == {"feed_comms@plant"}
    assert not engine.flood.active
    ev = run(engine, plant, at, range(10, 15))  # the feed is back
    assert not any(e.annunciated for e in ev)
    assert engine.grouped_under("feed_comms@plant") == []
    assert state(engine, "feed_comms@plant") is S.RTNUN
    assert {state(engine, k) for k in children} == {S.NORMAL}


def test_pump_trip_groups_the_pump_position_alarm(engine, plant, at):
    logged = {**plant.settings, "aux_PS1_pumps": 1.0}  # logged one pump; none is running
    ev = run(engine, plant, at, range(1, 6), values={"t1.PS1.trip": 1.0}, settings=logged)
    assert [e.key for e in ev if e.annunciated] == ["pump_trip@t1.PS1"]
    rec = engine.state.alarms["actuator_mismatch@t1.PS1"]
    assert rec.state is S.SUPPRESSED and rec.active and rec.parent == "pump_trip@t1.PS1"


def test_flood_first_out_and_count(engine, plant, at):
    names = [t.name for t in plant.tags]
    for m in range(1, 9):  # two more tags go stale each minute (feed healthy): no grouping
        stale = {n: 500.0 for n in names[:2 * m]}
        engine.evaluate(at(m), plant.inputs(at(m), ages=stale))
        f = engine.flood
        if m <= 5:
            assert not f.active and f.window_count == 2 * m
        else:
            assert f.active and f.first_out == f"stale_tag@{names[0]}"
            assert f.started_at == at(1) and f.count == 2 * m
    for m in range(9, 16):  # readings back: alarms return to normal, no new annunciations
        engine.evaluate(at(m), plant.inputs(at(m)))
    assert engine.flood.active and engine.flood.window_count == 6  # minutes 6-8 in window
    engine.evaluate(at(16), plant.inputs(at(16)))
    assert not engine.flood.active and engine.flood.window_count == 4  # fewer than 5: over


def test_state_round_trips_and_the_restored_engine_carries_on(engine, plant, at, alarm_site):
    run(engine, plant, at, range(1, 4), values={"t1.do": 4.5, "t1.PS1.trip": 1.0})
    engine.shelve("pump_trip@t1.PS1", at(4), "operator1", "repair", 900.0)
    engine.change_limit("t1", "do_low", "on_delay_s", 120.0, at(4), "supervisor1")
    data = json.loads(json.dumps(engine.state.to_dict()))
    twin = AlarmEngine(alarm_site, plant.tags, EngineState.from_dict(data))
    assert twin.state.to_dict() == engine.state.to_dict()
    for m in range(5, 25):
        inputs = plant.inputs(at(m), values={"t1.do": 4.5})
        assert twin.evaluate(at(m), inputs) == engine.evaluate(at(m), inputs)


def test_time_must_be_aware_and_move_forward(engine, plant, at):
    with pytest.raises(ValueError, match="time-zone-aware"):
        engine.evaluate(datetime(2026, 7, 1, 7, 0), plant.inputs(at(1)))
    with pytest.raises(ValueError, match="time must not go back"):
        engine.evaluate(at(-1), plant.inputs(at(-1)))


def test_unknown_fishway_or_mode_is_refused(engine, plant, at):
    from ops_logic.alarms.inputs import AlarmInputs
    with pytest.raises(ValueError, match="unknown fishway"):
        engine.evaluate(at(1), AlarmInputs(fishways={"t9": plant.inputs(at(1)).fishways["t1"]}))
    with pytest.raises(ValueError, match="unknown feed"):
        engine.evaluate(at(1), AlarmInputs(feeds={"plc": plant.inputs(at(1)).feeds["plant"]}))
    with pytest.raises(ValueError, match="unknown fishway mode 'dry'"):
        engine.set_fishway_mode("t1", "dry", at(1), "operator1")


def test_unjudged_alarm_holds_its_state(engine, plant, at):
    run(engine, plant, at, range(1, 8), values={"t1.do": 4.5})
    assert state(engine, "do_low@t1") is S.UNACK
    ev = run(engine, plant, at, range(8, 20), values={"t1.do": 9.0}, flags={"t1.do": 4})
    assert kinds(ev, "do_low@t1") == [] and state(engine, "do_low@t1") is S.UNACK
    assert ("do_low@t1", "no usable dissolved-oxygen reading") in engine.not_evaluated
    assert kinds(ev, "sensor_fail@t1.do") == [("raised", "unacknowledged")]


def test_hand_case_hovering_reading_raises_once_through_the_engine(engine, plant, at):
    engine.change_limit("t1", "do_low", "on_delay_s", 0.0, at(0), "supervisor1")
    engine.change_limit("t1", "do_low", "off_delay_s", 0.0, at(0), "supervisor1")
    readings = [5.6, 4.95, 5.1, 4.85, 5.15, 4.9, 5.0, 5.12, 4.88, 5.18, 5.25]  # deadband 0.2
    ev = []
    for m, do in enumerate(readings, start=1):
        ev += engine.evaluate(at(m), plant.inputs(at(m), values={"t1.do": do}))
    assert kinds(ev, "do_low@t1") == [("raised", "unacknowledged"),
                                      ("cleared", "rtn_unacknowledged")]
    assert [e.ts for e in ev if e.key == "do_low@t1"] == [at(2), at(11)]


@settings(max_examples=15, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(noise=st.lists(st.floats(-0.19, 0.19), min_size=3, max_size=40))
def test_noise_below_the_deadband_raises_once_through_the_engine(alarm_site, plant, at, noise):
    eng = AlarmEngine(alarm_site, plant.tags)
    eng.change_limit("t1", "do_low", "on_delay_s", 0.0, at(0), "supervisor1")
    eng.change_limit("t1", "do_low", "off_delay_s", 0.0, at(0), "supervisor1")  # deadband alone
    eng.evaluate(at(0), plant.inputs(at(0)))
    values = [4.9] + [5.0 + u for u in noise]  # crosses below 5.0, then hovers ±0.19 < 0.2
    ev = []
    for m, do in enumerate(values, start=1):
        ev += eng.evaluate(at(m), plant.inputs(at(m), values={"t1.do": do}))
    assert kinds(ev, "do_low@t1") == [("raised", "unacknowledged")]


def test_grouped_children_wait_until_they_clear(engine, plant, at):
    """A child still active when its cause ends stays grouped until it clears, so the feed's
    return raises no burst (an off-delay on the stale alarm makes it clear later)."""
    engine.change_limit("t1", "stale_tag", "off_delay_s", 180.0, at(0), "supervisor1")
    ages = {t.name: 200.0 for t in plant.tags}
    run(engine, plant, at, range(1, 5), feed_ok=False, last_success=at(0), ages=ages)
    ev = run(engine, plant, at, range(5, 12))
    assert not any(e.annunciated for e in ev)
    cleared = [e.ts for e in ev if e.kind == "cleared" and e.key.startswith("stale_tag@")]
    assert len(cleared) == 30 and set(cleared) == {at(8)}  # off-delay: 180 s after minute 5
    assert engine.grouped_under("feed_comms@plant") == []


def test_transitions_are_events_in_time_order(engine, plant, at):
    ev = run(engine, plant, at, range(1, 30), values={"t1.water_temp": 23.0, "t1.do": 3.5})
    assert [e.ts for e in ev] == sorted(e.ts for e in ev)
    assert all(isinstance(e.ts, datetime) and e.ts.utcoffset() == timedelta(0) for e in ev)

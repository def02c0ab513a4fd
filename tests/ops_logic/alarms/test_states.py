"""The ISA-18.2 state machine, transition by transition.

Expected states follow the alarm state transition diagram of ANSI/ISA-18.2-2016 (IEC 62682):
the seven states are as listed in REFERENCES.md ("seen in an open implementation"); the arrows
between them are from memory of the standard's diagram: an alarm annunciates (UNACK) when it
activates from normal or from RTNUN; acknowledging an active alarm makes it ACKED, an RTNUN one
NORMAL; clearing makes UNACK into RTNUN and ACKED into NORMAL; leaving shelved, suppressed by
design or out of service, the alarm goes to UNACK if its condition is present, else NORMAL.
"""

from __future__ import annotations

import json
from datetime import UTC, datetime, timedelta

import pytest

from ops_logic.alarms.states import (
    AlarmRecord,
    AlarmState,
    IllegalTransitionError,
    Trigger,
    apply_trigger,
    next_state,
)

S, T = AlarmState, Trigger
X = "illegal"

# (state, trigger, active after the trigger) -> expected state, or X for a refused action.
# From the ISA-18.2 diagram (from memory, see the module docstring); process triggers that
# change nothing keep the state.
TABLE = [
    # normal
    (S.NORMAL, T.ACTIVATE, True, S.UNACK),
    (S.NORMAL, T.CLEAR, False, S.NORMAL),
    (S.NORMAL, T.ACKNOWLEDGE, False, X),
    (S.NORMAL, T.SHELVE, False, S.SHELVED),
    (S.NORMAL, T.UNSHELVE, False, X),
    (S.NORMAL, T.SUPPRESS, False, S.SUPPRESSED),
    (S.NORMAL, T.UNSUPPRESS, False, X),
    (S.NORMAL, T.REMOVE_FROM_SERVICE, False, S.OUT_OF_SERVICE),
    (S.NORMAL, T.RETURN_TO_SERVICE, False, X),
    # unacknowledged (active)
    (S.UNACK, T.ACTIVATE, True, S.UNACK),
    (S.UNACK, T.CLEAR, False, S.RTNUN),
    (S.UNACK, T.ACKNOWLEDGE, True, S.ACKED),
    (S.UNACK, T.SHELVE, True, S.SHELVED),
    (S.UNACK, T.UNSHELVE, True, X),
    (S.UNACK, T.SUPPRESS, True, S.SUPPRESSED),
    (S.UNACK, T.UNSUPPRESS, True, X),
    (S.UNACK, T.REMOVE_FROM_SERVICE, True, S.OUT_OF_SERVICE),
    (S.UNACK, T.RETURN_TO_SERVICE, True, X),
    # acknowledged (active)
    (S.ACKED, T.ACTIVATE, True, S.ACKED),
    (S.ACKED, T.CLEAR, False, S.NORMAL),
    (S.ACKED, T.ACKNOWLEDGE, True, X),
    (S.ACKED, T.SHELVE, True, S.SHELVED),
    (S.ACKED, T.UNSHELVE, True, X),
    (S.ACKED, T.SUPPRESS, True, S.SUPPRESSED),
    (S.ACKED, T.UNSUPPRESS, True, X),
    (S.ACKED, T.REMOVE_FROM_SERVICE, True, S.OUT_OF_SERVICE),
    (S.ACKED, T.RETURN_TO_SERVICE, True, X),
    # returned to normal, unacknowledged
    (S.RTNUN, T.ACTIVATE, True, S.UNACK),
    (S.RTNUN, T.CLEAR, False, S.RTNUN),
    (S.RTNUN, T.ACKNOWLEDGE, False, S.NORMAL),
    (S.RTNUN, T.SHELVE, False, S.SHELVED),
    (S.RTNUN, T.UNSHELVE, False, X),
    (S.RTNUN, T.SUPPRESS, False, S.SUPPRESSED),
    (S.RTNUN, T.UNSUPPRESS, False, X),
    (S.RTNUN, T.REMOVE_FROM_SERVICE, False, S.OUT_OF_SERVICE),
    (S.RTNUN, T.RETURN_TO_SERVICE, False, X),
    # shelved: the condition is followed but not annunciated
    (S.SHELVED, T.ACTIVATE, True, S.SHELVED),
    (S.SHELVED, T.CLEAR, False, S.SHELVED),
    (S.SHELVED, T.ACKNOWLEDGE, True, X),
    (S.SHELVED, T.SHELVE, True, X),
    (S.SHELVED, T.UNSHELVE, True, S.UNACK),  # operator or expiry, condition present
    (S.SHELVED, T.UNSHELVE, False, S.NORMAL),
    (S.SHELVED, T.SUPPRESS, True, S.SUPPRESSED),
    (S.SHELVED, T.UNSUPPRESS, True, X),
    (S.SHELVED, T.REMOVE_FROM_SERVICE, True, S.OUT_OF_SERVICE),
    (S.SHELVED, T.RETURN_TO_SERVICE, True, X),
    # suppressed by design
    (S.SUPPRESSED, T.ACTIVATE, True, S.SUPPRESSED),
    (S.SUPPRESSED, T.CLEAR, False, S.SUPPRESSED),
    (S.SUPPRESSED, T.ACKNOWLEDGE, True, X),
    (S.SUPPRESSED, T.SHELVE, True, X),
    (S.SUPPRESSED, T.UNSHELVE, True, X),
    (S.SUPPRESSED, T.SUPPRESS, True, S.SUPPRESSED),
    (S.SUPPRESSED, T.UNSUPPRESS, True, S.UNACK),
    (S.SUPPRESSED, T.UNSUPPRESS, False, S.NORMAL),
    (S.SUPPRESSED, T.REMOVE_FROM_SERVICE, True, S.OUT_OF_SERVICE),
    (S.SUPPRESSED, T.RETURN_TO_SERVICE, True, X),
    # out of service
    (S.OUT_OF_SERVICE, T.ACTIVATE, True, S.OUT_OF_SERVICE),
    (S.OUT_OF_SERVICE, T.CLEAR, False, S.OUT_OF_SERVICE),
    (S.OUT_OF_SERVICE, T.ACKNOWLEDGE, True, X),
    (S.OUT_OF_SERVICE, T.SHELVE, True, X),
    (S.OUT_OF_SERVICE, T.UNSHELVE, True, X),
    (S.OUT_OF_SERVICE, T.SUPPRESS, True, S.OUT_OF_SERVICE),
    (S.OUT_OF_SERVICE, T.UNSUPPRESS, True, S.OUT_OF_SERVICE),
    (S.OUT_OF_SERVICE, T.REMOVE_FROM_SERVICE, True, X),
    (S.OUT_OF_SERVICE, T.RETURN_TO_SERVICE, True, S.UNACK),
    (S.OUT_OF_SERVICE, T.RETURN_TO_SERVICE, False, S.NORMAL),
]


def test_table_covers_every_state_and_trigger():
    assert {(s, t) for s, t, _, _ in TABLE} == {(s, t) for s in S for t in T}


@pytest.mark.parametrize(("state", "trigger", "active", "expected"), TABLE,
                         ids=[f"{s.name}-{t.name}-{a}" for s, t, a, _ in TABLE])
def test_transition(state, trigger, active, expected):
    if expected == X:
        action = trigger.value.replace("_", " ")
        with pytest.raises(IllegalTransitionError, match=f"cannot {action}"):
            next_state(state, trigger, active=active)
    else:
        assert next_state(state, trigger, active=active) is expected


def test_illegal_acknowledge_message_names_the_state():
    with pytest.raises(IllegalTransitionError, match="in state normal: only an unacknowledged"):
        next_state(S.NORMAL, T.ACKNOWLEDGE, active=False)


NOW = datetime(2026, 7, 1, tzinfo=UTC)


def _rec(**kw) -> AlarmRecord:
    return AlarmRecord("do_low@t1", "do_low", "t1", 2, **kw)


def test_activation_event_is_an_annunciation():
    rec, ev = apply_trigger(_rec(), T.ACTIVATE, NOW, why="DO low")
    assert rec.state is S.UNACK and rec.active and rec.active_since == NOW
    assert ev is not None and ev.kind == "raised" and ev.annunciated
    assert (ev.previous_state, ev.state, ev.priority_name) == ("normal", "unacknowledged",
                                                                "medium")


def test_acknowledge_records_who_and_when():
    rec, _ = apply_trigger(_rec(), T.ACTIVATE, NOW)
    later = NOW + timedelta(minutes=3)
    rec, ev = apply_trigger(rec, T.ACKNOWLEDGE, later, who="operator1", why="seen")
    assert (rec.state, rec.acknowledged_by, rec.acknowledged_at) == (S.ACKED, "operator1", later)
    assert ev.kind == "acknowledged" and not ev.annunciated and ev.who == "operator1"


def test_activation_while_shelved_is_recorded_not_annunciated():
    rec, ev = apply_trigger(_rec(state=S.SHELVED, shelved_until=NOW + timedelta(hours=1)),
                            T.ACTIVATE, NOW)
    assert rec.state is S.SHELVED and rec.active
    assert ev.kind == "raised" and ev.state == "shelved" and not ev.annunciated


def test_no_event_when_nothing_changes():
    rec, ev = apply_trigger(_rec(), T.CLEAR, NOW)
    assert ev is None and rec.state is S.NORMAL


def test_db_fields_match_the_storage_vocabulary():
    # db.models.ALARM_STATES / ALARM_PRIORITIES (the storage's own lists)
    from db.models import ALARM_EVENT_KINDS, ALARM_PRIORITIES, ALARM_STATES
    assert {s.value for s in S} == set(ALARM_STATES)
    _, ev = apply_trigger(_rec(), T.ACTIVATE, NOW)
    f = ev.db_fields()
    assert f["kind"] in ALARM_EVENT_KINDS and f["priority"] in ALARM_PRIORITIES
    assert f["state"] == "unacknowledged" and f["key"] == "do_low@t1"


def test_record_round_trip_through_json():
    rec, _ = apply_trigger(_rec(value=4.2, message="DO 4.2 mg/L"), T.ACTIVATE, NOW)
    rec, _ = apply_trigger(rec, T.SHELVE, NOW, who="op", why="sensor cleaning",
                           shelved_until=NOW + timedelta(hours=2))
    back = AlarmRecord.from_dict(json.loads(json.dumps(rec.to_dict())))
    assert back == rec


def test_record_from_dict_refuses_unknown_fields():
    with pytest.raises(ValueError, match="unknown alarm record field"):
        AlarmRecord.from_dict({**_rec().to_dict(), "stat": "normal"})

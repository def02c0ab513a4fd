"""The ISA-18.2 alarm state model: states, triggers, the transition table, alarm records, events.

An alarm is in one of seven states (ANSI/ISA-18.2-2016 and IEC 62682 [ISA182]): *normal*,
*unacknowledged* (active, not yet acknowledged: UNACK), *acknowledged* (active, acknowledged:
ACKED), *returned to normal unacknowledged* (RTNUN), *shelved*, *suppressed by design* and
*out of service*. The state values are the strings stored by ``db.models.ALARM_STATES``.

:func:`next_state` is the whole state machine as one pure table lookup: ``(state, trigger,
active) -> state``. ``active`` is the alarm condition after deadband and delays; it decides
where an alarm lands when it leaves shelving, suppression or out of service (annunciated again
if the condition is still there, normal otherwise), as the standard prescribes. A trigger that
makes no sense in a state (acknowledging a normal alarm, unshelving one that is not shelved)
raises :class:`IllegalTransitionError`; a process trigger that changes nothing (the condition
clearing while shelved) returns the same state.

Simplification (ours): suppression and removal from service end a shelve; leaving them, the
alarm follows the process condition.

>>> next_state(AlarmState.NORMAL, Trigger.ACTIVATE, active=True).name
'UNACK'
>>> next_state(AlarmState.UNACK, Trigger.CLEAR, active=False).name
'RTNUN'
>>> next_state(AlarmState.RTNUN, Trigger.ACKNOWLEDGE, active=False).name
'NORMAL'

References
----------
.. [ISA182] ANSI/ISA-18.2-2016, Management of Alarm Systems for the Process Industries, and
   IEC 62682:2014 (the same model): alarm state transition diagram (states seen in an open
   implementation, REFERENCES.md).
"""
from __future__ import annotations

import math
from dataclasses import asdict, dataclass, fields, replace
from datetime import datetime
from enum import StrEnum
from typing import Any

__all__ = [
    "ANNUNCIATED_STATES",
    "PRIORITY_NAMES",
    "AlarmEvent",
    "AlarmRecord",
    "AlarmState",
    "EventKind",
    "IllegalTransitionError",
    "Trigger",
    "apply_trigger",
    "next_state",
]

PRIORITY_NAMES = {1: "high", 2: "medium", 3: "low"}
"""Priority levels: 1 high, 2 medium, 3 low (names as stored in ``db.models.ALARM_PRIORITIES``)."""


class AlarmState(StrEnum):
    """ISA-18.2 alarm states (values as in ``db.models.ALARM_STATES``)."""

    NORMAL = "normal"
    UNACK = "unacknowledged"
    ACKED = "acknowledged"
    RTNUN = "rtn_unacknowledged"
    SHELVED = "shelved"
    SUPPRESSED = "suppressed_by_design"
    OUT_OF_SERVICE = "out_of_service"


ANNUNCIATED_STATES = frozenset({AlarmState.UNACK, AlarmState.ACKED, AlarmState.RTNUN})
"""States in which an alarm is shown to the operator."""


class Trigger(StrEnum):
    """What moves an alarm: the process (activate, clear) or a person or design (the rest)."""

    ACTIVATE = "activate"
    CLEAR = "clear"
    ACKNOWLEDGE = "acknowledge"
    SHELVE = "shelve"
    UNSHELVE = "unshelve"  # by an operator or at the end of the shelving time
    SUPPRESS = "suppress"
    UNSUPPRESS = "unsuppress"
    REMOVE_FROM_SERVICE = "remove_from_service"
    RETURN_TO_SERVICE = "return_to_service"


class EventKind(StrEnum):
    """Kinds of alarm event (the first ten as in ``db.models.ALARM_EVENT_KINDS``)."""

    RAISED = "raised"
    CLEARED = "cleared"
    ACKNOWLEDGED = "acknowledged"
    SHELVED = "shelved"
    UNSHELVED = "unshelved"
    SUPPRESSED = "suppressed"
    UNSUPPRESSED = "unsuppressed"
    OUT_OF_SERVICE = "out_of_service"
    RETURNED_TO_SERVICE = "returned_to_service"
    PRIORITY_CHANGED = "priority_changed"
    LIMIT_CHANGED = "limit_changed"


TRIGGER_EVENT = {
    Trigger.ACTIVATE: EventKind.RAISED, Trigger.CLEAR: EventKind.CLEARED,
    Trigger.ACKNOWLEDGE: EventKind.ACKNOWLEDGED, Trigger.SHELVE: EventKind.SHELVED,
    Trigger.UNSHELVE: EventKind.UNSHELVED, Trigger.SUPPRESS: EventKind.SUPPRESSED,
    Trigger.UNSUPPRESS: EventKind.UNSUPPRESSED,
    Trigger.REMOVE_FROM_SERVICE: EventKind.OUT_OF_SERVICE,
    Trigger.RETURN_TO_SERVICE: EventKind.RETURNED_TO_SERVICE,
}


class IllegalTransitionError(ValueError):
    """An operator action that the alarm's state does not allow."""


S, T = AlarmState, Trigger
_FOLLOW = "follow the process"  # leave to UNACK if the condition is active, else NORMAL
_TABLE: dict[tuple[AlarmState, Trigger], AlarmState | str] = {
    (S.NORMAL, T.ACTIVATE): S.UNACK, (S.NORMAL, T.CLEAR): S.NORMAL,
    (S.UNACK, T.ACTIVATE): S.UNACK, (S.UNACK, T.CLEAR): S.RTNUN,
    (S.UNACK, T.ACKNOWLEDGE): S.ACKED,
    (S.ACKED, T.ACTIVATE): S.ACKED, (S.ACKED, T.CLEAR): S.NORMAL,
    (S.RTNUN, T.ACTIVATE): S.UNACK, (S.RTNUN, T.CLEAR): S.RTNUN,
    (S.RTNUN, T.ACKNOWLEDGE): S.NORMAL,
    (S.SHELVED, T.ACTIVATE): S.SHELVED, (S.SHELVED, T.CLEAR): S.SHELVED,
    (S.SHELVED, T.UNSHELVE): _FOLLOW,
    (S.SUPPRESSED, T.ACTIVATE): S.SUPPRESSED, (S.SUPPRESSED, T.CLEAR): S.SUPPRESSED,
    (S.SUPPRESSED, T.SUPPRESS): S.SUPPRESSED, (S.SUPPRESSED, T.UNSUPPRESS): _FOLLOW,
    (S.OUT_OF_SERVICE, T.ACTIVATE): S.OUT_OF_SERVICE,
    (S.OUT_OF_SERVICE, T.CLEAR): S.OUT_OF_SERVICE,
    (S.OUT_OF_SERVICE, T.SUPPRESS): S.OUT_OF_SERVICE,
    (S.OUT_OF_SERVICE, T.UNSUPPRESS): S.OUT_OF_SERVICE,
    (S.OUT_OF_SERVICE, T.RETURN_TO_SERVICE): _FOLLOW,
}
for _s in (S.NORMAL, S.UNACK, S.ACKED, S.RTNUN):
    _TABLE[(_s, T.SHELVE)] = S.SHELVED
    _TABLE[(_s, T.SUPPRESS)] = S.SUPPRESSED
for _s in (S.NORMAL, S.UNACK, S.ACKED, S.RTNUN, S.SHELVED, S.SUPPRESSED):
    _TABLE[(_s, T.REMOVE_FROM_SERVICE)] = S.OUT_OF_SERVICE
_TABLE[(S.SHELVED, T.SUPPRESS)] = S.SUPPRESSED
del _s

_REFUSALS = {
    T.ACKNOWLEDGE: "only an unacknowledged alarm (active or returned to normal) can be "
                   "acknowledged",
    T.SHELVE: "only an alarm in normal, unacknowledged, acknowledged or returned-to-normal "
              "state can be shelved",
    T.UNSHELVE: "the alarm is not shelved",
    T.UNSUPPRESS: "the alarm is not suppressed",
    T.REMOVE_FROM_SERVICE: "the alarm is already out of service",
    T.RETURN_TO_SERVICE: "the alarm is not out of service",
}


def next_state(state: AlarmState, trigger: Trigger, *, active: bool) -> AlarmState:
    """The ISA-18.2 state after ``trigger`` in ``state``.

    Parameters
    ----------
    state : the alarm's present state.
    trigger : what happens (:class:`Trigger`).
    active : whether the alarm condition is present (after deadband and delays) once the
        trigger has acted; used where the alarm leaves shelving, suppression or out of service.

    Raises :class:`IllegalTransitionError` when the trigger is not allowed in ``state``.

    >>> next_state(AlarmState.SHELVED, Trigger.UNSHELVE, active=True).value
    'unacknowledged'
    >>> next_state(AlarmState.NORMAL, Trigger.ACKNOWLEDGE, active=False)
    Traceback (most recent call last):
    ...
    ops_logic.alarms.states.IllegalTransitionError: cannot acknowledge an alarm in state \
normal: only an unacknowledged alarm (active or returned to normal) can be acknowledged

    Reference: [ISA182] alarm state transition diagram.
    """
    state, trigger = AlarmState(state), Trigger(trigger)
    out = _TABLE.get((state, trigger))
    if out is None:
        raise IllegalTransitionError(
            f"cannot {trigger.value.replace('_', ' ')} an alarm in state "
            f"{state.value.replace('_', ' ')}: {_REFUSALS[trigger]}")
    if out == _FOLLOW:
        return AlarmState.UNACK if active else AlarmState.NORMAL
    assert isinstance(out, AlarmState)
    return out


# --------------------------------------------------------------------------------- records
def _iso(t: datetime | None) -> str | None:
    return None if t is None else t.isoformat()


def _from_iso(text: str | None) -> datetime | None:
    return None if text is None else datetime.fromisoformat(text)


_TIME_FIELDS = ("pending_since", "clearing_since", "active_since", "acknowledged_at",
                "shelved_until", "updated_at")


@dataclass(frozen=True)
class AlarmRecord:
    """The present state of one alarm, plain enough to store as one row (times tz-aware).

    ``active`` is the alarm condition after deadband and delays; ``pending_since`` starts the
    on-delay, ``clearing_since`` the off-delay. ``suppressed_by`` says why suppression by design
    holds (a fishway mode, or ``"group:<parent key>"``); ``parent`` is the key of the alarm it
    is grouped under.
    """

    key: str
    rule: str
    fishway_id: str | None
    priority: int
    state: AlarmState = AlarmState.NORMAL
    active: bool = False
    tag: str | None = None
    value: float | None = None
    message: str = ""
    pending_since: datetime | None = None
    clearing_since: datetime | None = None
    active_since: datetime | None = None
    acknowledged_at: datetime | None = None
    acknowledged_by: str | None = None
    shelved_until: datetime | None = None
    suppressed_by: str | None = None
    parent: str | None = None
    updated_at: datetime | None = None

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict (times as ISO 8601 strings)."""
        out = asdict(self)
        out["state"] = self.state.value
        for name in _TIME_FIELDS:
            out[name] = _iso(getattr(self, name))
        return out

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> AlarmRecord:
        """Inverse of :meth:`to_dict`; unknown fields raise ``ValueError``."""
        known = {f.name for f in fields(cls)}
        extra = set(data) - known
        if extra:
            raise ValueError(f"unknown alarm record field(s): {', '.join(sorted(extra))}")
        kw = dict(data)
        kw["state"] = AlarmState(kw.get("state", "normal"))
        for name in _TIME_FIELDS:
            kw[name] = _from_iso(kw.get(name))
        return cls(**kw)


@dataclass(frozen=True)
class AlarmEvent:
    """One transition of one alarm: the unit of the append-only alarm history.

    ``kind`` is an :class:`EventKind` value; ``state`` the state after it, ``previous_state``
    the one before. ``annunciated`` is true when the event puts a new alarm in front of the
    operator (a raise into UNACK): the alarm-rate figures count these. ``old_value`` and
    ``new_value`` hold a changed limit.
    """

    ts: datetime
    key: str
    rule: str
    fishway_id: str | None
    kind: str
    state: str
    previous_state: str
    priority: int
    value: float | None = None
    who: str | None = None
    why: str = ""
    message: str = ""
    tag: str | None = None
    parent: str | None = None
    shelved_until: datetime | None = None
    old_value: float | None = None
    new_value: float | None = None
    annunciated: bool = False

    @property
    def priority_name(self) -> str:
        return PRIORITY_NAMES[self.priority]

    def db_fields(self) -> dict[str, Any]:
        """Arguments for ``db.alarms.record_alarm_event`` (except the database ids of the
        fishway and tag, which the caller resolves from ``fishway_id`` and ``tag``)."""
        changed = (EventKind.LIMIT_CHANGED.value, EventKind.PRIORITY_CHANGED.value)
        value = self.new_value if self.kind in changed else self.value
        return {"key": self.key, "ts": self.ts, "kind": self.kind, "state": self.state,
                "priority": self.priority_name, "rule": self.rule,
                "value": value if value is not None and math.isfinite(value) else None,
                "who": self.who, "why": self.why, "message": self.message or None,
                "shelved_until": self.shelved_until}


def apply_trigger(record: AlarmRecord, trigger: Trigger, now: datetime, *,
                  who: str | None = None, why: str = "", **changes: Any
                  ) -> tuple[AlarmRecord, AlarmEvent | None]:
    """Move ``record`` by ``trigger``; return the new record and its event (``None`` when the
    state and the condition are unchanged). ``changes`` are further record fields to set."""
    if trigger is Trigger.ACTIVATE:
        changes["active"] = True
    elif trigger is Trigger.CLEAR:
        changes["active"] = False
    new_state = next_state(record.state, trigger, active=changes.get("active", record.active))
    rec = replace(record, state=new_state, updated_at=now, **changes)
    if trigger is Trigger.ACKNOWLEDGE:
        rec = replace(rec, acknowledged_at=now, acknowledged_by=who)
    elif trigger is Trigger.ACTIVATE:
        rec = replace(rec, active_since=now, acknowledged_at=None, acknowledged_by=None)
    elif trigger is Trigger.CLEAR:
        rec = replace(rec, active_since=None)
    if trigger in (Trigger.UNSHELVE, Trigger.SUPPRESS, Trigger.REMOVE_FROM_SERVICE):
        rec = replace(rec, shelved_until=changes.get("shelved_until"))
    process = trigger in (Trigger.ACTIVATE, Trigger.CLEAR)
    if new_state == record.state and (not process or rec.active == record.active):
        return rec, None
    annunciated = new_state is AlarmState.UNACK and record.state is not AlarmState.UNACK
    event = AlarmEvent(now, rec.key, rec.rule, rec.fishway_id, TRIGGER_EVENT[trigger].value,
                       new_state.value, record.state.value, rec.priority, rec.value, who, why,
                       rec.message, rec.tag, rec.parent, rec.shelved_until,
                       annunciated=annunciated)
    return rec, event

"""Alarm storage: the current state of each alarm and its append-only event history.

The alarm engine (rules, ISA-18.2 state machine) lives elsewhere and calls
``record_alarm_event``; this module stores, it does not decide. Each alarm is known by
a ``key`` the engine composes (e.g. ``"do_low@3"`` for rule ``do_low`` on fishway 3).

``record_alarm_event(engine, key, ts, *, kind, state, priority, rule, fishway_id=None,
tag_id=None, value=None, who=None, why="", message=None, shelved_until=None) -> int``
appends one event (kind in :data:`db.models.ALARM_EVENT_KINDS`) and brings the alarm's
current-state row to ``state`` (ANSI/ISA-18.2-2016 states,
:data:`db.models.ALARM_STATES`), both in one transaction; the alarm row is created at
its first event. ``raised`` sets ``active_since`` and clears the acknowledgement;
``acknowledged`` records who and when; ``cleared`` ends ``active_since`` when the new
state is ``normal``. Returns the event id. ``alarm_events`` refuses UPDATE and DELETE.

``alarms_frame(engine, states=None)`` → current alarms, index ``key``.
``alarm_events_frame(engine, start, end, key=None)`` → events in ``[start, end)``,
index ``ts`` (UTC), columns key, rule, fishway_id, kind, state, priority, value, who, why.

>>> from datetime import datetime, timezone
>>> from db.engine import make_engine
>>> from db.migrate import upgrade
>>> eng = make_engine("sqlite://"); _ = upgrade(eng)
>>> t = datetime(2026, 7, 1, 14, 0, tzinfo=timezone.utc)
>>> _ = record_alarm_event(eng, "do_low@1", t, kind="raised", state="unacknowledged",
...                        priority="high", rule="do_low", value=4.6, why="DO below 5.0 mg/L")
>>> alarms_frame(eng).loc["do_low@1", "state"]
'unacknowledged'
>>> eng.dispose()
"""
from __future__ import annotations

import math
from collections.abc import Iterable
from datetime import datetime

import pandas as pd
import sqlalchemy as sa
from sqlalchemy.engine import Engine

from db.models import ALARM_EVENT_KINDS, ALARM_PRIORITIES, ALARM_STATES, Alarm, AlarmEvent
from db.types import to_utc

__all__ = ["alarm_events_frame", "alarms_frame", "record_alarm_event"]


def record_alarm_event(engine: Engine, key: str, ts: datetime, *, kind: str, state: str,
                       priority: str, rule: str, fishway_id: int | None = None,
                       tag_id: int | None = None, value: float | None = None,
                       who: str | None = None, why: str = "", message: str | None = None,
                       shelved_until: datetime | None = None) -> int:
    """Append an alarm event and update the alarm's current state; return the event id."""
    if kind not in ALARM_EVENT_KINDS:
        raise ValueError(f"unknown event kind {kind!r}; known: {ALARM_EVENT_KINDS}")
    if state not in ALARM_STATES:
        raise ValueError(f"unknown alarm state {state!r}; known: {ALARM_STATES}")
    if priority not in ALARM_PRIORITIES:
        raise ValueError(f"unknown priority {priority!r}; known: {ALARM_PRIORITIES}")
    if value is not None and not math.isfinite(value):
        raise ValueError("value must be finite (or None)")
    if kind == "acknowledged" and not who:
        raise ValueError("an acknowledgement records who made it")
    ts = to_utc(ts)
    alarms, events = Alarm.__table__, AlarmEvent.__table__
    with engine.begin() as conn:
        row = conn.execute(sa.select(alarms.c.id, alarms.c.active_since)
                           .where(alarms.c.key == key)).first()
        changes: dict = {"state": state, "priority": priority, "updated_at": ts, "rule": rule}
        if value is not None:
            changes["last_value"] = value
        if message is not None:
            changes["message"] = message
        if kind == "raised":
            changes.update(active_since=ts, acknowledged_at=None, acknowledged_by=None)
        elif kind == "acknowledged":
            changes.update(acknowledged_at=ts, acknowledged_by=who)
        elif kind == "cleared" and state == "normal":
            changes["active_since"] = None
        if kind == "shelved":
            changes["shelved_until"] = to_utc(shelved_until) if shelved_until else None
        elif kind == "unshelved":
            changes["shelved_until"] = None
        if row is None:
            alarm_id = conn.execute(sa.insert(alarms).values(
                key=key, fishway_id=fishway_id, tag_id=tag_id, **changes)).inserted_primary_key[0]
        else:
            alarm_id = row.id
            conn.execute(sa.update(alarms).where(alarms.c.id == alarm_id).values(**changes))
        event_id = conn.execute(sa.insert(events).values(
            alarm_id=alarm_id, ts=ts, kind=kind, state=state, priority=priority, value=value,
            who=who, why=why)).inserted_primary_key[0]
    return int(event_id)


def alarms_frame(engine: Engine, states: Iterable[str] | None = None) -> pd.DataFrame:
    """Current alarms (index ``key``), optionally only those in ``states``."""
    t = Alarm.__table__
    stmt = sa.select(t).order_by(t.c.key)
    if states is not None:
        stmt = stmt.where(t.c.state.in_(list(states)))
    with engine.connect() as conn:
        result = conn.execute(stmt)
        frame = pd.DataFrame(result.all(), columns=list(result.keys()))
    for col in ("active_since", "acknowledged_at", "shelved_until", "updated_at"):
        frame[col] = pd.to_datetime(frame[col], utc=True)
    return frame.set_index("key")


def alarm_events_frame(engine: Engine, start: datetime, end: datetime,
                       key: str | None = None) -> pd.DataFrame:
    """Alarm events in ``[start, end)``, oldest first (index ``ts``)."""
    if to_utc(end) <= to_utc(start):
        raise ValueError("end must be after start")
    a, e = Alarm.__table__, AlarmEvent.__table__
    stmt = (sa.select(e.c.ts, e.c.id, a.c.key, a.c.rule, a.c.fishway_id, e.c.kind, e.c.state,
                      e.c.priority, e.c.value, e.c.who, e.c.why)
            .join(a, a.c.id == e.c.alarm_id)
            .where(e.c.ts >= to_utc(start), e.c.ts < to_utc(end)).order_by(e.c.ts, e.c.id))
    if key is not None:
        stmt = stmt.where(a.c.key == key)
    with engine.connect() as conn:
        result = conn.execute(stmt)
        frame = pd.DataFrame(result.all(), columns=list(result.keys()))
    frame["ts"] = pd.to_datetime(frame["ts"], utc=True)
    return frame.set_index("ts")

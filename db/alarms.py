"""Alarm storage: the current state of each alarm and its append-only event history.

The alarm engine (rules, ISA-18.2 state machine: :mod:`ops_logic.alarms`) decides; this module
stores, and :mod:`db.alarm` drives both. Each alarm is known by a ``key`` the engine composes
(e.g. ``"do_low@east"`` for rule ``do_low`` on fishway ``east``).

``record_alarm_event(target, key, ts, *, kind, state, priority, rule, fishway_id=None,
tag_id=None, value=None, who=None, why="", message=None, shelved_until=None,
previous_state=None, parent=None, old_value=None) -> int``
appends one event (kind in :data:`db.models.ALARM_EVENT_KINDS`) and brings the alarm's
current-state row to ``state`` (ANSI/ISA-18.2-2016 states,
:data:`db.models.ALARM_STATES`), both in one transaction; the alarm row is created at
its first event. ``raised`` sets ``active_since`` and clears the acknowledgement;
``acknowledged`` records who and when; ``cleared`` ends ``active_since`` when the new
state is ``normal``. A ``limit_changed`` or ``priority_changed`` event carries the new value
in ``value`` and the one before in ``old_value``. Returns the event id. ``target`` is an
engine (the event is its own transaction) or a connection (the event joins the caller's
transaction). ``alarm_events`` refuses UPDATE and DELETE.

``upsert_alarm_state(conn, key, *, rule, priority, state, updated_at, ...)`` writes an alarm's
current-state row as a whole (the engine's record of it in ``record``), in the caller's
transaction; ``alarm_records(conn)`` reads those records back (key → dict).

``alarms_frame(engine, states=None)`` → current alarms, index ``key``.
``alarm_events_frame(engine, start, end, key=None)`` → events in ``[start, end)``,
index ``ts`` (UTC), columns id, key, rule, fishway_id (database id), kind, state, priority,
value, who, why, previous_state, message, parent, old_value, shelved_until.

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
from collections.abc import Iterable, Iterator
from contextlib import contextmanager
from datetime import datetime
from typing import Any

import pandas as pd
import sqlalchemy as sa
from sqlalchemy.engine import Connection, Engine

from db.models import ALARM_EVENT_KINDS, ALARM_PRIORITIES, ALARM_STATES, Alarm, AlarmEvent
from db.types import to_utc

__all__ = ["alarm_events_frame", "alarm_records", "alarms_frame", "record_alarm_event",
           "upsert_alarm_state"]


@contextmanager
def _transaction(target: Engine | Connection) -> Iterator[Connection]:
    """The caller's connection as is, or a new transaction of an engine."""
    if isinstance(target, Connection):
        yield target
        return
    with target.begin() as conn:
        yield conn


def _finite_or_none(name: str, value: float | None) -> float | None:
    if value is not None and not math.isfinite(value):
        raise ValueError(f"{name} must be finite (or None)")
    return value


def record_alarm_event(target: Engine | Connection, key: str, ts: datetime, *, kind: str,
                       state: str, priority: str, rule: str, fishway_id: int | None = None,
                       tag_id: int | None = None, value: float | None = None,
                       who: str | None = None, why: str = "", message: str | None = None,
                       shelved_until: datetime | None = None, previous_state: str | None = None,
                       parent: str | None = None, old_value: float | None = None) -> int:
    """Append an alarm event and update the alarm's current state; return the event id."""
    if kind not in ALARM_EVENT_KINDS:
        raise ValueError(f"unknown event kind {kind!r}; known: {ALARM_EVENT_KINDS}")
    if state not in ALARM_STATES:
        raise ValueError(f"unknown alarm state {state!r}; known: {ALARM_STATES}")
    if previous_state is not None and previous_state not in ALARM_STATES:
        raise ValueError(f"unknown previous state {previous_state!r}; known: {ALARM_STATES}")
    if priority not in ALARM_PRIORITIES:
        raise ValueError(f"unknown priority {priority!r}; known: {ALARM_PRIORITIES}")
    _finite_or_none("value", value)
    _finite_or_none("old_value", old_value)
    if kind == "acknowledged" and not who:
        raise ValueError("an acknowledgement records who made it")
    ts = to_utc(ts)
    until = to_utc(shelved_until) if shelved_until else None
    alarms, events = Alarm.__table__, AlarmEvent.__table__
    with _transaction(target) as conn:
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
            changes["shelved_until"] = until
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
            who=who, why=why, previous_state=previous_state, message=message, parent=parent,
            old_value=old_value, shelved_until=until)).inserted_primary_key[0]
    return int(event_id)


def upsert_alarm_state(conn: Connection, key: str, *, rule: str, priority: str, state: str,
                       updated_at: datetime, fishway_id: int | None = None,
                       tag_id: int | None = None, active_since: datetime | None = None,
                       acknowledged_at: datetime | None = None,
                       acknowledged_by: str | None = None, shelved_until: datetime | None = None,
                       last_value: float | None = None, message: str | None = None,
                       parent: str | None = None, suppressed_by: str | None = None,
                       record: dict[str, Any] | None = None) -> None:
    """Write an alarm's current-state row whole (created if missing), in the caller's
    transaction. ``last_value`` and ``message`` are kept when given as None."""
    if state not in ALARM_STATES:
        raise ValueError(f"unknown alarm state {state!r}; known: {ALARM_STATES}")
    if priority not in ALARM_PRIORITIES:
        raise ValueError(f"unknown priority {priority!r}; known: {ALARM_PRIORITIES}")
    alarms = Alarm.__table__
    values: dict[str, Any] = {
        "rule": rule, "priority": priority, "state": state, "updated_at": to_utc(updated_at),
        "fishway_id": fishway_id, "tag_id": tag_id,
        "active_since": to_utc(active_since) if active_since else None,
        "acknowledged_at": to_utc(acknowledged_at) if acknowledged_at else None,
        "acknowledged_by": acknowledged_by,
        "shelved_until": to_utc(shelved_until) if shelved_until else None,
        "parent": parent, "suppressed_by": suppressed_by, "record": record}
    if last_value is not None and math.isfinite(last_value):
        values["last_value"] = last_value
    if message is not None:
        values["message"] = message
    done = conn.execute(sa.update(alarms).where(alarms.c.key == key).values(**values))
    if done.rowcount == 0:
        conn.execute(sa.insert(alarms).values(key=key, **values))


def alarm_records(conn: Connection) -> dict[str, dict[str, Any]]:
    """The engine records kept on the alarm rows (key → ``AlarmRecord.to_dict()`` form);
    rows without one (written by :func:`record_alarm_event` alone) are left out."""
    t = Alarm.__table__
    rows = conn.execute(sa.select(t.c.key, t.c.record).where(t.c.record.is_not(None)))
    return {str(k): dict(r) for k, r in rows if r}


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
                      e.c.priority, e.c.value, e.c.who, e.c.why, e.c.previous_state,
                      e.c.message, e.c.parent, e.c.old_value, e.c.shelved_until)
            .join(a, a.c.id == e.c.alarm_id)
            .where(e.c.ts >= to_utc(start), e.c.ts < to_utc(end)).order_by(e.c.ts, e.c.id))
    if key is not None:
        stmt = stmt.where(a.c.key == key)
    with engine.connect() as conn:
        result = conn.execute(stmt)
        frame = pd.DataFrame(result.all(), columns=list(result.keys()))
    frame["ts"] = pd.to_datetime(frame["ts"], utc=True)
    frame["shelved_until"] = pd.to_datetime(frame["shelved_until"], utc=True)
    return frame.set_index("ts")

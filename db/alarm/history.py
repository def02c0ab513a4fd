"""Alarm history from the database: filtered queries, CSV export, performance figures.

``alarm_history_frame(engine, start, end, *, fishway=None, priority=None, rule=None,
state=None)`` → the events in ``[start, end)`` with the filters applied in SQL, oldest first:
an event table as :mod:`ops_logic.alarms.performance` takes it — index ``ts`` (tz-aware UTC);
columns ``event_id, key, rule, fishway_id`` (the site file's fishway id; None for a feed's
alarm), ``kind, state, previous_state, priority`` (name), ``value, old_value, who, why,
message, tag`` (name), ``parent, shelved_until``. ``fishway`` is a site-file fishway id,
``priority`` a name or level (1 high, 2 medium, 3 low), ``state`` the state after the event.

``alarm_history_csv(engine, start, end, path=None, **filters)`` → the same as CSV text
(:func:`ops_logic.alarms.performance.to_csv`), also written to ``path``.

``alarm_performance_report(engine, start, end, fishway=None)`` → ``(AlarmPerformance,
table)``: :func:`ops_logic.alarms.performance.alarm_performance` (EEMUA 191 / ISA-18.2
figures beside their targets) on the period's events, together with each alarm's last raise
or clear before ``start``, so an alarm raised earlier and still active counts as stale when it
has been for more than 24 h.

>>> from datetime import UTC, datetime, timedelta
>>> from db.engine import make_engine
>>> from db.migrate import upgrade
>>> from db.alarms import record_alarm_event
>>> eng = make_engine("sqlite://"); _ = upgrade(eng)
>>> t = datetime(2026, 7, 1, 14, 0, tzinfo=UTC)
>>> _ = record_alarm_event(eng, "do_low@east", t, kind="raised", state="unacknowledged",
...                        priority="medium", rule="do_low", value=4.6)
>>> alarm_history_frame(eng, t, t + timedelta(hours=1), priority=2)["key"].tolist()
['do_low@east']
>>> eng.dispose()
"""
from __future__ import annotations

from datetime import datetime
from pathlib import Path

import pandas as pd
import sqlalchemy as sa
from sqlalchemy.engine import Engine

from db.models import ALARM_STATES, Alarm, AlarmEvent, Fishway, Tag
from db.types import to_utc
from ops_logic.alarms.performance import AlarmPerformance, alarm_performance, to_csv
from ops_logic.alarms.states import PRIORITY_NAMES

__all__ = ["HISTORY_COLUMNS", "alarm_history_csv", "alarm_history_frame",
           "alarm_performance_report", "priority_name"]

HISTORY_COLUMNS = ("event_id", "key", "rule", "fishway_id", "kind", "state", "previous_state",
                   "priority", "value", "old_value", "who", "why", "message", "tag", "parent",
                   "shelved_until")


def priority_name(priority: int | str) -> str:
    """``"high"``, ``"medium"`` or ``"low"`` for a level 1–3 or a name (ValueError else)."""
    if isinstance(priority, str) and priority in PRIORITY_NAMES.values():
        return priority
    try:
        return PRIORITY_NAMES[int(priority)]
    except (KeyError, ValueError, TypeError):
        raise ValueError(f"unknown priority {priority!r}: use 1, 2, 3 or high, medium, "
                         "low") from None


def _select():
    a, e, f, t = Alarm.__table__, AlarmEvent.__table__, Fishway.__table__, Tag.__table__
    return (sa.select(e.c.ts, e.c.id.label("event_id"), a.c.key, a.c.rule,
                      f.c.name.label("fishway_id"), e.c.kind, e.c.state, e.c.previous_state,
                      e.c.priority, e.c.value, e.c.old_value, e.c.who, e.c.why, e.c.message,
                      t.c.name.label("tag"), e.c.parent, e.c.shelved_until)
            .join(a, a.c.id == e.c.alarm_id)
            .join(f, f.c.id == a.c.fishway_id, isouter=True)
            .join(t, t.c.id == a.c.tag_id, isouter=True)), a, e, f


def _frame(engine: Engine, stmt) -> pd.DataFrame:
    with engine.connect() as conn:
        result = conn.execute(stmt)
        frame = pd.DataFrame(result.all(), columns=list(result.keys()))
    frame["ts"] = pd.to_datetime(frame["ts"], utc=True)
    frame["shelved_until"] = pd.to_datetime(frame["shelved_until"], utc=True)
    for col in ("value", "old_value"):
        frame[col] = frame[col].astype("float64")
    return frame.set_index("ts")


def alarm_history_frame(engine: Engine, start: datetime, end: datetime, *,
                        fishway: str | None = None, priority: int | str | None = None,
                        rule: str | None = None, state: str | None = None) -> pd.DataFrame:
    """Alarm events in ``[start, end)`` with optional filters; see the module docstring."""
    lo, hi = to_utc(start), to_utc(end)
    if not lo < hi:
        raise ValueError("end must be after start")
    stmt, a, e, f = _select()
    stmt = stmt.where(e.c.ts >= lo, e.c.ts < hi)
    if fishway is not None:
        stmt = stmt.where(f.c.name == fishway)
    if priority is not None:
        stmt = stmt.where(e.c.priority == priority_name(priority))
    if rule is not None:
        stmt = stmt.where(a.c.rule == rule)
    if state is not None:
        if state not in ALARM_STATES:
            raise ValueError(f"unknown alarm state {state!r}; known: {', '.join(ALARM_STATES)}")
        stmt = stmt.where(e.c.state == state)
    return _frame(engine, stmt.order_by(e.c.ts, e.c.id))


def alarm_history_csv(engine: Engine, start: datetime, end: datetime,
                      path: str | Path | None = None, **filters: object) -> str:
    """The filtered history as CSV text (times ISO 8601 UTC); written to ``path`` if given."""
    return to_csv(alarm_history_frame(engine, start, end, **filters), path)  # type: ignore[arg-type]


def alarm_performance_report(engine: Engine, start: datetime, end: datetime,
                             fishway: str | None = None
                             ) -> tuple[AlarmPerformance, pd.DataFrame]:
    """EEMUA 191 / ISA-18.2 performance figures for ``[start, end)``; see the module."""
    lo, hi = to_utc(start), to_utc(end)
    if not lo < hi:
        raise ValueError("end must be after start")
    period = alarm_history_frame(engine, lo, hi, fishway=fishway)
    stmt, _, e, f = _select()
    last = (sa.select(sa.func.max(e.c.id)).where(e.c.ts < lo,
                                                 e.c.kind.in_(("raised", "cleared")))
            .group_by(e.c.alarm_id))
    stmt = stmt.where(e.c.id.in_(last))
    if fishway is not None:
        stmt = stmt.where(f.c.name == fishway)
    before = _frame(engine, stmt.order_by(e.c.ts, e.c.id))
    before = before[before["kind"] == "raised"]
    events = pd.concat([before, period]) if len(before) and len(period) else (
        before if len(before) else period)
    return alarm_performance(events, lo, hi, fishway=fishway)

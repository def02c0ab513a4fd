"""Operators' and supervisors' alarm actions: the API the dashboard calls.

:class:`AlarmService` runs each action of :class:`ops_logic.alarms.AlarmEngine` in one locked
transaction (:meth:`db.alarm.store.AlarmStore.session`): it loads the stored engine state,
first brings in any limit or mode change made on the Site & settings page
(:func:`db.alarm.overrides.sync_overrides`), applies the action, and stores the events, the
changed alarm records and the engine state together; nothing is stored when the action is
refused. Every action records who took it and why (on its events); a limit or mode change is
also written to the operator log and to ``setting_changes`` (so the Site & settings page shows
the value in force), in the same transaction.

Who may do what: the user must be an active account of the ``users`` table with the role
named below, else :class:`PermissionError` (the dashboard checks the role too; this is the
server side of the same rule):

======================================  ======================================================
``acknowledge(keys, who, why="")``      operator, supervisor: one alarm or many (all or none)
``shelve(key, who, why, duration_s)``   operator, supervisor: with a reason, at most the
                                        fishway's ``max_shelve_s``; it unshelves itself at the
                                        first evaluation after the time is up
``unshelve(key, who, why="")``          operator, supervisor
``set_fishway_mode(fishway, mode, …)``  operator, supervisor: ``"maintenance"`` (dewatered),
                                        ``"out_of_service"`` or ``"operating"``: suppression by
                                        design of the rules that name the mode
``remove_from_service(key, who, why)``  operator, supervisor: with a reason
``return_to_service(key, who, why="")`` operator, supervisor
``change_limit(fishway, rule, parameter, value, who, why="")``
                                        supervisor: a numeric rule parameter (limit, deadband,
                                        delay, threshold, priority; ``None`` unsets an optional
                                        one), validated like the site file; the event and the
                                        operator-log entry carry the old and the new value
======================================  ======================================================

Each action takes ``now`` (default: the UTC wall clock) and returns the events it stored.
Illegal actions raise :class:`~ops_logic.alarms.states.IllegalTransitionError` (a
``ValueError``) with the reason, e.g. acknowledging an alarm that is normal.
"""
from __future__ import annotations

import math
from collections.abc import Iterable, Iterator
from contextlib import contextmanager
from datetime import UTC, datetime

import pandas as pd
import sqlalchemy as sa
from sqlalchemy.engine import Connection, Engine

from db.alarm.overrides import read_overrides, sync_overrides
from db.alarm.store import AlarmStore, Session, SiteIds
from db.alarms import alarms_frame
from db.models import User
from ops_logic.alarms.config import AlarmSettings
from ops_logic.alarms.states import AlarmEvent
from ops_logic.site import Site

__all__ = ["OPERATOR_ROLES", "SUPERVISOR_ROLES", "AlarmService"]

OPERATOR_ROLES = ("operator", "supervisor")
SUPERVISOR_ROLES = ("supervisor",)
MODE_NAMES = {"operating": "in operation", "maintenance": "in maintenance (dewatered)",
              "out_of_service": "out of service"}


def _check_role(conn: Connection, who: str, roles: tuple[str, ...], what: str) -> None:
    if not who or not who.strip():
        raise ValueError("an alarm action records who took it")
    u = User.__table__
    row = conn.execute(sa.select(u.c.role, u.c.active).where(u.c.name == who)).first()
    if row is None or not row.active:
        raise PermissionError(f"{who!r} is not an active user: cannot {what}")
    if row.role not in roles:
        raise PermissionError(f"{who} has the role {row.role}: to {what} needs the role "
                              f"{' or '.join(roles)}")


def _number(value: object) -> float | None:
    if isinstance(value, bool) or not (value is None or isinstance(value, int | float)):
        raise ValueError(f"only numeric alarm parameters (limits, deadbands, delays, "
                         f"thresholds, priorities) can be changed here, got {value!r}")
    if value is not None and not math.isfinite(float(value)):
        raise ValueError(f"the new value must be finite, got {value!r}")
    return None if value is None else float(value)


class AlarmService:
    """Alarm actions on the stored engine state of ``site``; see the module docstring."""

    def __init__(self, engine: Engine, site: Site, *, ids: SiteIds | None = None):
        self.store = AlarmStore(engine, site, ids=ids)
        self.site = site

    @contextmanager
    def _session(self, now: datetime | None, who: str, roles: tuple[str, ...],
                 what: str) -> Iterator[Session]:
        now = now if now is not None else datetime.now(UTC)
        with self.store.session(now) as s:
            _check_role(s.conn, who, roles, what)
            events, _problems = sync_overrides(
                s.alarm_engine, read_overrides(s.conn, self.store.ids.fishways), now)
            s.add(events)
            yield s

    # -- operator actions ------------------------------------------------------------------
    def acknowledge(self, keys: str | Iterable[str], who: str, why: str = "", *,
                    now: datetime | None = None) -> list[AlarmEvent]:
        """Acknowledge one alarm or several (all or none)."""
        with self._session(now, who, OPERATOR_ROLES, "acknowledge alarms") as s:
            return s.add(s.alarm_engine.acknowledge(keys, s.now, who, why))

    def shelve(self, key: str, who: str, why: str, duration_s: float, *,
               now: datetime | None = None) -> list[AlarmEvent]:
        """Shelve an alarm for ``duration_s`` [s] with a reason."""
        with self._session(now, who, OPERATOR_ROLES, "shelve alarms") as s:
            return s.add(s.alarm_engine.shelve(key, s.now, who, why, duration_s))

    def unshelve(self, key: str, who: str, why: str = "", *,
                 now: datetime | None = None) -> list[AlarmEvent]:
        """End a shelving before its time."""
        with self._session(now, who, OPERATOR_ROLES, "unshelve alarms") as s:
            return s.add(s.alarm_engine.unshelve(key, s.now, who, why))

    def remove_from_service(self, key: str, who: str, why: str, *,
                            now: datetime | None = None) -> list[AlarmEvent]:
        """Take an alarm out of service (its instrument is being repaired) with a reason."""
        with self._session(now, who, OPERATOR_ROLES, "remove alarms from service") as s:
            return s.add(s.alarm_engine.remove_from_service(key, s.now, who, why))

    def return_to_service(self, key: str, who: str, why: str = "", *,
                          now: datetime | None = None) -> list[AlarmEvent]:
        """Return an alarm to service."""
        with self._session(now, who, OPERATOR_ROLES, "return alarms to service") as s:
            return s.add(s.alarm_engine.return_to_service(key, s.now, who, why))

    def set_fishway_mode(self, fishway_id: str, mode: str, who: str, why: str = "", *,
                         now: datetime | None = None) -> list[AlarmEvent]:
        """Put a fishway into ``"maintenance"`` or ``"out_of_service"``, or back to
        ``"operating"``; logged in the operator log and in ``setting_changes``."""
        with self._session(now, who, OPERATOR_ROLES, "change a fishway's mode") as s:
            old = s.alarm_engine.state.modes.get(fishway_id, "operating")
            events = s.add(s.alarm_engine.set_fishway_mode(fishway_id, mode, s.now, who, why))
            if mode != old:
                s.setting_change(fishway_id, "mode", action="set", set_by=who, old_text=old,
                                 new_text=mode, note=why)
                s.log(who, "shift_note", f"Alarms: {self.site.fishway(fishway_id).name} "
                      f"{MODE_NAMES[mode]} (was {MODE_NAMES[old]})"
                      + (f": {why}" if why else ""), fishway=fishway_id)
            return events

    # -- supervisor actions ----------------------------------------------------------------
    def change_limit(self, fishway_id: str, rule: str, parameter: str, value: float | None,
                     who: str, why: str = "", *,
                     now: datetime | None = None) -> list[AlarmEvent]:
        """Change a numeric parameter of a fishway's alarm rule; the event and the log entry
        hold the old and the new value."""
        value = _number(value)
        with self._session(now, who, SUPERVISOR_ROLES, "change alarm limits") as s:
            before = s.alarm_engine.settings(fishway_id)
            old = getattr(before.rule(rule), parameter, None)
            events = s.add(s.alarm_engine.change_limit(fishway_id, rule, parameter, value,
                                                       s.now, who, why))
            new = getattr(s.alarm_engine.settings(fishway_id).rule(rule), parameter)
            old_n = _number(old) if not isinstance(old, bool) else None
            new_n = _number(new) if not isinstance(new, bool) else None
            key = f"alarms.{rule}.{parameter}"
            s.setting_change(fishway_id, key, action="set", set_by=who, old_value=old_n,
                             new_value=new_n, note=why)
            text = (f"Alarm limit {rule}.{parameter} of {self.site.fishway(fishway_id).name}: "
                    f"{old!r} → {new!r}" + (f" ({why})" if why else ""))
            if new_n is not None:
                s.log(who, "adjustment", text, fishway=fishway_id, actuator=key,
                      from_value=old_n, to_value=new_n)
            else:
                s.log(who, "shift_note", text, fishway=fishway_id)
            return events

    # -- reading ---------------------------------------------------------------------------
    def settings(self, fishway_id: str) -> AlarmSettings:
        """The alarm settings in force for a fishway (site file plus stored limit edits)."""
        from ops_logic.alarms.engine import AlarmEngine

        return AlarmEngine(self.site, self.store.tags, self.store.load()).settings(fishway_id)

    def alarms(self, states: Iterable[str] | None = None) -> pd.DataFrame:
        """Current alarms (:func:`db.alarms.alarms_frame`), optionally only some states."""
        return alarms_frame(self.store.engine, states)

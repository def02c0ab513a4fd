"""The dashboard's alarm-limit and mode overrides, brought into the alarm engine.

Supervisors change a fishway's alarm limits and its mode on the dashboard's Site & settings
page, which appends rows to ``setting_changes`` (migration 0002; keys ``alarms.<rule>.
<parameter>`` and ``mode``; the newest row of a key is in force, a ``revert`` row returns the
key to the site file's value). The alarm engine keeps its own copy (``EngineState.overrides``
and ``modes``), so :func:`sync_overrides` brings the engine in line with the table — through
the engine's own actions, so each difference becomes an event: ``limit_changed`` (or
``priority_changed``) with the old and new value, or the suppression and release of the rules
that a mode change concerns — credited to whoever made the change, with their note.
:class:`~db.alarm.service.AlarmService` writes the same rows when it changes a limit or a mode,
so the table and the engine agree and a later sync has nothing to do.

An override the engine refuses (the site file changed under it) is left out and reported in
the returned problems, never applied silently.
"""
from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from datetime import datetime

import sqlalchemy as sa
from sqlalchemy.engine import Connection

from db.alarm.store import SETTING_CHANGES
from ops_logic.alarms.engine import AlarmEngine
from ops_logic.alarms.states import AlarmEvent

__all__ = ["Override", "read_overrides", "sync_overrides", "table_version"]

DEFAULT_WHO = "site settings"
"""Credited with a change whose row names nobody (never the case for rows of the dashboard)."""


@dataclass(frozen=True)
class Override:
    """The newest change of one key of one fishway: ``action`` "set" (``value``, or ``text``
    for the mode) or "revert" (back to the site file's value), who made it and their note."""

    action: str
    value: float | None
    text: str | None
    who: str
    note: str


def table_version(conn: Connection) -> int:
    """Id of the newest setting change (0 when none): changes when anything was changed."""
    return int(conn.execute(sa.select(sa.func.coalesce(sa.func.max(SETTING_CHANGES.c.id), 0))
                            ).scalar_one())


def read_overrides(conn: Connection, fishway_ids: Mapping[str, int]
                   ) -> dict[str, dict[str, Override]]:
    """The newest ``mode`` and ``alarms.*`` change of each fishway (by site-file id)."""
    c = SETTING_CHANGES
    m = c.alias("m")
    newest = (sa.select(sa.func.max(m.c.id)).where(m.c.fishway_id == c.c.fishway_id,
                                                   m.c.key == c.c.key).scalar_subquery())
    by_db = {v: k for k, v in fishway_ids.items()}
    if not by_db:
        return {}
    stmt = (sa.select(c.c.fishway_id, c.c.key, c.c.action, c.c.new_value, c.c.new_text,
                      c.c.set_by, c.c.note)
            .where(c.c.id == newest, c.c.fishway_id.in_(list(by_db)),
                   sa.or_(c.c.key == "mode", c.c.key.like("alarms.%")))
            .order_by(c.c.id))
    out: dict[str, dict[str, Override]] = {}
    for fw, key, action, value, text, who, note in conn.execute(stmt):
        out.setdefault(by_db[int(fw)], {})[str(key)] = Override(
            str(action), None if value is None else float(value), text, who or DEFAULT_WHO,
            note or "")
    return out


def _same(a: object, b: object) -> bool:
    if isinstance(a, int | float) and isinstance(b, int | float):
        return float(a) == float(b)
    return a == b


def sync_overrides(alarm_engine: AlarmEngine, overrides: Mapping[str, Mapping[str, Override]],
                   now: datetime) -> tuple[list[AlarmEvent], list[str]]:
    """Bring the engine's modes and limit edits in line with ``overrides`` (from
    :func:`read_overrides`); return the events and the problems (one line each)."""
    events: list[AlarmEvent] = []
    problems: list[str] = []
    st = alarm_engine.state
    for f in alarm_engine.site.fishways:
        fo = overrides.get(f.id, {})
        mode = fo.get("mode")
        want_mode = "operating" if mode is None or mode.action == "revert" else mode.text
        if want_mode != st.modes.get(f.id, "operating"):
            why = (mode.note if mode and mode.note else "mode changed in the site settings")
            try:
                events += alarm_engine.set_fishway_mode(
                    f.id, want_mode or "operating", now, who=mode.who if mode else DEFAULT_WHO,
                    why=why)
            except ValueError as exc:
                problems.append(f"{f.id}: mode {want_mode!r} not applied: {exc}")
        have = st.overrides.get(f.id, {})
        keys = {(k.split(".")[1], k.split(".")[2]) for k in fo
                if k.startswith("alarms.") and k.count(".") == 2}
        keys |= {(rule, p) for rule, params in have.items() for p in params}
        for rule, param in sorted(keys):
            o = fo.get(f"alarms.{rule}.{param}")
            present = param in have.get(rule, {})
            try:
                if o is not None and o.action == "set":
                    if present and _same(have[rule][param], o.value):
                        continue
                    events += alarm_engine.change_limit(
                        f.id, rule, param, o.value, now, o.who,
                        why=o.note or f"{rule}.{param} set in the site settings")
                elif present:
                    site_value = getattr(f.alarms.rule(rule), param)
                    events += alarm_engine.change_limit(
                        f.id, rule, param, site_value, now, o.who if o else DEFAULT_WHO,
                        why=(o.note if o and o.note else
                             f"{rule}.{param} back to the site file's value"))
                    del st.overrides[f.id][rule][param]
                    if not st.overrides[f.id][rule]:
                        del st.overrides[f.id][rule]
                    if not st.overrides[f.id]:
                        del st.overrides[f.id]
            except ValueError as exc:
                problems.append(f"{f.id}: override alarms.{rule}.{param} not applied: {exc}")
    return events, problems

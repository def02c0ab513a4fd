"""The alarm engine of one site kept in the database: one writer at a time, atomically.

:class:`AlarmStore` wraps :class:`ops_logic.alarms.AlarmEngine` so that every change to the
alarms — an evaluation by the ingest, an operator's acknowledgement on a dashboard — runs in a
:meth:`AlarmStore.session`: one database transaction that

1. **takes the site's write lock first**: ``UPDATE alarm_engine_state SET version = version
   + 1 … RETURNING version`` is the transaction's first statement. On PostgreSQL the update
   holds the row lock until commit, so another writer's update waits; on SQLite the first
   write takes the database write lock (a transaction that begins with a write waits out the
   busy timeout, like ``BEGIN IMMEDIATE``), so nobody reads a state that another writer is
   about to replace (pessimistic locking; the version then tells whether the state cached in
   this process is still the newest);
2. loads the engine state (from this process's cache when the version shows that nobody else
   wrote since; else from the database: the ``alarm_engine_state`` row and every alarm's
   ``record``);
3. lets the caller run the engine (``session.alarm_engine``: evaluate or an operator action)
   and hand over the events (:meth:`Session.add`), operator-log entries and setting changes;
4. stores, in the same transaction: each event (:func:`db.alarms.record_alarm_event`,
   append-only, with the database ids of its fishway and tag), each alarm whose working
   record changed (:func:`db.alarms.upsert_alarm_state`: its state columns and its ``record``:
   delay timers, grouping parent, suppression reason), and the site-wide rest of the engine
   state (modes, limit edits, recent annunciations, flood, last evaluation).

An exception anywhere rolls the whole transaction back and drops the cache (the engine may have
changed its memory before failing), so the next session reloads the stored state. Within one
process the sessions of a store also take turns on a lock (threads of a dashboard share its
cache).

Working record: every field of an alarm's record but ``value``, ``message`` and
``updated_at`` (the last reading judged and its text change at each evaluation and are not
needed to resume: the next evaluation sets them again); an alarm row is rewritten only when
its working record changed or it has an event, which keeps a quiet cycle to a few statements.

Ids: the site's fishways are the ``fishways`` rows whose ``name`` is the site file's fishway
id, and tags are found by name (:func:`db.site_sync.sync_site`, which :func:`site_ids` runs).
Alarm keys are unique in a database, so a database holds the alarms of one site.

>>> from datetime import UTC, datetime
>>> from db.engine import make_engine
>>> from db.migrate import upgrade
>>> from ops_logic.site import load_site
>>> eng = make_engine("sqlite://"); _ = upgrade(eng)
>>> store = AlarmStore(eng, load_site())
>>> t = datetime(2026, 7, 1, 12, 0, tzinfo=UTC)
>>> with store.session(t) as s:
...     _ = s.add(s.alarm_engine.set_fishway_mode("east", "maintenance", t, who="op1"))
>>> store.load().modes
{'east': 'maintenance'}
>>> eng.dispose()
"""
from __future__ import annotations

import math
import threading
from collections.abc import Iterable, Iterator, Mapping
from contextlib import contextmanager
from dataclasses import dataclass, field, fields
from datetime import UTC, datetime
from operator import attrgetter
from typing import Any

import sqlalchemy as sa
from sqlalchemy.dialects import postgresql, sqlite
from sqlalchemy.engine import Connection, Engine

from db.alarms import alarm_records, record_alarm_event, upsert_alarm_state
from db.models import (
    OPERATOR_LOG_KINDS,
    AlarmEngineState,
    Fishway,
    OperatorLogEntry,
    SettingChange,
)
from db.models import Site as SiteRow
from db.site_sync import sync_site
from db.types import to_utc
from ops_logic.alarms.engine import AlarmEngine, EngineState
from ops_logic.alarms.states import PRIORITY_NAMES, AlarmEvent, AlarmRecord
from ops_logic.site import Site
from ops_logic.tags import TagDef, site_tags

__all__ = ["WORKING_FIELDS", "AlarmStore", "Session", "SiteIds", "json_safe", "site_ids"]

WORKING_FIELDS = tuple(f.name for f in fields(AlarmRecord)
                       if f.name not in ("value", "message", "updated_at"))
"""Fields of an alarm record whose change is stored at once (see the module docstring)."""

SETTING_CHANGES = SettingChange.__table__
"""The append-only ``setting_changes`` table (migration 0002; :class:`db.models.SettingChange`)."""


@dataclass(frozen=True)
class SiteIds:
    """Database ids of a site: the site row, its fishways (by site-file id), its tags (by
    name)."""

    site_id: int
    fishways: Mapping[str, int]
    tags: Mapping[str, int]


def site_ids(engine: Engine, site: Site) -> SiteIds:
    """Sync the site's catalogue into the database (idempotent) and return its ids."""
    tags = sync_site(engine, site)
    s, f = SiteRow.__table__, Fishway.__table__
    with engine.connect() as conn:
        site_id = int(conn.execute(sa.select(s.c.id).where(s.c.name == site.site.name))
                      .scalar_one())
        rows = conn.execute(sa.select(f.c.name, f.c.id).where(f.c.site_id == site_id))
        fishways = {str(name): int(i) for name, i in rows}
    return SiteIds(site_id, fishways, dict(tags))


def json_safe(obj: Any) -> Any:
    """``obj`` with every non-finite float replaced by None (PostgreSQL's JSON has no NaN).

    >>> json_safe({"a": [1.0, float("nan")], "b": float("inf")})
    {'a': [1.0, None], 'b': None}
    """
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if isinstance(obj, dict):
        return {k: json_safe(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [json_safe(v) for v in obj]
    return obj


_working = attrgetter(*WORKING_FIELDS)
"""The working record of an alarm as a tuple (for the change test)."""


def _finite(x: float | None) -> float | None:
    return x if x is not None and math.isfinite(x) else None


@dataclass
class Session:
    """One locked transaction on the alarms of a site (from :meth:`AlarmStore.session`).

    ``alarm_engine`` is the site's engine with the stored state; hand every event it returns
    to :meth:`add`. ``conn`` is the transaction's connection."""

    conn: Connection
    alarm_engine: AlarmEngine
    now: datetime
    ids: SiteIds
    reloaded: bool
    events: list[AlarmEvent] = field(default_factory=list)
    log_ids: list[int] = field(default_factory=list)

    def add(self, events: Iterable[AlarmEvent]) -> list[AlarmEvent]:
        """Queue the engine's events for storage at commit; return them."""
        new = list(events)
        self.events.extend(new)
        return new

    def log(self, author: str, kind: str, text: str, *, fishway: str | None = None,
            actuator: str | None = None, from_value: float | None = None,
            to_value: float | None = None) -> int:
        """Append an operator-log entry in this transaction (rules of
        :func:`db.history.add_log_entry`); ``fishway`` is the site file's id."""
        if kind not in OPERATOR_LOG_KINDS or kind == "correction":
            raise ValueError(f"log kind must be one of {OPERATOR_LOG_KINDS[:3]}, got {kind!r}")
        if kind == "adjustment" and (not actuator or to_value is None):
            raise ValueError("an adjustment names the actuator and the value it was set to")
        if not author:
            raise ValueError("a log entry needs an author")
        fid = self.ids.fishways[fishway] if fishway is not None else None
        row = self.conn.execute(sa.insert(OperatorLogEntry.__table__).values(
            ts=to_utc(self.now), author=author, kind=kind, text=text, fishway_id=fid,
            actuator=actuator, from_value=_finite(from_value), to_value=_finite(to_value)))
        self.log_ids.append(int(row.inserted_primary_key[0]))
        return self.log_ids[-1]

    def setting_change(self, fishway: str, key: str, *, action: str, set_by: str,
                       old_value: float | None = None, new_value: float | None = None,
                       old_text: str | None = None, new_text: str | None = None,
                       note: str = "") -> int:
        """Append a row to ``setting_changes`` in this transaction (what the dashboard's
        Site & settings page shows); return its id."""
        if action not in ("set", "revert"):
            raise ValueError(f"action must be 'set' or 'revert', got {action!r}")
        row = self.conn.execute(sa.insert(SETTING_CHANGES).values(
            ts=to_utc(self.now), fishway_id=self.ids.fishways[fishway], key=key, action=action,
            old_value=_finite(old_value), new_value=_finite(new_value), old_text=old_text,
            new_text=new_text, set_by=set_by, note=note).returning(SETTING_CHANGES.c.id))
        return int(row.scalar_one())


@dataclass
class _Cache:
    version: int
    alarm_engine: AlarmEngine
    persisted: dict[str, tuple]


class AlarmStore:
    """The alarm engine of ``site`` stored in ``engine``'s database; see the module docstring.

    Parameters
    ----------
    engine : the database (migrated to the newest revision).
    site : the site model.
    ids : database ids (default :func:`site_ids`, which syncs the catalogue).
    tags : the tag catalogue (default :func:`ops_logic.tags.site_tags`).
    """

    def __init__(self, engine: Engine, site: Site, *, ids: SiteIds | None = None,
                 tags: list[TagDef] | None = None):
        self.engine = engine
        self.site = site
        self.tags = list(tags) if tags is not None else site_tags(site)
        self.ids = ids if ids is not None else site_ids(engine, site)
        self._cache: _Cache | None = None
        self._mutex = threading.RLock()
        t = AlarmEngineState.__table__
        with engine.begin() as conn:
            found = conn.execute(sa.select(t.c.site_id).where(
                t.c.site_id == self.ids.site_id)).first()
            if found is None:
                self._insert_row(conn)

    def _insert_row(self, conn: Connection) -> None:
        t = AlarmEngineState.__table__
        stmt = (postgresql.insert(t) if conn.dialect.name == "postgresql"
                else sqlite.insert(t))
        conn.execute(stmt.values(site_id=self.ids.site_id, version=0, state={},
                                 updated_at=datetime.fromtimestamp(0, tz=UTC))
                     .on_conflict_do_nothing(index_elements=["site_id"]))

    # -- locking and loading --------------------------------------------------------------
    def _lock(self, conn: Connection, now: datetime) -> int:
        t = AlarmEngineState.__table__
        stmt = (sa.update(t).where(t.c.site_id == self.ids.site_id)
                .values(version=t.c.version + 1, updated_at=to_utc(now))
                .returning(t.c.version))
        version = conn.execute(stmt).scalar_one_or_none()
        if version is None:
            raise RuntimeError(f"no alarm_engine_state row for site id {self.ids.site_id}")
        return int(version)

    def _read(self, conn: Connection) -> EngineState:
        t = AlarmEngineState.__table__
        state = conn.execute(sa.select(t.c.state).where(t.c.site_id == self.ids.site_id)
                             ).scalar_one()
        return EngineState.from_dict({**(state or {}), "alarms": alarm_records(conn)})

    def load(self) -> EngineState:
        """The stored engine state (read-only: no lock, no cache)."""
        with self.engine.connect() as conn:
            return self._read(conn)

    @contextmanager
    def session(self, now: datetime) -> Iterator[Session]:
        """A locked transaction on the site's alarms at ``now`` (tz-aware); see the module
        docstring. Events given to :meth:`Session.add` are stored at the end of the block."""
        to_utc(now)
        with self._mutex:  # threads of one process take turns too (they share the cache)
            yield from self._session(now)

    def _session(self, now: datetime) -> Iterator[Session]:
        try:
            with self.engine.begin() as conn:
                version = self._lock(conn, now)
                cache = self._cache
                reloaded = cache is None or cache.version != version - 1
                if reloaded:
                    state = self._read(conn)
                    alarm_engine = AlarmEngine(self.site, self.tags, state)
                    persisted = {k: _working(r) for k, r in state.alarms.items()}
                else:
                    assert cache is not None
                    alarm_engine, persisted = cache.alarm_engine, cache.persisted
                self._cache = None  # until committed
                s = Session(conn, alarm_engine, now, self.ids, reloaded)
                yield s
                persisted = self._save(s, persisted)
        except BaseException:
            self._cache = None
            raise
        self._cache = _Cache(version, alarm_engine, persisted)

    # -- storing --------------------------------------------------------------------------
    def _save(self, s: Session, persisted: dict[str, tuple]) -> dict[str, tuple]:
        conn, ids = s.conn, self.ids
        for e in s.events:
            fields_ = e.db_fields()
            record_alarm_event(
                conn, **fields_, fishway_id=ids.fishways.get(e.fishway_id or ""),
                tag_id=ids.tags.get(e.tag or ""), previous_state=e.previous_state,
                parent=e.parent, old_value=_finite(e.old_value))
        touched = {e.key for e in s.events}
        out = dict(persisted)
        for key, rec in s.alarm_engine.state.alarms.items():
            w = _working(rec)
            if key not in touched and persisted.get(key) == w:
                continue
            upsert_alarm_state(
                conn, key, rule=rec.rule, priority=PRIORITY_NAMES[rec.priority],
                state=rec.state.value, updated_at=rec.updated_at or s.now,
                fishway_id=ids.fishways.get(rec.fishway_id or ""),
                tag_id=ids.tags.get(rec.tag or ""), active_since=rec.active_since,
                acknowledged_at=rec.acknowledged_at, acknowledged_by=rec.acknowledged_by,
                shelved_until=rec.shelved_until, last_value=rec.value, message=rec.message,
                parent=rec.parent, suppressed_by=rec.suppressed_by,
                record=json_safe(rec.to_dict()))
            out[key] = w
        t = AlarmEngineState.__table__
        conn.execute(sa.update(t).where(t.c.site_id == ids.site_id)
                     .values(state=json_safe(_rest(s.alarm_engine.state))))
        return out


def _rest(state: EngineState) -> dict[str, Any]:
    """``state.to_dict()`` without the alarms (those live on the alarm rows)."""
    alarms, state.alarms = state.alarms, {}
    try:
        out = state.to_dict()
    finally:
        state.alarms = alarms
    out.pop("alarms")
    return out

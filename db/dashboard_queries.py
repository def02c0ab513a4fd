"""Queries the dashboard needs beyond the general storage API (SQL stays in ``db/``).

The module is shared by the dashboard pages; each page's queries sit in a section headed by
the pages that use them. Results follow the package's conventions: times are tz-aware UTC,
values are in the tag's SI unit.

Profile, setpoints, trends and operator log pages
--------------------------------------------------
``fishway_db_ids(engine, site_name) -> dict[str, int]`` — database ids of a site's fishways
by their site-file id (the ``fishways.name`` column, see :mod:`db.site_sync`).
``latest_good_values(engine, tag_ids) -> DataFrame`` — per tag the newest reading that has a
value and passed QC or was not evaluated (QARTOD flag 1 or 2); index ``tag_id``, columns
``ts``, ``value``, ``flag``. Tags without such a reading are absent.
``reading_near(engine, tag_id, when, window_s) -> dict | None`` — the reading with a value
nearest in time to ``when`` within ``± window_s`` (keys ``ts``, ``value``, ``flag``).
``latest_recommendation(engine, fishway_id) -> dict | None`` — the newest stored
recommendation of a fishway (keys ``id``, ``fishway_id``, ``ts``, ``inputs``, ``settings``,
``predicted``, ``binding_constraint``, ``feasible``, ``reason``);
``recommendation(engine, recommendation_id) -> dict | None`` — one by its id.
``log_entries(engine, *, start=None, end=None, fishway_id=None, kinds=None, author=None,
text=None, limit=200) -> DataFrame`` — operator log entries, newest first, filtered in SQL
(``text`` matches the entry text case-insensitively as a plain substring: ``%`` and ``_``
are literal); index ``ts``; columns as :func:`db.history.operator_log_frame`.
``log_entry(engine, entry_id) -> dict | None`` and ``corrections_of(engine, entry_ids) ->
dict[int, list[int]]`` — one entry, and the corrections that refer to each of some entries.

>>> from datetime import datetime, timezone
>>> from db.engine import make_engine
>>> from db.migrate import upgrade
>>> from db.catalog import add_site, add_fishway, add_tag
>>> from db.history import add_log_entry
>>> from db.readings import store_batch
>>> eng = make_engine("sqlite://"); _ = upgrade(eng)
>>> fw = add_fishway(eng, add_site(eng, "Demo site"), "left")
>>> fishway_db_ids(eng, "Demo site") == {"left": fw}
True
>>> tag = add_tag(eng, fw, "left.P01.level", "water_level", "m", poll_period_s=10)
>>> _ = store_batch(eng, [(tag, 1767225600, 76.25, 1), (tag, 1767225610, 99.0, 4)])
>>> latest_good_values(eng, [tag]).loc[tag, "value"]     # the failed reading is skipped
np.float64(76.25)
>>> t = datetime(2026, 1, 1, 0, 0, 9, tzinfo=timezone.utc)
>>> reading_near(eng, tag, t, 60.0)["value"]             # 1 s from the failed one
99.0
>>> first = add_log_entry(eng, t, "op1", "shift_note", text="100% clear", fishway_id=fw)
>>> fix = add_log_entry(eng, t, "op1", "correction", text="90%", refers_to=first)
>>> log_entries(eng, text="0%")["id"].tolist()          # newest first; % is literal
[2, 1]
>>> corrections_of(eng, [first])
{1: [2]}
>>> eng.dispose()
"""
from __future__ import annotations

from collections.abc import Iterable, Sequence
from datetime import datetime

import numpy as np
import pandas as pd
import sqlalchemy as sa
from sqlalchemy.engine import Engine

from db.history import finite_or_none, insert_row, rows_frame, ts_between, ts_frame
from db.models import (
    SETTING_ACTIONS,
    Fishway,
    OperatorLogEntry,
    Recommendation,
    SettingChange,
    Site,
    User,
)
from db.types import ms_to_datetime, ms_to_index, to_epoch_ms, to_utc

__all__ = [
    "corrections_of",
    "fishway_db_ids",
    "latest_good_values",
    "latest_recommendation",
    "log_entries",
    "log_entry",
    "reading_near",
    "recommendation",
]

# == Profile, setpoints, trends and operator log pages ======================================
GOOD_FLAGS = (1, 2)
"""QARTOD flags of a usable reading: pass, not evaluated."""

_LOG_COLUMNS = ("id", "author", "kind", "text", "fishway_id", "actuator", "from_value",
                "to_value", "refers_to")


def fishway_db_ids(engine: Engine, site_name: str) -> dict[str, int]:
    """Database ids of the fishways of site ``site_name`` by their site-file id."""
    f, s = Fishway.__table__, Site.__table__
    stmt = (sa.select(f.c.name, f.c.id).join(s, s.c.id == f.c.site_id)
            .where(s.c.name == site_name).order_by(f.c.id))
    with engine.connect() as conn:
        return {str(name): int(i) for name, i in conn.execute(stmt)}


_GOOD_SQL = sa.text(
    "SELECT ts_ms, value, flag FROM readings WHERE tag_id = :tag AND value IS NOT NULL "
    "AND flag IN (1, 2) ORDER BY ts_ms DESC LIMIT 1")


def latest_good_values(engine: Engine, tag_ids: Iterable[int]) -> pd.DataFrame:
    """Newest usable reading (value present, flag 1 or 2) of each tag; see the module."""
    ids, ts, value, flag = [], [], [], []
    with engine.connect() as conn:
        for t in sorted({int(t) for t in tag_ids}):
            row = conn.execute(_GOOD_SQL, {"tag": t}).first()
            if row is not None:
                ids.append(t)
                ts.append(int(row[0]))
                value.append(float(row[1]))
                flag.append(int(row[2]))
    return pd.DataFrame({"ts": ms_to_index(np.asarray(ts, dtype="int64"), name=None),
                         "value": np.asarray(value, dtype="float64"),
                         "flag": np.asarray(flag, dtype="int64")},
                        index=pd.Index(np.asarray(ids, dtype="int64"), name="tag_id"))


_BEFORE_SQL = sa.text(
    "SELECT ts_ms, value, flag FROM readings WHERE tag_id = :tag AND value IS NOT NULL "
    "AND ts_ms <= :at AND ts_ms >= :lo ORDER BY ts_ms DESC LIMIT 1")
_AFTER_SQL = sa.text(
    "SELECT ts_ms, value, flag FROM readings WHERE tag_id = :tag AND value IS NOT NULL "
    "AND ts_ms > :at AND ts_ms <= :hi ORDER BY ts_ms LIMIT 1")


def reading_near(engine: Engine, tag_id: int, when: datetime | float,
                 window_s: float) -> dict | None:
    """The reading with a value nearest to ``when`` within ``± window_s`` [s], or None.

    Ties go to the earlier reading.
    """
    if not window_s > 0:
        raise ValueError("window_s must be positive")
    at = to_epoch_ms(when)
    span = round(window_s * 1000.0)
    params = {"tag": int(tag_id), "at": at, "lo": at - span, "hi": at + span}
    with engine.connect() as conn:
        found = [r for r in (conn.execute(_BEFORE_SQL, params).first(),
                             conn.execute(_AFTER_SQL, params).first()) if r is not None]
    if not found:
        return None
    best = min(found, key=lambda r: (abs(int(r[0]) - at), int(r[0])))
    return {"ts": ms_to_datetime(int(best[0])), "value": float(best[1]), "flag": int(best[2])}


def _recommendation_select() -> sa.Select:
    t = Recommendation.__table__
    return sa.select(t.c.id, t.c.fishway_id, t.c.ts, t.c.inputs, t.c.settings, t.c.predicted,
                     t.c.binding_constraint, t.c.feasible, t.c.reason)


def _one(engine: Engine, stmt: sa.Select) -> dict | None:
    with engine.connect() as conn:
        row = conn.execute(stmt).mappings().first()
    return dict(row) if row is not None else None


def latest_recommendation(engine: Engine, fishway_id: int) -> dict | None:
    """The newest stored recommendation of a fishway (by time, then id), or None."""
    t = Recommendation.__table__
    return _one(engine, _recommendation_select().where(t.c.fishway_id == int(fishway_id))
                .order_by(t.c.ts.desc(), t.c.id.desc()).limit(1))


def recommendation(engine: Engine, recommendation_id: int) -> dict | None:
    """The stored recommendation with this id, or None."""
    t = Recommendation.__table__
    return _one(engine, _recommendation_select().where(t.c.id == int(recommendation_id)))


def _like_literal(text: str) -> str:
    escaped = text.replace("\\", "\\\\").replace("%", "\\%").replace("_", "\\_")
    return f"%{escaped.lower()}%"


def log_entries(engine: Engine, *, start: datetime | None = None, end: datetime | None = None,
                fishway_id: int | None = None, kinds: Sequence[str] | None = None,
                author: str | None = None, text: str | None = None,
                limit: int = 200) -> pd.DataFrame:
    """Operator log entries, newest first (by time, then id), filtered; see the module."""
    if not 1 <= int(limit) <= 10_000:
        raise ValueError("limit must be 1–10000 entries")
    t = OperatorLogEntry.__table__
    stmt = sa.select(t.c.ts, *(t.c[c] for c in _LOG_COLUMNS)).where(
        *ts_between(t.c.ts, start, end))
    if fishway_id is not None:
        stmt = stmt.where(t.c.fishway_id == int(fishway_id))
    if kinds:
        stmt = stmt.where(t.c.kind.in_(list(kinds)))
    if author:
        stmt = stmt.where(t.c.author == author)
    if text:
        stmt = stmt.where(sa.func.lower(t.c.text).like(_like_literal(text), escape="\\"))
    return ts_frame(engine, stmt.order_by(t.c.ts.desc(), t.c.id.desc()).limit(int(limit)))


def log_entry(engine: Engine, entry_id: int) -> dict | None:
    """One operator log entry as a dict (``ts`` and the columns of :func:`log_entries`)."""
    t = OperatorLogEntry.__table__
    return _one(engine, sa.select(t.c.ts, *(t.c[c] for c in _LOG_COLUMNS))
                .where(t.c.id == int(entry_id)))


def corrections_of(engine: Engine, entry_ids: Iterable[int]) -> dict[int, list[int]]:
    """Ids of the correction entries that refer to each of ``entry_ids`` (oldest first);
    entries without corrections are absent."""
    ids = sorted({int(i) for i in entry_ids})
    if not ids:
        return {}
    t = OperatorLogEntry.__table__
    stmt = (sa.select(t.c.refers_to, t.c.id).where(t.c.refers_to.in_(ids))
            .order_by(t.c.refers_to, t.c.ts, t.c.id))
    out: dict[int, list[int]] = {}
    with engine.connect() as conn:
        for ref, i in conn.execute(stmt):
            out.setdefault(int(ref), []).append(int(i))
    return out


# == Overview, wall display, data health, site & settings pages ==============================
# ``record_setting_change(engine, fishway_id, key, ts, *, action, set_by, old_value=None,
# new_value=None, old_text=None, new_text=None, note="") -> int`` appends one change of a
# fishway's targets, alarm limits or mode to ``setting_changes`` (migration 0002; values SI,
# ``action`` "set" or "revert"). ``setting_changes_frame(engine, fishway_id=None, limit=200)``
# → changes newest first (index ``ts``). ``setting_overrides(engine)`` → ``(version,
# {fishway_id: {key: (value, text)}})``, the overrides in force (the newest change of each key,
# unless it was a revert) and the id of the newest change (0 when none: a cache key).
# ``flag_counts(engine, start, end)`` → QARTOD flag counts per tag in ``[start, end)``
# (index ``tag_id``; columns 1, 2, 3, 4, 9). ``users_frame(engine)`` → the accounts without
# their password hashes (index ``name``; columns id, role, created_at, active).
# ``alarm_counts(engine)`` → ``[(fishway_id, priority, state, count)]`` over the alarms table
# (empty: no alarm data at all). ``hourly_maxima(engine, tag_id, start, end)`` → (epoch ms,
# value) arrays of the hourly rollups' maxima (for a 7DADM).
#
# The table's model is :class:`db.models.SettingChange`; ``SETTING_CHANGES`` (its table) and
# ``SETTING_ACTIONS`` stay importable from here.
SETTING_CHANGES = SettingChange.__table__
QARTOD_FLAG_NAMES = {1: "pass", 2: "not evaluated", 3: "suspect", 4: "fail", 9: "missing"}
"""QARTOD flag names (IOOS flags manual v1.2, 2020; as in ``ioos_qc.qartod.QartodFlags``)."""

__all__ += ["QARTOD_FLAG_NAMES", "SETTING_ACTIONS", "SETTING_CHANGES", "alarm_counts",
            "flag_counts", "hourly_maxima", "record_setting_change", "setting_changes_frame",
            "setting_overrides", "users_frame"]


def record_setting_change(engine: Engine, fishway_id: int, key: str, ts: datetime, *,
                          action: str, set_by: str, old_value: float | None = None,
                          new_value: float | None = None, old_text: str | None = None,
                          new_text: str | None = None, note: str = "") -> int:
    """Append one setting change; return its id. ValueError for a bad action, an empty key
    or author, a set without a new value, or a non-finite value."""
    if action not in SETTING_ACTIONS:
        raise ValueError(f"unknown action {action!r}; known: {SETTING_ACTIONS}")
    if not key or len(key) > 200:
        raise ValueError("a setting change needs a key of 1–200 characters")
    if not set_by:
        raise ValueError("a setting change records who made it")
    if action == "set" and new_value is None and new_text is None:
        raise ValueError("a set needs the new value")
    values = {"ts": to_utc(ts), "fishway_id": int(fishway_id), "key": key, "action": action,
              "old_value": finite_or_none("old_value", old_value),
              "new_value": finite_or_none("new_value", new_value), "old_text": old_text,
              "new_text": new_text, "set_by": set_by, "note": note}
    return insert_row(engine, SETTING_CHANGES, values)


def setting_changes_frame(engine: Engine, fishway_id: int | None = None,
                          limit: int = 200) -> pd.DataFrame:
    """Setting changes, newest first (by id); index ``ts`` (UTC)."""
    t = SETTING_CHANGES
    stmt = sa.select(t).order_by(t.c.id.desc()).limit(int(limit))
    if fishway_id is not None:
        stmt = stmt.where(t.c.fishway_id == int(fishway_id))
    return ts_frame(engine, stmt)


_OVERRIDES_SQL = sa.text(
    "SELECT c.fishway_id, c.key, c.action, c.new_value, c.new_text, c.id FROM setting_changes c "
    "WHERE c.id = (SELECT max(m.id) FROM setting_changes m WHERE m.fishway_id = c.fishway_id "
    "AND m.key = c.key)")


def setting_overrides(engine: Engine) -> tuple[int, dict[int, dict[str, tuple]]]:
    """The overrides in force and the newest change id; see the section comment."""
    out: dict[int, dict[str, tuple]] = {}
    version = 0
    with engine.connect() as conn:
        for fw, key, action, value, text, i in conn.execute(_OVERRIDES_SQL):
            version = max(version, int(i))
            if action == "set":
                out.setdefault(int(fw), {})[str(key)] = (
                    None if value is None else float(value), text)
    return version, out


_FLAG_COUNTS_SQL = sa.text(
    "SELECT r.tag_id, r.flag, count(*) FROM readings r WHERE r.tag_id IN (SELECT id FROM tags) "
    "AND r.ts_ms >= :lo AND r.ts_ms < :hi GROUP BY r.tag_id, r.flag")


def flag_counts(engine: Engine, start: datetime | float, end: datetime | float) -> pd.DataFrame:
    """Readings per QARTOD flag of each tag with readings in ``[start, end)``."""
    lo, hi = to_epoch_ms(start), to_epoch_ms(end)
    if hi <= lo:
        raise ValueError("end must be after start")
    with engine.connect() as conn:
        rows = conn.execute(_FLAG_COUNTS_SQL, {"lo": lo, "hi": hi}).all()
    flags = list(QARTOD_FLAG_NAMES)
    frame = pd.DataFrame(rows, columns=["tag_id", "flag", "n"])
    table = frame.pivot_table(index="tag_id", columns="flag", values="n", aggfunc="sum",
                              fill_value=0) if not frame.empty else pd.DataFrame()
    table = table.reindex(columns=flags, fill_value=0).astype("int64")
    table.index = pd.Index(table.index.astype("int64"), name="tag_id")
    table.columns = pd.Index(flags, name="flag")
    return table


def users_frame(engine: Engine) -> pd.DataFrame:
    """Every account (no password hashes), index ``name``."""
    t = User.__table__
    stmt = sa.select(t.c.name, t.c.id, t.c.role, t.c.created_at, t.c.active).order_by(t.c.name)
    frame = rows_frame(engine, stmt)
    frame["created_at"] = pd.to_datetime(frame["created_at"], utc=True)
    return frame.set_index("name")


_ALARM_COUNTS_SQL = sa.text(
    "SELECT fishway_id, priority, state, count(*) FROM alarms GROUP BY fishway_id, priority, "
    "state")


def alarm_counts(engine: Engine) -> list[tuple[int | None, str, str, int]]:
    """Alarms of the alarms table counted by (fishway id, priority, state); an empty list when
    the table has no row at all (no alarm data, as opposed to no active alarm)."""
    with engine.connect() as conn:
        return [(None if fw is None else int(fw), str(p), str(s), int(n))
                for fw, p, s, n in conn.execute(_ALARM_COUNTS_SQL)]


_HOURLY_MAX_SQL = sa.text(
    "SELECT vmax_ms, vmax FROM rollups WHERE tag_id = :tag AND res_s = 3600 "
    "AND bucket_ms >= :lo AND bucket_ms < :hi ORDER BY bucket_ms")


def hourly_maxima(engine: Engine, tag_id: int, start: datetime | float,
                  end: datetime | float) -> tuple[np.ndarray, np.ndarray]:
    """Time [epoch ms] and value of the maximum of each hourly rollup of a tag whose bucket
    starts in ``[start, end)``."""
    with engine.connect() as conn:
        rows = conn.execute(_HOURLY_MAX_SQL, {"tag": int(tag_id), "lo": to_epoch_ms(start),
                                              "hi": to_epoch_ms(end)}).all()
    if not rows:
        return np.empty(0, dtype="int64"), np.empty(0, dtype="float64")
    ts, value = zip(*rows, strict=True)
    return np.asarray(ts, dtype="int64"), np.asarray(value, dtype="float64")

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
recommendation of a fishway (keys ``id``, ``ts``, ``inputs``, ``settings``, ``predicted``,
``binding_constraint``, ``feasible``, ``reason``).
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

from db.models import Fishway, OperatorLogEntry, Recommendation, Site
from db.types import ms_to_datetime, ms_to_index, to_epoch_ms, to_utc

__all__ = [
    "corrections_of",
    "fishway_db_ids",
    "latest_good_values",
    "latest_recommendation",
    "log_entries",
    "log_entry",
    "reading_near",
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


def latest_recommendation(engine: Engine, fishway_id: int) -> dict | None:
    """The newest stored recommendation of a fishway (by time, then id), or None."""
    t = Recommendation.__table__
    stmt = (sa.select(t.c.id, t.c.ts, t.c.inputs, t.c.settings, t.c.predicted,
                      t.c.binding_constraint, t.c.feasible, t.c.reason)
            .where(t.c.fishway_id == int(fishway_id))
            .order_by(t.c.ts.desc(), t.c.id.desc()).limit(1))
    with engine.connect() as conn:
        row = conn.execute(stmt).mappings().first()
    return dict(row) if row is not None else None


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
    stmt = sa.select(t.c.ts, *(t.c[c] for c in _LOG_COLUMNS))
    if start is not None:
        stmt = stmt.where(t.c.ts >= to_utc(start))
    if end is not None:
        stmt = stmt.where(t.c.ts < to_utc(end))
    if fishway_id is not None:
        stmt = stmt.where(t.c.fishway_id == int(fishway_id))
    if kinds:
        stmt = stmt.where(t.c.kind.in_(list(kinds)))
    if author:
        stmt = stmt.where(t.c.author == author)
    if text:
        stmt = stmt.where(sa.func.lower(t.c.text).like(_like_literal(text), escape="\\"))
    stmt = stmt.order_by(t.c.ts.desc(), t.c.id.desc()).limit(int(limit))
    with engine.connect() as conn:
        result = conn.execute(stmt)
        frame = pd.DataFrame(result.all(), columns=list(result.keys()))
    if frame.empty:
        frame = frame.astype({"ts": "datetime64[us, UTC]"})
    frame["ts"] = pd.to_datetime(frame["ts"], utc=True)
    return frame.set_index("ts")


def log_entry(engine: Engine, entry_id: int) -> dict | None:
    """One operator log entry as a dict (``ts`` and the columns of :func:`log_entries`)."""
    t = OperatorLogEntry.__table__
    stmt = sa.select(t.c.ts, *(t.c[c] for c in _LOG_COLUMNS)).where(t.c.id == int(entry_id))
    with engine.connect() as conn:
        row = conn.execute(stmt).mappings().first()
    return dict(row) if row is not None else None


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

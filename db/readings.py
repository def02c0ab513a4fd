"""Raw readings: the ingest write path and the read queries.

Write path (for the feed pipeline)
----------------------------------
``store_batch(engine, rows) -> int`` stores readings ``(tag_id, ts, value, flag)``:

* ``ts`` is a tz-aware datetime (pandas Timestamp included) or epoch seconds (int or
  float); it is kept to the millisecond;
* ``value`` is a float in the tag's unit, or None/NaN for a missing reading, which must
  then carry QARTOD flag 9; infinities are refused;
* ``flag`` is a QARTOD flag 1, 2, 3, 4 or 9.

Guarantees: the batch is validated as a whole first (a ValueError names the bad row
and nothing is written); readings and rollups are written in one transaction (all or
nothing); a reading whose (tag_id, ts) is already stored is ignored, so re-sending a
batch is a no-op (within a batch too: the first of two equal keys wins); out-of-order
readings land in place (the table is keyed by (tag_id, ts)); the return value is the
number of readings that were new. Rollups (:mod:`db.rollups`) are updated from the new
readings only, so duplicates never count twice.

``store_arrays(engine, tag_id, ts_ms, value, flag) -> int`` is the same for a batch given
as columns (integer tag ids and epoch milliseconds, float values with NaN for missing,
integer flags), as the ingest service has it: no per-row Python tuples are made and parsed.

Engines: on SQLite the batch runs on the raw DBAPI connection inside ``BEGIN
IMMEDIATE`` (the write lock is taken first, so nothing changes between the insert and
the check for keys already stored). The batch is inserted optimistically with ``ON
CONFLICT DO NOTHING``; only when fewer rows than sent were new is that undone (a
savepoint) and the new rows found by a per-tag key look-up and inserted, so a fresh
batch costs no look-ups and a re-sent one about twice its insert. Readings and rollup
deltas are bound up to :data:`ROWS_PER_STATEMENT` rows per statement (multi-row VALUES).
On PostgreSQL one ``INSERT … SELECT FROM unnest(…) ON CONFLICT DO NOTHING RETURNING``
stores the batch and returns exactly the new rows, which keeps concurrent writers correct
too.

Read queries
------------
``readings_frame(engine, tag_id, start, end)`` → DataFrame indexed by ``ts`` (tz-aware
UTC), columns ``value`` (float, NaN when missing) and ``flag`` (int), for
``start <= ts < end``.
``latest_values(engine, tag_ids=None)`` → DataFrame indexed by ``tag_id`` (a snapshot,
one row per tag that has readings), columns ``ts`` (tz-aware UTC), ``value``, ``flag``.

>>> from db.engine import make_engine
>>> from db.migrate import upgrade
>>> from db.catalog import add_site, add_fishway, add_tag
>>> eng = make_engine("sqlite://"); _ = upgrade(eng)
>>> fw = add_fishway(eng, add_site(eng, "Demo site"), "Left bank")
>>> tag = add_tag(eng, fw, "LB.pool1.level", "water_level", "m", poll_period_s=10)
>>> store_batch(eng, [(tag, 1767225600, 101.25, 1), (tag, 1767225610, 101.26, 1)])
2
>>> store_batch(eng, [(tag, 1767225600, 101.25, 1)])   # the same again: nothing new
0
>>> latest_values(eng).loc[tag, "value"]
np.float64(101.26)
>>> eng.dispose()
"""
from __future__ import annotations

import functools
import math
from collections.abc import Iterable, Sequence
from datetime import datetime
from itertools import chain
from operator import itemgetter

import numpy as np
import pandas as pd
import sqlalchemy as sa
from sqlalchemy.engine import Engine

from db.arrays import fetch_array
from db.engine import is_postgresql, is_sqlite
from db.models import QARTOD_FLAGS
from db.partitions import ensure_partitions_ms
from db.rollups import ROLLUP_COLUMNS, rollup_deltas, upsert_rollups_sql
from db.types import ms_to_index, to_epoch_ms

__all__ = ["latest_values", "readings_frame", "store_arrays", "store_batch", "validate_batch"]

FLAG_MISSING = 9


def _bad(index: int, why: str) -> ValueError:
    return ValueError(f"reading #{index} of the batch: {why}; nothing was stored")


def validate_batch(rows: Sequence[Sequence]) -> tuple[np.ndarray, ...]:
    """Check and convert a batch to arrays ``(tag_id, ts_ms, value, flag)``.

    The arrays are sorted by (tag_id, ts_ms) and free of repeated keys (the first
    occurrence is kept). Raises ValueError naming the first bad row.

    >>> tag, ts, value, flag = validate_batch([(3, 20.0, 1.5, 1), (3, 10.0, None, 9)])
    >>> ts.tolist(), value.tolist()
    ([10000, 20000], [nan, 1.5])
    >>> validate_batch([(3, 10.0, 1.5, float("nan"))])  # doctest: +IGNORE_EXCEPTION_DETAIL
    Traceback (most recent call last):
    ValueError: reading #0 of the batch: flag nan is not a QARTOD flag
    """
    rows = rows if isinstance(rows, list | tuple) else list(rows)
    if len(rows) == 0:
        empty = np.empty(0, dtype="int64")
        return empty, empty, np.empty(0, dtype="float64"), empty
    try:
        lengths = set(map(len, rows))
    except TypeError:
        lengths = set()
    if lengths != {4}:
        raise ValueError("each reading must be a (tag_id, ts, value, flag) tuple; "
                         "nothing was stored")
    # Column lists via itemgetter: zip(*rows) makes one iterator per row, and the
    # garbage collector passes that this sets off made it 15 times slower (measured).
    tags, stamps, values, flags = (list(map(itemgetter(i), rows)) for i in range(4))
    tag = np.asarray(tags)
    if tag.dtype.kind not in "iu":
        i = next(i for i, t in enumerate(tags) if isinstance(t, bool) or not isinstance(
            t, int | np.integer))
        raise _bad(i, f"tag id {tags[i]!r} is not an integer")
    ts_ms = _stamps_to_ms(stamps)
    try:
        value = np.asarray(values, dtype="float64")
    except (TypeError, ValueError):
        i = next(i for i, v in enumerate(values) if not _is_floatish(v))
        raise _bad(i, f"value {values[i]!r} is not a number") from None
    flag_raw = np.asarray(flags)
    if flag_raw.dtype.kind not in "iu":
        for i, f in enumerate(flags):
            if isinstance(f, bool) or not isinstance(f, int | np.integer):
                raise _bad(i, f"flag {f!r} is not a QARTOD flag")
    return _checked_sorted(tag, ts_ms, value, flag_raw.astype("int64"))


def _checked_sorted(tag: np.ndarray, ts_ms: np.ndarray, value: np.ndarray,
                    flag: np.ndarray) -> tuple[np.ndarray, ...]:
    """The array checks of :func:`validate_batch`; the arrays sorted by key, deduplicated."""
    bad = ~np.isin(flag, QARTOD_FLAGS)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise _bad(i, f"flag {int(flag[i])!r} is not a QARTOD flag {QARTOD_FLAGS}")
    if np.isinf(value).any():
        raise _bad(int(np.flatnonzero(np.isinf(value))[0]), "infinite value")
    missing = np.isnan(value) & (flag != FLAG_MISSING)
    if missing.any():
        i = int(np.flatnonzero(missing)[0])
        raise _bad(i, f"missing value with flag {int(flag[i])} (a missing value carries flag 9)")
    order = np.lexsort((np.arange(tag.size), ts_ms, tag))
    tag, ts_ms, value, flag = tag[order].astype("int64"), ts_ms[order], value[order], flag[order]
    keep = np.concatenate(([True], (tag[1:] != tag[:-1]) | (ts_ms[1:] != ts_ms[:-1])))
    if not keep.all():
        tag, ts_ms, value, flag = tag[keep], ts_ms[keep], value[keep], flag[keep]
    return tag, ts_ms, value, flag


def _is_floatish(v) -> bool:
    try:
        float(v if v is not None else "nan")
    except (TypeError, ValueError):
        return False
    return True


def _stamps_to_ms(stamps: Sequence) -> np.ndarray:
    arr = np.asarray(stamps)
    if arr.dtype.kind in "iu":
        return arr.astype("int64") * 1000
    if arr.dtype.kind == "f":
        if not np.isfinite(arr).all():
            raise _bad(int(np.flatnonzero(~np.isfinite(arr))[0]), "non-finite time")
        return np.rint(arr * 1000.0).astype("int64")
    if arr.dtype.kind == "M":
        raise _bad(0, "numpy datetime64 times are naive: give aware datetimes or epoch seconds")
    out = np.empty(len(stamps), dtype="int64")
    for i, when in enumerate(stamps):
        try:
            out[i] = to_epoch_ms(when)
        except (TypeError, ValueError) as exc:
            raise _bad(i, str(exc)) from None
    return out


def _check_tags(cur, tag_ids: np.ndarray, placeholder: str) -> None:
    wanted = sorted(set(tag_ids.tolist()))
    marks = ", ".join([placeholder] * len(wanted))
    cur.execute(f"SELECT id FROM tags WHERE id IN ({marks})", wanted)
    found = {row[0] for row in cur.fetchall()}
    unknown = [t for t in wanted if t not in found]
    if unknown:
        raise ValueError(f"unknown tag id(s) {unknown}; nothing was stored")


def _new_mask_sqlite(cur, tag: np.ndarray, ts_ms: np.ndarray) -> np.ndarray:
    """True where (tag, ts) is not stored yet (arrays sorted by tag, then ts)."""
    new = np.ones(tag.size, dtype=bool)
    bounds = np.flatnonzero(np.concatenate(([True], tag[1:] != tag[:-1], [True])))
    for lo, hi in zip(bounds[:-1].tolist(), bounds[1:].tolist(), strict=True):
        cur.execute("SELECT ts_ms FROM readings WHERE tag_id = ? AND ts_ms BETWEEN ? AND ?",
                    (int(tag[lo]), int(ts_ms[lo]), int(ts_ms[hi - 1])))
        stored = cur.fetchall()
        if stored:
            new[lo:hi] = ~np.isin(ts_ms[lo:hi], np.fromiter((r[0] for r in stored), "int64"))
    return new


def _values_for_db(value: np.ndarray) -> list:
    out = value.tolist()
    if np.isnan(value).any():
        out = [None if math.isnan(v) else v for v in out]
    return out


ROWS_PER_STATEMENT = 100
"""Rows bound per SQLite statement (fewer for wide rows: at most 999 parameters, the limit of
SQLite before 3.32): multi-row VALUES cut the per-statement cost of ``executemany`` (the
readings insert measured about three times faster than one row per statement)."""


def _interleave(columns: list[list]) -> list:
    """Columns of equal length as one flat row-major parameter list."""
    width = len(columns)
    flat: list = [None] * (width * len(columns[0]))
    for i, col in enumerate(columns):
        flat[i::width] = col
    return flat


def _executemany_multirow(cur, sql_of, flat: list, width: int) -> int:
    """Run ``sql_of(k)`` (a statement taking ``k`` rows of ``width`` parameters) over the rows
    of the flat row-major parameter list, :data:`ROWS_PER_STATEMENT` rows a statement; return
    the rows changed."""
    n = len(flat) // width
    if n == 0:
        return 0
    k = min(ROWS_PER_STATEMENT, 999 // width)
    full, step = n // k, width * k
    changed = 0
    if full:
        cur.executemany(sql_of(k), (flat[i * step:(i + 1) * step] for i in range(full)))
        changed += cur.rowcount
    if n > full * k:
        cur.execute(sql_of(n - full * k), flat[full * step:])
        changed += cur.rowcount
    return changed


@functools.lru_cache(maxsize=64)
def _readings_insert_sql(rows: int) -> str:
    return ("INSERT INTO readings (tag_id, ts_ms, value, flag) VALUES "
            + ", ".join(["(?, ?, ?, ?)"] * rows) + " ON CONFLICT DO NOTHING")


def _insert_rows(cur, tag, ts_ms, value, flag) -> int:
    return _executemany_multirow(cur, _readings_insert_sql, _interleave([
        tag.tolist(), ts_ms.tolist(), _values_for_db(value), flag.tolist()]), 4)


def _upsert_rollups_sqlite(cur, tag, ts_ms, value, flag) -> None:
    flat = list(chain.from_iterable(rollup_deltas(tag, ts_ms, value, flag)))
    _executemany_multirow(cur, _rollup_sql_sqlite, flat, len(ROLLUP_COLUMNS))


@functools.lru_cache(maxsize=64)
def _rollup_sql_sqlite(rows: int) -> str:
    return upsert_rollups_sql("sqlite", rows)


def _store_sqlite(engine: Engine, tag, ts_ms, value, flag) -> int:
    """Optimistic: insert everything; only when some keys were already stored, undo
    that (savepoint) and insert just the new ones, found by a per-tag key look-up."""
    raw = engine.raw_connection()
    try:
        con = raw.driver_connection
        cur = con.cursor()
        cur.execute("BEGIN IMMEDIATE")
        try:
            _check_tags(cur, tag, "?")
            cur.execute("SAVEPOINT fishway_batch")
            if _insert_rows(cur, tag, ts_ms, value, flag) != tag.size:
                cur.execute("ROLLBACK TO fishway_batch")
                new = _new_mask_sqlite(cur, tag, ts_ms)
                tag, ts_ms, value, flag = tag[new], ts_ms[new], value[new], flag[new]
                if _insert_rows(cur, tag, ts_ms, value, flag) != tag.size:
                    raise RuntimeError("readings changed during a locked batch")
            cur.execute("RELEASE fishway_batch")
            if tag.size:
                _upsert_rollups_sqlite(cur, tag, ts_ms, value, flag)
            cur.execute("COMMIT")
        except BaseException:
            if con.in_transaction:
                cur.execute("ROLLBACK")
            raise
        finally:
            cur.close()
    finally:
        raw.close()
    return int(tag.size)


# %b: binary parameters; dumping the arrays as text was most of the client's time.
_PG_INSERT = (
    "INSERT INTO readings (tag_id, ts_ms, value, flag) "
    "SELECT * FROM unnest(%b::integer[], %b::bigint[], %b::double precision[], %b::smallint[]) "
    "ON CONFLICT DO NOTHING RETURNING tag_id, ts_ms, value, flag"
)


def _store_postgresql(engine: Engine, tag, ts_ms, value, flag) -> int:
    ensure_partitions_ms(engine, int(ts_ms.min()), int(ts_ms.max()) + 1)
    raw = engine.raw_connection()
    try:
        con = raw.driver_connection
        try:
            with con.cursor() as cur:
                _check_tags(cur, tag, "%s")
                cur.execute(_PG_INSERT, (tag.tolist(), ts_ms.tolist(), _values_for_db(value),
                                         flag.tolist()))
                stored = cur.fetchall()
                if stored:
                    n_tag, n_ts, n_val, n_flag = (np.asarray(c) for c in zip(*stored, strict=True))
                    n_val = np.asarray(n_val, dtype="float64")  # None → NaN
                    deltas = rollup_deltas(n_tag.astype("int64"), n_ts.astype("int64"), n_val,
                                           n_flag.astype("int64"))
                    if deltas:
                        cur.execute(upsert_rollups_sql("postgresql"),
                                    [list(c) for c in zip(*deltas, strict=True)])
            con.commit()
        except BaseException:
            con.rollback()
            raise
    finally:
        raw.close()
    return len(stored)


def store_batch(engine: Engine, rows: Iterable[Sequence]) -> int:
    """Store a batch of readings atomically, update the rollups; return how many were new.

    See the module docstring for the accepted forms and the guarantees.

    Raises
    ------
    ValueError
        A malformed reading or an unknown tag id (nothing is stored).
    NotImplementedError
        An engine other than SQLite or PostgreSQL.
    """
    tag, ts_ms, value, flag = validate_batch(rows if isinstance(rows, list | tuple)
                                             else list(rows))
    return _store(engine, tag, ts_ms, value, flag)


def store_arrays(engine: Engine, tag_id: np.ndarray, ts_ms: np.ndarray, value: np.ndarray,
                 flag: np.ndarray) -> int:
    """:func:`store_batch` for a batch given as columns: tag ids (int array), times [epoch
    ms] (int array), values (float array, NaN: missing, with flag 9), QARTOD flags (int
    array). Same checks, guarantees and return value; no per-row Python objects are made.

    >>> from db.engine import make_engine
    >>> from db.migrate import upgrade
    >>> from db.catalog import add_site, add_fishway, add_tag
    >>> eng = make_engine("sqlite://"); _ = upgrade(eng)
    >>> tag = add_tag(eng, add_fishway(eng, add_site(eng, "Demo site"), "Left bank"),
    ...               "LB.pool1.level", "water_level", "m", poll_period_s=10)
    >>> store_arrays(eng, np.array([tag, tag]), np.array([1767225600000, 1767225610000]),
    ...              np.array([101.25, np.nan]), np.array([1, 9]))
    2
    >>> eng.dispose()
    """
    tag = np.asarray(tag_id)
    ts = np.asarray(ts_ms)
    if tag.ndim != 1 or tag.shape != ts.shape or tag.shape != np.shape(value) \
            or tag.shape != np.shape(flag):
        raise ValueError("store_arrays needs four 1-D arrays of one length; nothing was stored")
    if tag.size == 0:
        return 0
    if tag.dtype.kind not in "iu" or ts.dtype.kind not in "iu":
        raise ValueError("tag ids and times [epoch ms] must be integer arrays; "
                         "nothing was stored")
    flag_arr = np.asarray(flag)
    if flag_arr.dtype.kind not in "iu":
        raise ValueError("flags must be an integer array; nothing was stored")
    return _store(engine, *_checked_sorted(tag, ts.astype("int64"),
                                           np.asarray(value, dtype="float64"),
                                           flag_arr.astype("int64")))


def _store(engine: Engine, tag, ts_ms, value, flag) -> int:
    if tag.size == 0:
        return 0
    if is_sqlite(engine):
        return _store_sqlite(engine, tag, ts_ms, value, flag)
    if is_postgresql(engine):
        return _store_postgresql(engine, tag, ts_ms, value, flag)
    raise NotImplementedError(f"store_batch supports SQLite and PostgreSQL, "
                              f"not {engine.dialect.name}")


_RANGE_SQL = sa.text("SELECT ts_ms, value, flag FROM readings WHERE tag_id = :tag "
                     "AND ts_ms >= :start AND ts_ms < :end ORDER BY ts_ms")


def readings_frame(engine: Engine, tag_id: int, start: datetime | float,
                   end: datetime | float) -> pd.DataFrame:
    """Raw readings of one tag with ``start <= ts < end`` (index ``ts``, UTC)."""
    start_ms, end_ms = to_epoch_ms(start), to_epoch_ms(end)
    if end_ms <= start_ms:
        raise ValueError("end must be after start")
    with engine.connect() as conn:
        arr = fetch_array(conn, _RANGE_SQL, {"tag": int(tag_id), "start": start_ms,
                                             "end": end_ms}, 3)
    return pd.DataFrame({"value": arr[:, 1], "flag": arr[:, 2].astype("int64")},
                        index=ms_to_index(arr[:, 0].astype("int64")))


_LATEST_SQL = (
    "SELECT r.tag_id, r.ts_ms, r.value, r.flag FROM tags t JOIN readings r "
    "ON r.tag_id = t.id AND r.ts_ms = (SELECT max(m.ts_ms) FROM readings m WHERE m.tag_id = t.id)"
)


def latest_values(engine: Engine, tag_ids: Iterable[int] | None = None) -> pd.DataFrame:
    """Newest stored reading of each tag (index ``tag_id``; columns ts, value, flag)."""
    sql = _LATEST_SQL
    params: dict = {}
    if tag_ids is not None:
        ids = sorted({int(t) for t in tag_ids})
        if not ids:
            return _latest_frame([])
        sql += " WHERE t.id IN :ids"
        params["ids"] = ids
    stmt = sa.text(sql + " ORDER BY r.tag_id")
    if params:
        stmt = stmt.bindparams(sa.bindparam("ids", expanding=True))
    with engine.connect() as conn:
        return _latest_frame(conn.execute(stmt, params).all())


def _latest_frame(rows: list) -> pd.DataFrame:
    tag, ts, value, flag = zip(*rows, strict=True) if rows else ((), (), (), ())
    frame = pd.DataFrame(
        {"ts": ms_to_index(np.asarray(ts, dtype="int64"), name=None),
         "value": np.asarray(value, dtype="float64"), "flag": np.asarray(flag, dtype="int64")},
        index=pd.Index(np.asarray(tag, dtype="int64"), name="tag_id"))
    return frame

"""Rollups of readings at 1 min, 15 min, 1 h and 1 day, maintained per ingested batch.

Each rollup row summarises one tag over one UTC-aligned bucket
``[bucket_ms, bucket_ms + res_s·1000)``:

    n, sum, min (+ its time), max (+ its time), first, last (+ their times), worst flag

Only readings with a value take part (a missing value, flag 9, is not aggregated);
readings of every other flag do, and ``flag_max`` (the largest QARTOD flag in the
bucket) tells whether suspect (3) or failed (4) ones are among them. The mean is
``sum / n``. Day buckets are UTC days.

Incremental maintenance: :func:`db.readings.store_batch` passes only the readings that
were new in the batch (duplicates are filtered first), so merging is associative and a
re-sent batch cannot count twice. Merging a delta into a stored row is

    n ← n + n′,  sum ← sum + sum′,  min ← min(min, min′),  max ← max(max, max′),
    first ← the one of (first, first′) with the earlier time, last likewise (later),

done by one ``INSERT … ON CONFLICT … DO UPDATE`` on SQLite and PostgreSQL alike. Ties
keep the earlier time for min, max and first and the later for last.

Query: :func:`rollups_frame` returns one resolution for a time range as a DataFrame
(index: bucket start, tz-aware UTC; columns ``count, sum, mean, min, min_ts, max, max_ts,
first, first_ts, last, last_ts, flag_max``).
"""
from __future__ import annotations

from datetime import datetime

import numpy as np
import pandas as pd
import sqlalchemy as sa
from sqlalchemy.engine import Engine

from db.types import ms_to_index, to_epoch_ms

__all__ = ["RESOLUTIONS_S", "ROLLUP_COLUMNS", "rollup_delta_columns", "rollup_deltas",
           "rollups_frame", "upsert_rollups_sql"]

#: Rollup resolutions in seconds: 1 min, 15 min, 1 h, 1 day.
RESOLUTIONS_S = (60, 900, 3600, 86400)

#: Column order of the rollup rows produced by :func:`rollup_deltas`.
ROLLUP_COLUMNS = ("tag_id", "res_s", "bucket_ms", "n", "vsum", "vmin", "vmin_ms", "vmax",
                  "vmax_ms", "vfirst", "vfirst_ms", "vlast", "vlast_ms", "flag_max")


def _first_true_per_group(mask: np.ndarray, group: np.ndarray, n_groups: int) -> np.ndarray:
    """Index of the first True of ``mask`` in each group (groups are contiguous)."""
    idx = np.flatnonzero(mask)
    g = group[idx]  # non-decreasing: the first of each run of equal group numbers
    out = idx[np.concatenate(([True], g[1:] != g[:-1]))] if idx.size else idx
    assert out.size == n_groups
    return out


def rollup_delta_columns(tag_id: np.ndarray, ts_ms: np.ndarray, value: np.ndarray,
                         flag: np.ndarray, resolutions_s: tuple[int, ...] = RESOLUTIONS_S
                         ) -> list[list]:
    """The rows of :func:`rollup_deltas` as columns (lists of Python scalars, in
    :data:`ROLLUP_COLUMNS` order), for writers that bind many rows per statement.

    >>> cols = rollup_delta_columns(np.array([7, 7]), np.array([0, 61_000]),
    ...                             np.array([2.0, 5.0]), np.array([1, 3]), (60,))
    >>> cols[2], cols[3]
    ([0, 60000], [1, 1])
    """
    keep = np.isfinite(value)
    if not keep.all():
        tag_id, ts_ms, value, flag = tag_id[keep], ts_ms[keep], value[keep], flag[keep]
    if tag_id.size == 0:
        return [[] for _ in ROLLUP_COLUMNS]
    order = np.lexsort((ts_ms, tag_id))
    tag_id, ts_ms, value, flag = tag_id[order], ts_ms[order], value[order], flag[order]
    parts: list[tuple[np.ndarray, ...]] = []
    for res_s in resolutions_s:
        width = res_s * 1000
        bucket = (ts_ms // width) * width
        starts = np.flatnonzero(np.concatenate((
            [True], (tag_id[1:] != tag_id[:-1]) | (bucket[1:] != bucket[:-1]))))
        ends = np.concatenate((starts[1:], [ts_ms.size])) - 1
        n_groups = starts.size
        group = np.repeat(np.arange(n_groups), np.diff(np.concatenate((starts, [ts_ms.size]))))
        vmin = np.minimum.reduceat(value, starts)
        vmax = np.maximum.reduceat(value, starts)
        imin = _first_true_per_group(value == vmin[group], group, n_groups)
        imax = _first_true_per_group(value == vmax[group], group, n_groups)
        columns = (
            tag_id[starts], np.full(n_groups, res_s), bucket[starts], np.diff(
                np.concatenate((starts, [ts_ms.size]))),
            np.add.reduceat(value, starts), vmin, ts_ms[imin], vmax, ts_ms[imax],
            value[starts], ts_ms[starts], value[ends], ts_ms[ends],
            np.maximum.reduceat(flag, starts),
        )
        parts.append(columns)
    return [np.concatenate([p[i] for p in parts]).tolist() for i in range(len(ROLLUP_COLUMNS))]


def rollup_deltas(tag_id: np.ndarray, ts_ms: np.ndarray, value: np.ndarray,
                  flag: np.ndarray, resolutions_s: tuple[int, ...] = RESOLUTIONS_S) -> list[tuple]:
    """Aggregate a set of new readings into rollup rows, one per (tag, resolution, bucket).

    Parameters
    ----------
    tag_id, ts_ms : int arrays
        Tag ids and epoch milliseconds; (tag, ts) pairs must be unique.
    value : float array
        Values [tag unit]; NaN (missing) readings are left out.
    flag : int array
        QARTOD flags.
    resolutions_s : tuple of int
        Bucket widths [s].

    Returns
    -------
    list of tuple
        Rows in :data:`ROLLUP_COLUMNS` order, as Python scalars.

    Examples
    --------
    >>> rows = rollup_deltas(np.array([7, 7, 7]), np.array([0, 30_000, 61_000]),
    ...                      np.array([2.0, 1.0, 5.0]), np.array([1, 3, 1]), (60,))
    >>> rows[0]
    (7, 60, 0, 2, 3.0, 1.0, 30000, 2.0, 0, 2.0, 0, 1.0, 30000, 3)
    >>> rows[1][:4]
    (7, 60, 60000, 1)
    """
    return list(zip(*rollup_delta_columns(tag_id, ts_ms, value, flag, resolutions_s),
                    strict=True))


_PG_ARRAY_TYPES = ("integer", "integer", "bigint", "integer", "double precision",
                   "double precision", "bigint", "double precision", "bigint", "double precision",
                   "bigint", "double precision", "bigint", "smallint")


def upsert_rollups_sql(dialect: str, rows: int = 1) -> str:
    """The merge statement for rollup delta rows.

    SQLite: ``rows`` rows per execution with ``?`` placeholders (for ``executemany``; the
    rows of one execution must have distinct keys).
    PostgreSQL: all rows in one execution, one binary array parameter per column (``unnest``).
    """
    if dialect == "sqlite":
        least, greatest = "min", "max"
        one = f"({', '.join(['?'] * len(ROLLUP_COLUMNS))})"
        source = "VALUES " + ", ".join([one] * rows)
    else:
        least, greatest = "LEAST", "GREATEST"
        arrays = ", ".join(f"%b::{t}[]" for t in _PG_ARRAY_TYPES)
        source = f"SELECT * FROM unnest({arrays})"
    older_min = ("(excluded.vmin < r.vmin OR "
                 "(excluded.vmin = r.vmin AND excluded.vmin_ms < r.vmin_ms))")
    older_max = ("(excluded.vmax > r.vmax OR "
                 "(excluded.vmax = r.vmax AND excluded.vmax_ms < r.vmax_ms))")
    return (
        f"INSERT INTO rollups AS r ({', '.join(ROLLUP_COLUMNS)}) {source} "
        "ON CONFLICT (tag_id, res_s, bucket_ms) DO UPDATE SET "
        "n = r.n + excluded.n, vsum = r.vsum + excluded.vsum, "
        f"vmin = {least}(r.vmin, excluded.vmin), "
        f"vmin_ms = CASE WHEN {older_min} THEN excluded.vmin_ms ELSE r.vmin_ms END, "
        f"vmax = {greatest}(r.vmax, excluded.vmax), "
        f"vmax_ms = CASE WHEN {older_max} THEN excluded.vmax_ms ELSE r.vmax_ms END, "
        "vfirst = CASE WHEN excluded.vfirst_ms < r.vfirst_ms "
        "THEN excluded.vfirst ELSE r.vfirst END, "
        "vfirst_ms = CASE WHEN excluded.vfirst_ms < r.vfirst_ms "
        "THEN excluded.vfirst_ms ELSE r.vfirst_ms END, "
        "vlast = CASE WHEN excluded.vlast_ms > r.vlast_ms THEN excluded.vlast ELSE r.vlast END, "
        "vlast_ms = CASE WHEN excluded.vlast_ms > r.vlast_ms "
        "THEN excluded.vlast_ms ELSE r.vlast_ms END, "
        f"flag_max = {greatest}(r.flag_max, excluded.flag_max)"
    )


_FRAME_SQL = sa.text(
    "SELECT bucket_ms, n, vsum, vmin, vmin_ms, vmax, vmax_ms, vfirst, vfirst_ms, vlast, "
    "vlast_ms, flag_max FROM rollups WHERE tag_id = :tag AND res_s = :res "
    "AND bucket_ms >= :start AND bucket_ms < :end ORDER BY bucket_ms"
)


def rollups_frame(engine: Engine, tag_id: int, res_s: int, start: datetime | float,
                  end: datetime | float) -> pd.DataFrame:
    """Rollups of one tag at one resolution whose bucket starts in ``[start, end)``.

    Raises ValueError for an unknown resolution or an empty range.
    """
    if res_s not in RESOLUTIONS_S:
        raise ValueError(f"resolution {res_s} s is not one of {RESOLUTIONS_S}")
    start_ms, end_ms = to_epoch_ms(start), to_epoch_ms(end)
    if end_ms <= start_ms:
        raise ValueError("end must be after start")
    with engine.connect() as conn:
        rows = conn.execute(_FRAME_SQL, {"tag": tag_id, "res": res_s, "start": start_ms,
                                         "end": end_ms}).all()
    cols = ["bucket_ms", "count", "sum", "min", "min_ms", "max", "max_ms", "first", "first_ms",
            "last", "last_ms", "flag_max"]
    raw = pd.DataFrame(rows, columns=cols)
    out = pd.DataFrame(index=ms_to_index(raw["bucket_ms"].to_numpy(dtype="int64")))
    out["count"] = raw["count"].to_numpy(dtype="int64")
    out["sum"] = raw["sum"].to_numpy(dtype="float64")
    out["mean"] = out["sum"] / out["count"]
    for name in ("min", "max", "first", "last"):
        out[name] = raw[name].to_numpy(dtype="float64")
        stamps = ms_to_index(raw[f"{name}_ms"].to_numpy(dtype="int64"), name=None)
        out[f"{name}_ts"] = pd.Series(stamps, index=out.index)
    out["flag_max"] = raw["flag_max"].to_numpy(dtype="int64")
    return out

"""Trend query for charts: M4 aggregation over rollups or raw readings.

M4 (Jugel, Jerzak, Hackenbroich & Markl 2014, "M4: A Visualization-Oriented Time Series
Data Aggregation", PVLDB 7(10)) keeps, for every pixel column of a line chart, the
points with the first and last time and the minimum and maximum value: the line drawn
from those at most four points per column is the line drawn from all the data, and
every extreme is kept.

``trend(engine, tag_id, start, end, *, width_px=1500) -> DataFrame``

* the range ``[start, end)`` is cut into ``width_px`` equal columns of width ``w``;
* source: the coarsest rollup resolution ``r`` (1 min, 15 min, 1 h, 1 day) with
  ``r ≤ w``, or raw readings when ``w < 1 min`` (a range shorter than about a day at
  1500 px). A bucket belongs to the column its start falls in, so the M4 columns are
  unions of whole buckets (column edges move by less than one bucket, i.e. less than a
  pixel); the two partial buckets at the ends of the range are taken from raw readings,
  or, where raw readings have been pruned, from the bucket's own points inside the range;
* each bucket offers its first, min, max and last points (with their times); M4 then
  picks per column the first, last, min and max of those (ties: the earliest).

Result: index ``ts`` (tz-aware UTC, ascending, unique), columns ``value`` and ``flag``
(the reading's QARTOD flag on raw data, the worst flag of the point's bucket on
rollups); ``attrs["source"]`` is ``"raw"`` or ``"rollup"`` and ``attrs["res_s"]`` the
rollup resolution (0 for raw). Missing readings (NaN) are left out. At most
``4 · width_px`` rows.

>>> import numpy as np
>>> col = np.array([0, 0, 0, 0, 1, 1])
>>> val = np.array([5.0, 1.0, 9.0, 4.0, 2.0, 2.0])
>>> m4_indices(col, val).tolist()
[0, 1, 2, 3, 4, 5]
>>> m4_indices(np.array([0, 0, 0, 0, 0]), np.array([3.0, 1.0, 2.0, 1.0, 3.0])).tolist()
[0, 1, 4]
"""
from __future__ import annotations

from datetime import datetime

import numpy as np
import pandas as pd
import sqlalchemy as sa
from sqlalchemy.engine import Engine

from db.arrays import fetch_array
from db.rollups import RESOLUTIONS_S
from db.types import ms_to_index, to_epoch_ms

__all__ = ["choose_resolution_s", "m4_indices", "trend"]


def _first_per_group(mask: np.ndarray, group: np.ndarray) -> np.ndarray:
    idx = np.flatnonzero(mask)
    _, first = np.unique(group[idx], return_index=True)
    return idx[first]


def m4_indices(column: np.ndarray, value: np.ndarray) -> np.ndarray:
    """Indices of the M4 points: per column the first, last, min and max.

    Parameters
    ----------
    column : int array
        Pixel column of each point, non-decreasing (points sorted by column, then time).
    value : float array
        Finite values.

    Returns
    -------
    int array
        Sorted unique indices, at most 4 per column; the earliest point wins ties.
    """
    n = value.size
    if n == 0:
        return np.empty(0, dtype="int64")
    if column.size != n:
        raise ValueError("column and value differ in length")
    starts = np.flatnonzero(np.concatenate(([True], column[1:] != column[:-1])))
    ends = np.concatenate((starts[1:], [n])) - 1
    group = np.repeat(np.arange(starts.size), np.diff(np.concatenate((starts, [n]))))
    vmin = np.minimum.reduceat(value, starts)
    vmax = np.maximum.reduceat(value, starts)
    imin = _first_per_group(value == vmin[group], group)
    imax = _first_per_group(value == vmax[group], group)
    return np.unique(np.concatenate((starts, ends, imin, imax)))


def choose_resolution_s(span_ms: int, width_px: int) -> int:
    """Coarsest rollup resolution [s] not wider than a pixel column; 0 means raw.

    >>> choose_resolution_s(365 * 86_400_000, 1500)   # a year: 1 h rollups
    3600
    >>> choose_resolution_s(6 * 3_600_000, 1500)      # six hours: raw readings
    0
    """
    column_ms = span_ms / width_px
    fitting = [r for r in RESOLUTIONS_S if r * 1000 <= column_ms]
    return max(fitting) if fitting else 0


_RAW_SQL = sa.text("SELECT ts_ms, value, flag FROM readings WHERE tag_id = :tag "
                   "AND ts_ms >= :lo AND ts_ms < :hi AND value IS NOT NULL ORDER BY ts_ms")
_ROLLUP_SQL = sa.text(
    "SELECT vfirst_ms, vfirst, vmin_ms, vmin, vmax_ms, vmax, vlast_ms, vlast, "
    "flag_max FROM rollups WHERE tag_id = :tag AND res_s = :res AND bucket_ms >= :lo "
    "AND bucket_ms < :hi ORDER BY bucket_ms"
)

def _raw(conn: sa.Connection, tag_id: int, lo: int, hi: int) -> tuple[np.ndarray, ...]:
    arr = fetch_array(conn, _RAW_SQL, {"tag": tag_id, "lo": lo, "hi": hi}, 3)
    return arr[:, 0].astype("int64"), arr[:, 1], arr[:, 2].astype("int64")


def _bucket_points(arr: np.ndarray) -> tuple[np.ndarray, ...]:
    """Rollup rows → (ts, value, flag) of their first, min, max and last points."""
    ts = arr[:, [0, 2, 4, 6]].astype("int64").ravel()
    value = arr[:, [1, 3, 5, 7]].ravel()
    flag = np.repeat(arr[:, 8].astype("int64"), 4)
    return ts, value, flag


def _bucket_m4(arr: np.ndarray, column: np.ndarray) -> tuple[np.ndarray, ...]:
    """M4 over whole buckets (rows in bucket order, ``column`` non-decreasing).

    Per column: the first bucket's first point, the last bucket's last point, and the
    min and max points of the earliest buckets holding the column's min and max.
    """
    n = column.size
    if n == 0:
        empty = np.empty(0, dtype="int64")
        return empty, empty, np.empty(0, dtype="float64"), empty
    starts = np.flatnonzero(np.concatenate(([True], column[1:] != column[:-1])))
    ends = np.concatenate((starts[1:], [n])) - 1
    group = np.repeat(np.arange(starts.size), np.diff(np.concatenate((starts, [n]))))
    vmin, vmax = arr[:, 3], arr[:, 5]
    imin = _first_per_group(vmin == np.minimum.reduceat(vmin, starts)[group], group)
    imax = _first_per_group(vmax == np.maximum.reduceat(vmax, starts)[group], group)
    pick_rows = np.concatenate((starts, imin, imax, ends))
    ts_col = np.repeat([0, 2, 4, 6], starts.size)
    ts = arr[pick_rows, ts_col].astype("int64")
    value = arr[pick_rows, ts_col + 1]
    return np.tile(column[starts], 4), ts, value, arr[pick_rows, 8].astype("int64")


def _candidates(conn, tag_id: int, res_s: int, start_ms: int, end_ms: int, *,
                width_px: int) -> tuple[np.ndarray, ...]:
    """(column, ts, value, flag) of a superset of the M4 points of the range."""
    span = end_ms - start_ms
    width = res_s * 1000
    inner_lo = -(-start_ms // width) * width if res_s else end_ms
    inner_hi = (end_ms // width) * width if res_s else end_ms
    if inner_hi <= inner_lo:  # raw readings only
        ts, value, flag = _raw(conn, tag_id, start_ms, end_ms)
        return (ts - start_ms) * width_px // span, ts, value, flag
    rows = fetch_array(conn, _ROLLUP_SQL, {"tag": tag_id, "res": res_s, "lo": inner_lo,
                                           "hi": inner_hi}, 9)
    bucket = (rows[:, 0].astype("int64") // width) * width
    parts = [_bucket_m4(rows, (bucket - start_ms) * width_px // span)]
    for lo, hi in ((start_ms, inner_lo), (inner_hi, end_ms)):
        if hi <= lo:
            continue
        ts, value, flag = _raw(conn, tag_id, lo, hi)
        if ts.size == 0:  # raw pruned (or no data): the edge bucket's own points in range
            edge_bucket = (lo // width) * width
            rows = fetch_array(conn, _ROLLUP_SQL, {"tag": tag_id, "res": res_s,
                                                   "lo": edge_bucket, "hi": edge_bucket + 1}, 9)
            ts, value, flag = _bucket_points(rows)
            keep = (ts >= lo) & (ts < hi)
            ts, value, flag = ts[keep], value[keep], flag[keep]
        parts.append(((ts - start_ms) * width_px // span, ts, value, flag))
    return tuple(np.concatenate(p) for p in zip(*parts, strict=True))


def trend(engine: Engine, tag_id: int, start: datetime | float, end: datetime | float, *,
          width_px: int = 1500) -> pd.DataFrame:
    """M4-reduced trend of one tag over ``[start, end)`` for a chart ``width_px`` wide.

    See the module docstring for the method (Jugel et al. 2014) and the result.

    Raises
    ------
    ValueError
        ``end`` not after ``start``, or ``width_px`` < 1.
    """
    if int(width_px) != width_px or width_px < 1:
        raise ValueError("width_px must be a positive integer")
    start_ms, end_ms = to_epoch_ms(start), to_epoch_ms(end)
    span = end_ms - start_ms
    if span <= 0:
        raise ValueError("end must be after start")
    res_s = choose_resolution_s(span, width_px)
    with engine.connect() as conn:
        column, ts, value, flag = _candidates(conn, int(tag_id), res_s, start_ms, end_ms,
                                              width_px=int(width_px))
    column = np.minimum(column, width_px - 1)
    order = np.lexsort((ts, column))
    column, ts, value, flag = column[order], ts[order], value[order], flag[order]
    pick = m4_indices(column, value)
    ts, value, flag = ts[pick], value[pick], flag[pick]
    ts, first = np.unique(ts, return_index=True)  # a point can be both first and min, etc.
    frame = pd.DataFrame({"value": value[first], "flag": flag[first]}, index=ms_to_index(ts))
    frame.attrs.update({"source": "raw" if res_s == 0 else "rollup", "res_s": res_s,
                        "width_px": int(width_px)})
    return frame

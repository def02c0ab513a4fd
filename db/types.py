"""Time handling shared by the storage layer.

Two representations of an instant are used:

* **epoch milliseconds** (``int``, milliseconds since 1970-01-01T00:00:00Z) in the hot
  tables ``readings`` and ``rollups`` (compact integer keys, identical on every engine);
* **tz-aware datetimes** (column type :class:`UTCDateTime`) everywhere else. Naive
  datetimes are refused, aware ones are converted to UTC before storage and come back
  as UTC-aware datetimes on SQLite as well as PostgreSQL.

Query results are pandas DataFrames indexed by a tz-aware UTC ``DatetimeIndex`` named
``ts`` (:func:`ms_to_index`), of millisecond unit (``datetime64[ms, UTC]``): ``.asi8``
gives epoch milliseconds; use ``.as_unit("ns")`` where nanoseconds are expected.

>>> from datetime import datetime, timezone
>>> to_epoch_ms(datetime(2026, 1, 1, tzinfo=timezone.utc))
1767225600000
>>> to_epoch_ms(1767225600.25)
1767225600250
>>> ms_to_index([1767225600250])[0]
Timestamp('2026-01-01 00:00:00.250000+0000', tz='UTC')
"""
from __future__ import annotations

import math
from datetime import UTC, datetime
from numbers import Real

import numpy as np
import pandas as pd
import sqlalchemy as sa
from sqlalchemy.types import TypeDecorator

__all__ = ["UTCDateTime", "ms_to_datetime", "ms_to_index", "to_epoch_ms", "to_utc"]


def to_utc(when: datetime) -> datetime:
    """Return ``when`` converted to UTC; refuse naive datetimes.

    >>> to_utc(datetime(2026, 1, 1)) # doctest: +IGNORE_EXCEPTION_DETAIL
    Traceback (most recent call last):
    ValueError: naive datetime
    """
    if not isinstance(when, datetime):
        raise TypeError(f"expected a datetime, got {type(when).__name__}")
    if when.tzinfo is None or when.tzinfo.utcoffset(when) is None:
        raise ValueError(f"naive datetime {when!r}: give a time-zone-aware datetime")
    return when.astimezone(UTC)


def to_epoch_ms(when: datetime | Real) -> int:
    """Instant as integer epoch milliseconds.

    ``when`` is a tz-aware datetime (pandas Timestamps included) or epoch seconds
    (int or float, rounded to the nearest millisecond). Naive datetimes, booleans and
    non-finite numbers raise ValueError.
    """
    if isinstance(when, bool):
        raise ValueError("a boolean is not a time")
    if isinstance(when, pd.Timestamp):
        if when.tz is None:
            raise ValueError(f"naive timestamp {when!r}: give a time-zone-aware one")
        return int(when.as_unit("ns").value // 1_000_000)
    if isinstance(when, datetime):
        utc = to_utc(when)
        delta = utc - datetime(1970, 1, 1, tzinfo=UTC)
        return (delta.days * 86_400 + delta.seconds) * 1000 + delta.microseconds // 1000
    if isinstance(when, Real | np.integer | np.floating):
        seconds = float(when)
        if not math.isfinite(seconds):
            raise ValueError(f"non-finite epoch seconds {when!r}")
        return round(seconds * 1000.0)
    raise TypeError(f"cannot read a time from {type(when).__name__}")


def ms_to_datetime(ms: int) -> datetime:
    """Epoch milliseconds to a UTC-aware datetime.

    >>> ms_to_datetime(1767225600000).isoformat()
    '2026-01-01T00:00:00+00:00'
    """
    return datetime.fromtimestamp(int(ms) / 1000.0, tz=UTC)


def ms_to_index(ms, name: str = "ts") -> pd.DatetimeIndex:
    """Epoch milliseconds (array-like) to a tz-aware UTC DatetimeIndex (ms unit)."""
    arr = np.asarray(ms, dtype="int64")
    return pd.DatetimeIndex(arr.astype("datetime64[ms]"), name=name).tz_localize("UTC")


class UTCDateTime(TypeDecorator):
    """DateTime column that only takes aware datetimes and always returns UTC-aware ones.

    Stored as ``TIMESTAMP WITH TIME ZONE`` on PostgreSQL and as ISO text in UTC on
    SQLite (SQLAlchemy's DateTime), so text ordering equals time ordering there.
    """

    impl = sa.DateTime(timezone=True)
    cache_ok = True

    def process_bind_param(self, value, dialect):
        if value is None:
            return None
        utc = to_utc(value)
        return utc.replace(tzinfo=None) if dialect.name == "sqlite" else utc

    def process_result_value(self, value, dialect):
        if value is None:
            return None
        if value.tzinfo is None:
            return value.replace(tzinfo=UTC)
        return value.astimezone(UTC)

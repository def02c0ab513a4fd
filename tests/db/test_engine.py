"""Engine factory (db/engine.py) and time types (db/types.py).

References: SQLite's documented PRAGMA values (journal_mode "wal", synchronous NORMAL = 1,
foreign_keys 1; sqlite.org pragma documentation, from memory); UTC conversions against
Python's ``datetime``/``zoneinfo`` and pandas.
"""
from __future__ import annotations

from datetime import UTC, datetime, timedelta, timezone
from zoneinfo import ZoneInfo

import numpy as np
import pandas as pd
import pytest
import sqlalchemy as sa

from db.engine import DATA_DIR_ENV, DATABASE_URL_ENV, default_sqlite_path, make_engine
from db.types import UTCDateTime, ms_to_datetime, ms_to_index, to_epoch_ms


def test_default_sqlite_under_var_of_cwd(tmp_path, monkeypatch):
    monkeypatch.delenv(DATABASE_URL_ENV, raising=False)
    monkeypatch.delenv(DATA_DIR_ENV, raising=False)
    monkeypatch.chdir(tmp_path)
    assert default_sqlite_path() == tmp_path / "var" / "fishway.sqlite"
    engine = make_engine()
    try:
        with engine.connect() as conn:
            conn.exec_driver_sql("SELECT 1")
        assert (tmp_path / "var" / "fishway.sqlite").exists()
    finally:
        engine.dispose()


def test_data_dir_and_url_from_environment(tmp_path, monkeypatch):
    monkeypatch.delenv(DATABASE_URL_ENV, raising=False)
    monkeypatch.setenv(DATA_DIR_ENV, str(tmp_path / "data"))
    assert make_engine().url.database == str(tmp_path / "data" / "fishway.sqlite")
    monkeypatch.setenv(DATABASE_URL_ENV, f"sqlite:///{tmp_path / 'other.sqlite'}")
    assert make_engine().url.database == str(tmp_path / "other.sqlite")
    # an explicit argument wins over the environment
    assert make_engine(sqlite_path=tmp_path / "x.sqlite").url.database.endswith("x.sqlite")
    with pytest.raises(ValueError):
        make_engine("sqlite://", sqlite_path=tmp_path / "y.sqlite")


def test_sqlite_pragmas(tmp_path):
    engine = make_engine(sqlite_path=tmp_path / "p.sqlite")
    try:
        with engine.connect() as conn:
            def pragma(name):
                return conn.exec_driver_sql(f"PRAGMA {name}").scalar()
            assert pragma("journal_mode") == "wal"
            assert pragma("synchronous") == 1     # NORMAL
            assert pragma("foreign_keys") == 1
            assert pragma("busy_timeout") == 30000
    finally:
        engine.dispose()


@pytest.mark.parametrize("when, expected_ms", [
    (datetime(1970, 1, 1, tzinfo=UTC), 0),
    (datetime(2026, 3, 29, 3, 30, tzinfo=ZoneInfo("Etc/GMT-2")), None),
    (datetime(2026, 1, 1, 12, 0, 0, 999_999, tzinfo=timezone(timedelta(hours=-5))), None),
    (pd.Timestamp("2026-07-01T00:00:00.123456789Z"), 1782864000123),
    (1782864000.1234, 1782864000123),
    (1782864000, 1782864000000),
])
def test_to_epoch_ms(when, expected_ms):
    if expected_ms is None:  # reference: Python's own conversion, truncated to ms
        expected_ms = int(when.timestamp() * 1_000_000) // 1000
    assert to_epoch_ms(when) == expected_ms


@pytest.mark.parametrize("bad", [datetime(2026, 1, 1), pd.Timestamp("2026-01-01"), True,
                                 float("nan")])
def test_to_epoch_ms_refuses(bad):
    with pytest.raises(ValueError):
        to_epoch_ms(bad)


def test_ms_index_and_datetime_agree_with_pandas():
    ms = np.array([0, 1782864000123])
    idx = ms_to_index(ms)
    assert idx.equals(pd.to_datetime(ms, unit="ms", utc=True).rename("ts"))
    assert ms_to_datetime(1782864000123) == idx[1].to_pydatetime()


def test_utc_datetime_column_round_trip():
    engine = make_engine("sqlite://")
    meta = sa.MetaData()
    table = sa.Table("t", meta, sa.Column("id", sa.Integer, primary_key=True),
                     sa.Column("at", UTCDateTime()))
    meta.create_all(engine)
    local = datetime(2026, 10, 25, 1, 30, tzinfo=ZoneInfo("Etc/GMT+5"))
    with engine.begin() as conn:
        conn.execute(table.insert().values(at=local))
        got = conn.execute(sa.select(table.c.at)).scalar()
        with pytest.raises(sa.exc.StatementError, match="naive"):
            conn.execute(table.insert().values(at=datetime(2026, 1, 1)))
    assert got == local and got.tzinfo == UTC
    engine.dispose()

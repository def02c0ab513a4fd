"""Storage benchmark (a script, not a test): prints ratios measured in one run.

1. Ingest: ``db.readings.store_batch`` (raw readings + all four rollup levels, one
   transaction per batch) versus a bare ``sqlite3`` ``executemany`` of the same rows
   into the same (migrated) readings table, batches of 10 000, WAL, synchronous=NORMAL.
   Target ratio ≥ 0.5. Two feeds: 50 tags polled every second (realistic for levels and
   gate positions) and 1000 tags polled every minute (each reading opens its own 1-min
   bucket: the worst case for rollup upkeep).
2. Trend: one year of 1-minute data for one tag (525 600 readings); ``db.trends.trend``
   with ``width_px=1500`` versus the naive way (all raw rows into pandas, resampled to
   1500 buckets with min and max). Target ≥ 50× faster.
3. Bytes per reading on disk after VACUUM (whole file, and the readings table alone).
4. For information, PostgreSQL ingest (when the machine has it): store_batch versus a
   bare COPY of the same rows into the same table.

Run: ``.venv/bin/python tests/bench/bench_storage.py`` (under a minute).
"""
from __future__ import annotations

import os
import sqlite3
import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd
import sqlalchemy as sa

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from db.catalog import add_fishway, add_site, add_tag
from db.engine import make_engine
from db.migrate import upgrade
from db.partitions import ensure_partitions_ms
from db.readings import readings_frame, store_batch
from db.trends import trend

T0 = 1_767_225_600  # 2026-01-01T00:00:00Z, epoch seconds
BATCH = 10_000


def fresh_db(folder: Path, name: str, n_tags: int):
    path = folder / f"{name}.sqlite"
    engine = make_engine(sqlite_path=path)
    upgrade(engine)
    fw = add_fishway(engine, add_site(engine, f"Bench site {name}"), "Bench fishway")
    tags = [add_tag(engine, fw, f"bench.{name}.{i}", "water_level", "m", poll_period_s=1)
            for i in range(n_tags)]
    return path, engine, tags


def feed_rows(tags: list[int], n_rows: int, period_s: int, seed: int) -> list[tuple]:
    rng = np.random.default_rng(seed)
    values = np.round(100.0 + rng.normal(0.0, 0.05, n_rows).cumsum() * 0.01, 4).tolist()
    n_tags = len(tags)
    return [(tags[i % n_tags], T0 + (i // n_tags) * period_s, values[i], 1)
            for i in range(n_rows)]


def bare_executemany(path: Path, rows_ms: list[tuple]) -> float:
    con = sqlite3.connect(path, isolation_level=None)
    con.execute("PRAGMA journal_mode=WAL")
    con.execute("PRAGMA synchronous=NORMAL")
    t = time.perf_counter()
    for i in range(0, len(rows_ms), BATCH):
        con.execute("BEGIN")
        con.executemany("INSERT INTO readings (tag_id, ts_ms, value, flag) VALUES (?, ?, ?, ?)",
                        rows_ms[i:i + BATCH])
        con.execute("COMMIT")
    elapsed = time.perf_counter() - t
    con.close()
    return elapsed


def through_store_batch(engine, rows: list[tuple]) -> float:
    t = time.perf_counter()
    for i in range(0, len(rows), BATCH):
        store_batch(engine, rows[i:i + BATCH])
    return time.perf_counter() - t


def bench_ingest(folder: Path, label: str, n_tags: int, period_s: int, n_rows: int) -> None:
    _, engine, tags = fresh_db(folder, f"ingest_{label}", n_tags)
    rows = feed_rows(tags, n_rows, period_s, seed=1)
    bare_path, bare_engine, bare_tags = fresh_db(folder, f"bare_{label}", n_tags)
    bare_engine.dispose()
    assert bare_tags == tags
    rows_ms = [(t, s * 1000, v, f) for t, s, v, f in rows]
    bare_s = bare_executemany(bare_path, rows_ms)
    ours_s = through_store_batch(engine, rows)
    engine.dispose()
    print(f"ingest, {label}: bare executemany {n_rows / bare_s / 1e6:.2f} M rows/s, "
          f"store_batch (raw + rollups) {n_rows / ours_s / 1e6:.2f} M rows/s, "
          f"ratio {bare_s / ours_s:.2f} (target >= 0.5)")


def bench_trend(folder: Path) -> Path:
    path, engine, (tag,) = fresh_db(folder, "year", 1)
    n = 525_600
    rows = feed_rows([tag], n, 60, seed=2)
    t = time.perf_counter()
    through_store_batch(engine, rows)
    print(f"one year of 1-min data: {n} readings stored in {time.perf_counter() - t:.1f} s")
    start, end = T0, T0 + n * 60

    def ours():
        return trend(engine, tag, start, end, width_px=1500)

    bucket_ms = (end - start) * 1000 // 1500

    def naive_read_sql():
        with engine.connect() as conn:
            frame = pd.read_sql_query(sa.text(
                "SELECT ts_ms, value FROM readings WHERE tag_id = :t AND ts_ms >= :a "
                "AND ts_ms < :b ORDER BY ts_ms"), conn,
                params={"t": tag, "a": start * 1000, "b": end * 1000})
        frame.index = pd.to_datetime(frame.pop("ts_ms"), unit="ms", utc=True)
        return frame["value"].resample(f"{bucket_ms}ms").agg(["min", "max"])

    def naive_fast_read():
        frame = readings_frame(engine, tag, start, end)
        return frame["value"].resample(f"{bucket_ms}ms").agg(["min", "max"])

    ours(), naive_read_sql(), naive_fast_read()  # warm caches
    t_ours = statistics.median(_timed(ours) for _ in range(9))
    t_sql = statistics.median(_timed(naive_read_sql) for _ in range(3))
    t_fast = statistics.median(_timed(naive_fast_read) for _ in range(3))
    points = len(ours())
    print(f"trend over a year, 1500 px: trend() {t_ours * 1e3:.1f} ms ({points} points, "
          "from 1 h rollups)")
    print(f"  naive, pandas.read_sql_query + resample: {t_sql * 1e3:.0f} ms, "
          f"speed-up {t_sql / t_ours:.0f}x (target >= 50x)")
    print(f"  naive, db.readings.readings_frame + resample: {t_fast * 1e3:.0f} ms, "
          f"speed-up {t_fast / t_ours:.0f}x (target >= 50x)")
    engine.dispose()
    return path


def _timed(fn) -> float:
    t = time.perf_counter()
    fn()
    return time.perf_counter() - t


def bench_bytes(path: Path) -> None:
    con = sqlite3.connect(path)
    con.execute("VACUUM")
    n = con.execute("SELECT count(*) FROM readings").fetchone()[0]
    table = con.execute("SELECT sum(pgsize) FROM dbstat WHERE name = 'readings'").fetchone()[0]
    rollups = con.execute("SELECT count(*) FROM rollups").fetchone()[0]
    con.close()
    size = os.path.getsize(path)
    print(f"bytes per reading after VACUUM: {size / n:.1f} for the whole file "
          f"({n} readings, {rollups} rollup rows), {table / n:.1f} for the readings table")


def bench_postgresql() -> None:
    """Ingest on PostgreSQL (information; the target is set for SQLite)."""
    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
    from pg_server import PgServer, PgUnavailableError

    try:
        server = PgServer.start()
    except PgUnavailableError as exc:
        print(f"PostgreSQL ingest: skipped ({exc})")
        return
    try:
        engine = make_engine(server.url())
        upgrade(engine)
        fw = add_fishway(engine, add_site(engine, "Bench site pg"), "Bench fishway")
        tags = [add_tag(engine, fw, f"bench.pg.{i}", "water_level", "m", poll_period_s=1)
                for i in range(50)]
        rows = feed_rows(tags, 200_000, 1, seed=3)
        ours_s = through_store_batch(engine, rows)
        shifted = [(t, (s + 10_000_000) * 1000, v, f) for t, s, v, f in rows]
        ensure_partitions_ms(engine, shifted[0][1], shifted[-1][1] + 1)
        raw = engine.raw_connection()
        t = time.perf_counter()
        with raw.driver_connection.cursor() as cur:
            for i in range(0, len(shifted), BATCH):
                with cur.copy("COPY readings (tag_id, ts_ms, value, flag) FROM STDIN") as copy:
                    for row in shifted[i:i + BATCH]:
                        copy.write_row(row)
                raw.driver_connection.commit()
        copy_s = time.perf_counter() - t
        raw.close()
        engine.dispose()
        n = len(rows)
        print(f"PostgreSQL ingest, 50 tags at 1 s: bare COPY {n / copy_s / 1e6:.2f} M rows/s, "
              f"store_batch (raw + rollups) {n / ours_s / 1e6:.2f} M rows/s, "
              f"ratio {copy_s / ours_s:.2f}")
    finally:
        server.stop()


def main() -> None:
    with tempfile.TemporaryDirectory(prefix="fishway-bench-") as tmp:
        folder = Path(tmp)
        bench_ingest(folder, "50 tags at 1 s", 50, 1, 600_000)
        bench_ingest(folder, "1000 tags at 1 min", 1000, 60, 600_000)
        year = bench_trend(folder)
        bench_bytes(year)
        bench_bytes(folder / "ingest_50 tags at 1 s.sqlite")
    bench_postgresql()


if __name__ == "__main__":
    main()

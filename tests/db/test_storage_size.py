"""Bytes per reading on disk in SQLite (target: about 24, asserted <= 26).

Measured, not published: 200 000 readings of 10 tags at 1 s through ``store_batch``,
then VACUUM; the figure is printed (run pytest with ``-s`` to see it). The readings
table alone comes from SQLite's ``dbstat`` virtual table; the whole file includes the
rollups and the empty catalogue.
"""
from __future__ import annotations

import os
import sqlite3

from db.catalog import add_fishway, add_site, add_tag
from db.engine import make_engine
from db.migrate import upgrade
from db.readings import store_batch

N = 200_000
T0_S = 1_767_225_600


def test_bytes_per_reading_sqlite(tmp_path):
    path = tmp_path / "size.sqlite"
    engine = make_engine(sqlite_path=path)
    upgrade(engine)
    fw = add_fishway(engine, add_site(engine, "Size site"), "Size fishway")
    tags = [add_tag(engine, fw, f"S.{i}", "water_level", "m", poll_period_s=1) for i in range(10)]
    values = [round(100.0 + 0.001 * ((i * 7919) % 5000), 3) for i in range(N)]
    rows = [(tags[i % 10], T0_S + i // 10, values[i], 1) for i in range(N)]
    for i in range(0, N, 20_000):
        store_batch(engine, rows[i:i + 20_000])
    engine.dispose()
    con = sqlite3.connect(path)
    con.execute("VACUUM")
    assert con.execute("SELECT count(*) FROM readings").fetchone()[0] == N
    table_bytes = con.execute(
        "SELECT sum(pgsize) FROM dbstat WHERE name = 'readings'").fetchone()[0]
    con.close()
    per_reading_table = table_bytes / N
    per_reading_file = os.path.getsize(path) / N
    print(f"\nSQLite bytes per reading: {per_reading_table:.1f} (readings table), "
          f"{per_reading_file:.1f} (whole file with rollups)")
    assert per_reading_table <= 24.0
    assert per_reading_file <= 26.0

"""Ingest benchmark (a script, not a test): prints rates and ratios measured in one run.

The whole ingest path, :meth:`db.ingest.service.IngestService.ingest`: FeedReading objects in
(parsed into per-tag arrays), live QARTOD QC in trailing windows (:mod:`db.ingest.live_qc`),
:func:`db.readings.store_batch` (raw readings and the four rollup levels, one transaction per
batch) — versus a bare ``sqlite3`` ``executemany`` of the same rows (read back from the
ingested file) into the same migrated readings table of a fresh file, with the same batches,
WAL, synchronous=NORMAL. Target: the whole path at least half the bare rate.

Data: one day of the demo site (35 tags, 10 s polls) from the simulated plant
(``simulator.history.generate_history``, generated before timing), in two shapes:

1. bulk: batches of 300 time stamps × 35 tags (10 500 readings, a backfill or a seeding);
2. live: one poll per batch (35 readings), each its own transaction in both paths (for
   information: per-transaction costs dominate there).

Also printed for information: ``store_batch`` alone on the same rows (the storage's share).

Run: ``.venv/bin/python tests/bench/bench_ingest.py`` (about a minute).
"""
from __future__ import annotations

import sqlite3
import sys
import tempfile
import time
from datetime import UTC, datetime, timedelta
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from db.engine import make_engine
from db.feeds.base import Feed
from db.ingest.service import IngestService
from db.migrate import upgrade
from db.readings import store_batch
from db.site_sync import sync_site
from ops_logic.site import load_site
from simulator.history import generate_history
from simulator.plant import Plant
from simulator.scenario import Scenario

START = datetime(2026, 6, 1, tzinfo=UTC)
STAMPS_PER_BULK = 300


class _Idle(Feed):
    id = "plant"

    def read(self, tags, now):
        return []


def readings_of_a_day(site) -> list[list]:
    """One batch per time stamp: the plant's readings of every tag (a poll each)."""
    plant = Plant(site, start=START, scenario=Scenario(random_forebay_drops_per_day=0.0))
    flat = [r for b in generate_history(plant, plant.tags, START,
                                        START + timedelta(days=1) - timedelta(seconds=10),
                                        10.0, batch_s=86400.0) for r in b]
    by_ts: dict = {}
    for r in flat:
        by_ts.setdefault(r.ts, []).append(r)
    return [by_ts[ts] for ts in sorted(by_ts)]


def fresh(folder: Path, name: str, site):
    engine = make_engine(sqlite_path=folder / f"{name}.sqlite")
    upgrade(engine)
    sync_site(engine, site)
    return engine, folder / f"{name}.sqlite"


def whole_path(folder: Path, name: str, site, batches: list[list]) -> tuple[float, Path]:
    engine, path = fresh(folder, name, site)
    service = IngestService(site, engine, {"plant": _Idle()})
    service.start_up(START)
    t = time.perf_counter()
    for batch in batches:
        service.ingest(batch, now=batch[-1].ts)
    elapsed = time.perf_counter() - t
    engine.dispose()
    return elapsed, path


def stored_rows(path: Path, batches: list[list]) -> list[list[tuple]]:
    """The rows the whole path stored, cut into the same batches (by time stamp)."""
    con = sqlite3.connect(path)
    rows = con.execute("SELECT tag_id, ts_ms, value, flag FROM readings ORDER BY ts_ms, "
                       "tag_id").fetchall()
    con.close()
    out, i = [], 0
    for batch in batches:
        out.append(rows[i:i + len(batch)])
        i += len(batch)
    assert i == len(rows)
    return out


def bare(path: Path, row_batches: list[list[tuple]]) -> float:
    con = sqlite3.connect(path, isolation_level=None)
    con.execute("PRAGMA journal_mode=WAL")
    con.execute("PRAGMA synchronous=NORMAL")
    t = time.perf_counter()
    for rows in row_batches:
        con.execute("BEGIN")
        con.executemany("INSERT INTO readings (tag_id, ts_ms, value, flag) VALUES (?, ?, ?, ?)",
                        rows)
        con.execute("COMMIT")
    elapsed = time.perf_counter() - t
    con.close()
    return elapsed


def store_only(folder: Path, name: str, site, row_batches: list[list[tuple]]) -> float:
    engine, _ = fresh(folder, name, site)
    batches = [[(t, ms / 1000.0, v, f) for t, ms, v, f in rows] for rows in row_batches]
    t = time.perf_counter()
    for rows in batches:
        store_batch(engine, rows)
    elapsed = time.perf_counter() - t
    engine.dispose()
    return elapsed


def main() -> None:
    site = load_site(None)
    polls = readings_of_a_day(site)
    n = sum(len(p) for p in polls)
    bulk = [[r for p in polls[i:i + STAMPS_PER_BULK] for r in p]
            for i in range(0, len(polls), STAMPS_PER_BULK)]
    print(f"ingest benchmark: {n:,} readings (one day of {len(polls[0])} tags at 10 s)")
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        for shape, batches in (("bulk (10 500 readings a batch)", bulk),
                               ("live (one 35-reading poll a batch)", polls)):
            ours, path = whole_path(folder, f"ours-{len(batches)}", site, batches)
            row_batches = stored_rows(path, batches)
            engine, bare_path = fresh(folder, f"bare-{len(batches)}", site)
            engine.dispose()
            theirs = bare(bare_path, row_batches)
            store = store_only(folder, f"store-{len(batches)}", site, row_batches)
            print(f"\n{shape}, {len(batches):,} batches")
            print(f"  whole ingest path   {n / ours:>12,.0f} rows/s")
            print(f"  store_batch alone   {n / store:>12,.0f} rows/s")
            print(f"  bare executemany    {n / theirs:>12,.0f} rows/s")
            print(f"  ratio whole / bare  {theirs / ours:12.2f}   (target >= 0.5"
                  + (")" if shape.startswith("bulk") else ", bulk only)"))
            print(f"  ratio store / bare  {theirs / store:12.2f}")


if __name__ == "__main__":
    main()

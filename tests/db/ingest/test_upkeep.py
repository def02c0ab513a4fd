"""Upkeep jobs, the alarm hook, the CSV feed's commit and the APScheduler wiring of the ingest.

References: SQLite's ``PRAGMA integrity_check`` for the backups; the retention cut-off is
calendar arithmetic (``now - keep_raw_days``, checked with pandas); PostgreSQL's catalogue
(``db.partitions.existing_partitions``) for the partitions; the rest checks the documented
contracts of db/ingest/service.py (no published values).
"""
from __future__ import annotations

import sqlite3
import threading
import time
from datetime import UTC, datetime, timedelta

import pandas as pd
import pytest

from db.engine import is_postgresql, make_engine
from db.feed_health import feed_health_frame
from db.feeds.csvdrop import CsvDropFeed
from db.feeds.registry import build_feeds
from db.ingest.schedule import ScaledClock, SimulatedClock, build_scheduler, run_simulated
from db.ingest.service import IngestService
from db.ingest.upkeep import backup_sqlite
from db.migrate import upgrade
from db.partitions import existing_partitions
from db.readings import readings_frame, store_batch
from db.rollups import rollups_frame
from db.site_sync import sync_site
from simulator.feed import SimulatedFeed
from simulator.plant import Plant
from simulator.scenario import Scenario

from .conftest import START, west_site

QUIET = Scenario(random_forebay_drops_per_day=0.0)


def simulated_service(engine, site, *, clock=None, **kwargs):
    plant = Plant(site, start=START, scenario=QUIET, profile_interval_s=300.0)
    feeds = build_feeds(site, simulated_factory=lambda cfg, s: SimulatedFeed(plant, cfg.id))
    return IngestService(site, engine, feeds, clock=clock, tag_ids=sync_site(engine, site),
                         **kwargs)


def test_backups_keep_the_last_n_and_pass_the_integrity_check(tmp_path):
    eng = make_engine(sqlite_path=tmp_path / "fishway.sqlite")
    upgrade(eng)
    site = west_site()
    ids = sync_site(eng, site)
    stop = threading.Event()
    t0 = int(START.timestamp())

    def writer():  # the ingest goes on writing while the backups run
        k = 0
        while not stop.is_set():
            store_batch(eng, [(i, t0 + k, float(k), 1) for i in ids.values()])
            k += 1

    thread = threading.Thread(target=writer)
    thread.start()
    try:
        made = [backup_sqlite(eng, START + timedelta(days=d), keep=3) for d in range(5)]
    finally:
        stop.set()
        thread.join()
    folder = tmp_path / "backups"
    assert sorted(p.name for p in folder.iterdir()) == [
        "fishway-20260603.sqlite", "fishway-20260604.sqlite", "fishway-20260605.sqlite"]
    assert made[-1] == folder / "fishway-20260605.sqlite"
    con = sqlite3.connect(made[-1])
    try:
        assert con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        # a consistent snapshot: every stored time stamp with all its tags
        per_ts = con.execute("SELECT count(*) FROM readings GROUP BY ts_ms").fetchall()
        assert per_ts and all(c == len(ids) for (c,) in per_ts)
    finally:
        con.close()
    eng.dispose()


def test_backup_is_for_sqlite_only(db_engine, tmp_path):
    site = west_site()
    service = simulated_service(db_engine, site, backup_dir=tmp_path)
    made = service.backup_once(START)
    assert (made is None) == is_postgresql(db_engine)


def test_prune_and_partitions(db_engine):
    site = west_site(keep_raw_days=30)
    service = simulated_service(db_engine, site)
    tag = service.tag_ids["west.forebay_level"]
    now = START + timedelta(days=60)
    old, new = START + timedelta(days=10), START + timedelta(days=45)
    store_batch(db_engine, [(tag, old, 77.0, 1), (tag, new, 77.1, 1)])
    report = service.prune_once(now)
    assert report.cutoff == pd.Timestamp(now) - pd.Timedelta(days=30)  # reference: pandas
    raw = readings_frame(db_engine, tag, START, now)
    assert raw.index.tolist() == [pd.Timestamp(new)]
    days = rollups_frame(db_engine, tag, 86400, START, now)
    assert days["count"].sum() == 2  # rollups are kept
    made = service.partitions_once(now)
    if is_postgresql(db_engine):
        have = existing_partitions(db_engine)
        ahead = now + timedelta(days=62)
        assert (ahead.year, ahead.month) in have and made
    else:
        assert made == []


def test_keep_raw_days_below_one_is_refused(db_engine):
    with pytest.raises(ValueError, match="at least 1 day"):
        simulated_service(db_engine, west_site(keep_raw_days=0.5))


def test_evaluators_get_the_cycle_and_a_failing_one_is_loud(db_engine):
    site = west_site(poll_seconds=60.0, recommend_seconds=300.0)
    contexts = []

    def broken(now, ctx):
        raise RuntimeError("rule table missing")

    clock = SimulatedClock(START)
    service = simulated_service(db_engine, site, clock=clock,
                                evaluators=[lambda now, ctx: contexts.append(ctx), broken])
    run_simulated(service, clock, START + timedelta(minutes=10))
    polls = [c for c in contexts if c.kind == "poll"]
    recs = [c for c in contexts if c.kind == "recommend"]
    assert len(polls) == 11 and len(recs) == 3
    last = polls[-1]
    assert set(last.readings) == set(service.tag_ids) and last.poll.stored == 15
    assert last.feeds["plant"].ok and last.feeds["plant"].lag_s == 0.0
    assert "west" in recs[-1].recommendations and recs[-1].recommend[0].recommendation_id
    health = feed_health_frame(db_engine).loc["evaluator:broken"]
    assert health["last_error"] == "RuntimeError: rule table missing"
    assert service.totals["stored"] == 11 * 15  # the ingest went on


def test_csv_drop_files_are_committed_after_storing(db_engine, tmp_path):
    site = west_site(feeds=[{"id": "logger", "type": "csv", "folder": str(tmp_path)}])
    feed = CsvDropFeed("logger", tmp_path, settle_s=0.0)
    service = IngestService(site, db_engine, {"logger": feed},
                            tag_ids=sync_site(db_engine, site))
    (tmp_path / "a.csv").write_text("time,tag,value\n2026-06-01T00:00:00Z,west.do,9.1\n"
                                    "2026-06-01T00:00:10Z,west.do,9.2\n")
    report = service.poll_once(datetime(2026, 6, 1, 0, 0, 20, tzinfo=UTC))
    assert report.stored == 2 and not report.errors
    assert [p.name for p in (tmp_path / "done").iterdir()] == ["a.csv"]
    assert service.poll_once(datetime(2026, 6, 1, 0, 0, 30, tzinfo=UTC)).stored == 0


def test_apscheduler_runs_the_jobs_faster_than_real_time(db_engine):
    site = west_site(poll_seconds=10.0, recommend_seconds=60.0)
    clock = ScaledClock(START, speed=100.0)  # a 10 s poll every 0.1 s, a recommendation per 0.6 s
    service = simulated_service(db_engine, site, clock=clock)
    scheduler = build_scheduler(service, speed=100.0)
    scheduler.start()
    try:
        deadline = time.monotonic() + 20.0
        while service.totals["recommendations"] < 2 and time.monotonic() < deadline:
            time.sleep(0.1)
    finally:
        scheduler.shutdown(wait=True)
    assert service.totals["recommendations"] >= 2
    assert service.totals["stored"] >= 6 * 15 and service.totals["stored"] % 15 == 0
    names = sorted(feed_health_frame(db_engine).index)
    assert names == ["plant", "recommender:west"]

"""Outage, backfill and restart through IngestService and the simulator's in-process feed
(SQLite and PostgreSQL).

The reference for "no gap, no duplicate" is the plant's own record: ``SimulatedFeed.history``
re-samples what the plant measured, outage included, on each tag's poll grid. The flags after
a restart are checked against ``ops_logic.qc.run_qc`` over the whole stored series (the live
QC must not lose its context when the service restarts).
"""
from __future__ import annotations

from dataclasses import replace
from datetime import timedelta

import numpy as np
import pandas as pd

from db.feed_health import feed_health_frame
from db.feeds.registry import build_feeds
from db.ingest.schedule import SimulatedClock, run_simulated
from db.ingest.service import IngestService
from db.readings import readings_frame
from db.site_sync import sync_site
from ops_logic.qc import run_qc
from simulator.feed import SimulatedFeed
from simulator.plant import Plant
from simulator.scenario import Scenario

from .conftest import START, west_site

QUIET = Scenario(random_forebay_drops_per_day=0.0)


def service_for(engine, site, plant, clock):
    feeds = build_feeds(site, simulated_factory=lambda cfg, s: SimulatedFeed(plant, cfg.id))
    return IngestService(site, engine, feeds, clock=clock, tag_ids=sync_site(engine, site))


def stored(engine, service, name, start, end) -> pd.DataFrame:
    return readings_frame(engine, service.tag_ids[name], start, end)


def test_outage_then_backfill_leaves_no_gap_and_no_duplicate(db_engine):
    site = west_site(poll_seconds=10.0, recommend_seconds=60.0)
    plant = Plant(site, start=START, scenario=QUIET)
    cut, back = START + timedelta(minutes=10), START + timedelta(minutes=15)
    plant.inject_fault("*", "outage", cut, back)
    clock = SimulatedClock(START)
    service = service_for(db_engine, site, plant, clock)
    during = {}

    def after(job, now, result):
        if now == cut + timedelta(minutes=2) and job.name.startswith("poll"):
            during["health"] = feed_health_frame(db_engine).loc["plant"]
            during["state"] = service.states["plant"].consecutive_errors

    end = START + timedelta(minutes=25)
    run_simulated(service, clock, end, after=after)
    # while the link is down the feed's health shows it (db/feed_health.py semantics)
    h = during["health"]
    assert h["last_success_at"] == cut - timedelta(seconds=10)
    assert h["last_error_at"] == cut + timedelta(minutes=2) > h["last_success_at"]
    assert "13 consecutive errors" in h["last_error"] and during["state"] == 13
    assert "communications outage" in h["last_error"]
    after_h = feed_health_frame(db_engine).loc["plant"]
    assert after_h["last_success_at"] == end > after_h["last_error_at"]
    assert service.states["plant"].consecutive_errors == 0
    # every tag: one reading per 10 s grid point from start to end, outage included, each
    # once, with the values the plant recorded
    grid = pd.date_range(START, end, freq="10s", tz="UTC")
    record = SimulatedFeed(plant).history(service.tags, START, end)
    for tag in service.tags:
        frame = stored(db_engine, service, tag.name, START, end + timedelta(seconds=1))
        assert frame.index.equals(grid.as_unit("ms").rename("ts")), tag.name
        theirs = pd.Series({r.ts: r.value for r in record if r.tag == tag.name})
        np.testing.assert_allclose(frame["value"].to_numpy(), theirs.sort_index().to_numpy(),
                                   rtol=0, atol=0)
    assert service.states["plant"].backfilled >= 30 * len(service.tags)
    with db_engine.connect() as conn:
        total = conn.exec_driver_sql("SELECT count(*) FROM readings").scalar()
    assert total == len(grid) * len(service.tags)


def test_restart_keeps_context_and_backfills(db_engine):
    site = west_site(poll_seconds=60.0, recommend_seconds=600.0)
    plant = Plant(site, start=START, scenario=QUIET, profile_interval_s=300.0)
    stuck = "west.P10.level"  # held from 0:10 to 3:00: flat-line suspect from 1:10 on
    plant.inject_fault(stuck, "stuck", START + timedelta(minutes=10), START + timedelta(hours=3))
    clock = SimulatedClock(START)
    first = service_for(db_engine, site, plant, clock)
    run_simulated(first, clock, START + timedelta(minutes=50))
    first.close()
    # the service is down for 10 minutes, then a new process starts on the same database
    clock = SimulatedClock(START + timedelta(hours=1))
    second = service_for(db_engine, site, plant, clock)
    report = second.poll_once(clock())
    assert report.backfilled >= 10 * len(second.tags) and not report.errors
    run_simulated(second, clock, START + timedelta(hours=2))
    frame = stored(db_engine, second, stuck, START, START + timedelta(hours=2, seconds=1))
    grid = pd.date_range(START, START + timedelta(hours=2), freq="60s", tz="UTC")
    assert frame.index.equals(grid.as_unit("ms").rename("ts"))
    th = replace(second.qc.thresholds(stuck), max_age_s=None)
    whole = run_qc(frame.index, frame["value"].to_numpy(), th, tz=site.site.time_zone)
    np.testing.assert_array_equal(frame["flag"].to_numpy(), whole)
    flat = frame.loc[START + timedelta(minutes=70):, "flag"]
    assert (flat == 3).all() and len(flat) == 51  # suspect across the restart

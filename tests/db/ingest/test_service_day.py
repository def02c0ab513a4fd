"""A simulated day through IngestService with a simulated clock (SQLite and PostgreSQL).

The plant is the simulator's (west ladder of the demo site, quiet scenario with its operator, a
profile solve every 5 min); its day of readings on the 60 s grid is computed once
(``simulator.history.generate_history``) and handed out poll by poll; the recommender runs
every 600 s. Checks are counts that follow from the schedule and the rollup definition
(db/rollups.py: one row per tag and bucket, n = readings in the bucket), the job calendar, and
that a spike injected on the forebay gauge is stored FAILed (QARTOD spike test, ops_logic.qc)
and never reaches a stored recommendation.
"""
from __future__ import annotations

import functools
from datetime import timedelta

import numpy as np
import pandas as pd
import pytest

from db.feed_health import feed_health_frame
from db.feeds.base import Feed, FeedReading
from db.feeds.registry import build_feeds
from db.history import recommendations_frame
from db.ingest.schedule import SimulatedClock, run_simulated
from db.ingest.service import IngestService
from db.readings import readings_frame
from db.rollups import rollups_frame
from db.site_sync import sync_site
from simulator.history import generate_history
from simulator.plant import Plant
from simulator.scenario import Scenario

from .conftest import START, west_site

SPIKE_AT = START + timedelta(hours=9)  # a recommender cycle (multiple of 600 s) too
SPIKE_M = 0.6  # over the 0.5 m spike FAIL threshold of ops_logic.qc's water-level defaults


class ReplayFeed(Feed):
    """The plant's readings on the 60 s grid, computed once (vectorised) and handed out at
    each poll; the plant samples any instant the same way live or in history."""

    supports_history = True

    def __init__(self, readings: list[FeedReading]):
        self.id = "plant"
        self.by_ts: dict = {}
        for r in readings:
            self.by_ts.setdefault(r.ts, []).append(r)

    def read(self, tags, now):
        names = {t.name for t in tags}
        return [r for r in self.by_ts.get(now, []) if r.tag in names]

    def history(self, tags, start, end):
        names = {t.name for t in tags}
        return [r for ts, rs in sorted(self.by_ts.items()) if start <= ts <= end
                for r in rs if r.tag in names]


@functools.cache
def plant_day() -> tuple[Plant, list[FeedReading]]:
    site = west_site()
    # a profile solve every 5 min of plant time (the default is 1 min) keeps the day quick
    plant = Plant(site, start=START, profile_interval_s=300.0,
                  scenario=Scenario(operator=True, random_forebay_drops_per_day=0.0))
    plant.inject_fault("west.forebay_level", "spike", SPIKE_AT,
                       SPIKE_AT + timedelta(seconds=60), magnitude=SPIKE_M)
    readings = [r for batch in generate_history(plant, plant.tags, START,
                                                START + timedelta(days=1), 60.0,
                                                batch_s=86400.0, align=True) for r in batch]
    return plant, readings


def run_day(db_engine, tmp_path):
    site = west_site()
    plant, readings = plant_day()
    feeds = build_feeds(site, simulated_factory=lambda cfg, s: ReplayFeed(readings))
    tag_ids = sync_site(db_engine, site)
    clock = SimulatedClock(START)
    seen = []
    service = IngestService(site, db_engine, feeds, clock=clock, tag_ids=tag_ids,
                            evaluators=[lambda now, ctx: seen.append((now, ctx.kind))],
                            backup_dir=tmp_path / "backups")
    runs = run_simulated(service, clock, START + timedelta(days=1))
    return site, service, tag_ids, runs, seen, plant


def check_a_day_of_jobs_on_schedule(day):
    _site, service, _, runs, seen, _ = day
    # 86400 s / 60 s + the poll at the start; recommendations likewise every 600 s; the daily
    # jobs once (their local time of day falls once in any 24 h)
    assert runs["poll:plant:60s"] == 1441
    assert runs["recommend"] == 145
    assert runs["backup"] == runs["prune"] == runs["partitions"] == 1
    assert seen.count((START, "poll")) == 1 and len(seen) == 1441 + 145
    assert service.totals["stored"] == 1441 * 15 and service.totals["received"] == 1441 * 15


def check_rollups_hold_every_reading(day):
    _site, service, tag_ids, *_ = day
    eng = service.engine
    for name in ("west.forebay_level", "west.P39.level_b", "west.G2.opening"):
        hours = rollups_frame(eng, tag_ids[name], 3600, START, START + timedelta(days=1))
        assert len(hours) == 24 and (hours["count"] == 60).all()
        days = rollups_frame(eng, tag_ids[name], 86400, START, START + timedelta(days=2))
        assert days["count"].tolist() == [1440, 1]
        raw = readings_frame(eng, tag_ids[name], START, START + timedelta(hours=1))
        # the rollup mean is the mean of the raw readings (db/rollups.py: mean = sum / n)
        assert hours["mean"].iloc[0] == pytest.approx(raw["value"].mean(), rel=1e-12)


def check_feed_health_after_a_day(day):
    _site, service, *_ = day
    health = feed_health_frame(service.engine)
    end = START + timedelta(days=1)
    plant = health.loc["plant"]
    assert plant["last_success_at"] == end and plant["updated_at"] == end
    assert plant["readings_per_min"] == pytest.approx(15.0)  # 15 tags every 60 s
    assert plant["lag_s"] == 0.0 and pd.isna(plant["last_error"])
    rec = health.loc["recommender:west"]
    assert rec["last_success_at"] == end and rec["lag_s"] == pytest.approx(60.0)


def check_recommendations_stored_with_their_inputs(day):
    _site, service, tag_ids, *_ = day
    recs = recommendations_frame(service.engine, service.fishway_db_ids["west"], START,
                                 START + timedelta(days=1, seconds=1))
    # the first cycle (at the start) has no settled reading yet: 144 of 145 are stored
    assert len(recs) == 144 and recs.index[0] == START + timedelta(seconds=600)
    first = recs.iloc[0]
    assert first["inputs"]["settings_source"] == {"entrance_E1_crest_m": "tag",
                                                  "aux_G2_opening_pct": "tag"}
    forebay = readings_frame(service.engine, tag_ids["west.forebay_level"], START,
                             START + timedelta(days=1))
    for ts, row in recs.iterrows():
        inputs = row["inputs"]
        used = forebay.loc[inputs["forebay_ts"]]
        assert used["value"] == inputs["forebay_m"] and used["flag"] == inputs["forebay_flag"] == 1
        assert (ts - used.name).total_seconds() <= 360.0  # six 60 s polls
        assert set(row["settings"]) == {"entrance_E1_crest_m", "aux_G2_opening_pct"}


def check_spike_is_failed_and_never_used(day):
    _site, service, tag_ids, _, _, plant = day
    forebay = readings_frame(service.engine, tag_ids["west.forebay_level"], START,
                             START + timedelta(days=1))
    spike = forebay.loc[SPIKE_AT]
    truth = plant.sample_arrays(["west.forebay_level"], np.array([9 * 3600.0]),
                                measured=False)["west.forebay_level"].values[0]
    assert spike["value"] == pytest.approx(truth + SPIKE_M, abs=0.02)
    assert spike["flag"] == 4
    others = forebay.drop(SPIKE_AT)
    assert (others["flag"] < 4).all()
    recs = recommendations_frame(service.engine, service.fishway_db_ids["west"], START,
                                 START + timedelta(days=1, seconds=1))
    around = recs.loc[SPIKE_AT - timedelta(minutes=10): SPIKE_AT + timedelta(minutes=20)]
    assert len(around) == 4  # a recommendation at every cycle, the spike's included
    assert all(row["inputs"]["forebay_ts"] != SPIKE_AT.isoformat() for _, row in recs.iterrows())
    for _, row in around.iterrows():  # the forebay moves a few cm in 20 min, the spike 0.6 m
        assert abs(row["inputs"]["forebay_m"] - spike["value"]) > 0.5
    at_spike = recs.loc[SPIKE_AT, "inputs"]
    # the reading before the spike is suspect (a spike's neighbour), the one before passed
    assert at_spike["forebay_ts"] == (SPIKE_AT - timedelta(seconds=120)).isoformat()


def test_simulated_day(db_engine, tmp_path):
    # one day run per backend, every check on it
    day = run_day(db_engine, tmp_path)
    check_a_day_of_jobs_on_schedule(day)
    check_rollups_hold_every_reading(day)
    check_feed_health_after_a_day(day)
    check_recommendations_stored_with_their_inputs(day)
    check_spike_is_failed_and_never_used(day)
    if db_engine.dialect.name == "sqlite":  # the nightly online backup (01:30 site time)
        assert [p.name for p in (tmp_path / "backups").iterdir()] == ["fishway-20260601.sqlite"]

"""The ingest's recommender cycle (db/ingest/recommending.py, IngestService.recommend_once) on
SQLite and PostgreSQL: the fishway in force, the forebay the ladder sees, a fishway not in
operation.

The plant is a still one: the demo's west ladder (tests/db/ingest/conftest.py) at its own
recommendation for the middle of its forebay and tailwater ranges, read every 60 s by a feed
that hands out fixed values (a millimetre of alternation keeps the flat-line test quiet).
Expected values are hand calculations: a supervisor's band is the band stored with the
criteria; the ladder sees the forebay less the trash-rack head loss (the rule of
ops_logic.ladder.exit_forebay_m: z_exit = z_forebay − max(Δh, 0)), so a 0.10 m loss lowers the
forebay the recommender uses by exactly 0.10 m.
"""
from __future__ import annotations

import math
from datetime import timedelta

import pytest

from db.alarm.evaluator import AlarmEvaluator
from db.alarm.inputs import feed_status
from db.alarms import alarms_frame
from db.dashboard_queries import latest_recommendation, record_setting_change
from db.feed_health import feed_health_frame
from db.feeds.base import Feed, FeedReading
from db.feeds.registry import build_feeds
from db.ingest.service import IngestService
from db.site_sync import sync_site
from simulator.steady import steady_readings

from .conftest import START, west_site

OVERRIDDEN_MAX_M = 0.33  # between the band's aim (1.0 ft) and the site file's max (1.2 ft)


class StillFeed(Feed):
    """Fixed values (``values``, changeable between polls), stamped with the poll's time."""

    def __init__(self, values: dict[str, float]):
        super().__init__()
        self.id = "plant"
        self.values = dict(values)
        self.polls = 0

    def read(self, tags, now):
        self.polls += 1
        wiggle = 0.001 * (self.polls % 2)
        return [FeedReading(t.name, now, self.values[t.name] + (
            wiggle if t.quantity == "water_level" else 0.0)) for t in tags
            if t.name in self.values and not math.isnan(self.values[t.name])]


@pytest.fixture
def plant(db_engine):
    site = west_site()
    tag_ids = sync_site(db_engine, site)
    feed = StillFeed(steady_readings(site))
    service = IngestService(site, db_engine, build_feeds(site, simulated_factory=lambda c, s:
                                                         feed), tag_ids=tag_ids)
    return service, feed


def cycle(service: IngestService, minutes: int):
    """Polls at START … START + ``minutes`` min (each reading settles at the next), then one
    recommender cycle at the last poll."""
    for m in range(minutes + 1):
        service.poll_once(START + timedelta(minutes=m))
    return service.recommend_once(START + timedelta(minutes=minutes))[0]


def supervisor_sets(service: IngestService, key: str, minutes: int, **values) -> None:
    record_setting_change(service.engine, service.fishway_db_ids["west"], key,
                          START + timedelta(minutes=minutes), action="set", set_by="sup1",
                          **values)


def test_an_overridden_band_is_the_band_of_the_next_recommendation(plant):
    service, _ = plant
    site_max = service.site.fishways[0].targets.pool_head_drop.max
    first = cycle(service, 2)
    stored = latest_recommendation(service.engine, service.fishway_db_ids["west"])
    drops = {k: c for k, c in stored["predicted"]["criteria"].items()
             if k.startswith("head_drop:")}
    assert first.recommendation_id == stored["id"]
    assert len(drops) == service.ladders["west"].n_pools - 1  # one per baffle
    assert all(c["max"] == pytest.approx(site_max, abs=1e-12) for c in drops.values())

    supervisor_sets(service, "targets.pool_head_drop.max", 3, old_value=site_max,
                    new_value=OVERRIDDEN_MAX_M)
    second = cycle(service, 5)
    stored = latest_recommendation(service.engine, service.fishway_db_ids["west"])
    assert second.recommendation_id == stored["id"] != first.recommendation_id
    drops = {k: c for k, c in stored["predicted"]["criteria"].items()
             if k.startswith("head_drop:")}
    assert all(c["max"] == pytest.approx(OVERRIDDEN_MAX_M, abs=1e-12) for c in drops.values())
    # each drop is judged against the band in force: met exactly when at or below 0.33 m
    assert all(c["ok"] is (c["value"] <= OVERRIDDEN_MAX_M + 1e-9) for c in drops.values())
    assert service.ladders["west"].fishway.targets.pool_head_drop.max == OVERRIDDEN_MAX_M


@pytest.mark.parametrize(("loss_m", "lowered_m", "source"), [
    (0.10, 0.10, "forebay − trash-rack head loss"),  # hand calculation: exactly the loss
    (-0.02, 0.0, "forebay − trash-rack head loss"),  # a negative reading counts as none
    (2.5, 0.0, "forebay (trash-rack head loss 2.5 m refused: above the 1 m taken as real"),
    (math.nan, 0.0, "forebay (no usable trash-rack head loss)"),  # no reading at all
])
def test_the_ladder_sees_the_forebay_less_the_trash_rack_loss(plant, loss_m, lowered_m,
                                                               source):
    service, feed = plant
    feed.values["west.trash_rack_dp"] = loss_m
    o = cycle(service, 2)
    inputs = o.inputs
    assert inputs["ladder_forebay_m"] == pytest.approx(inputs["forebay_m"] - lowered_m,
                                                       abs=1e-12)
    assert inputs["ladder_forebay_from"].startswith(source)
    assert o.recommendation.forebay_m == pytest.approx(inputs["ladder_forebay_m"], abs=1e-12)
    assert o.recommendation.profile.forebay_m == pytest.approx(inputs["ladder_forebay_m"],
                                                               abs=1e-12)
    stored = latest_recommendation(service.engine, service.fishway_db_ids["west"])
    assert stored["inputs"]["ladder_forebay_from"] == inputs["ladder_forebay_from"]
    assert ("trash_rack_dp_m" in stored["inputs"]) is not math.isnan(loss_m)


@pytest.mark.parametrize("mode", ["maintenance", "out_of_service"])
def test_a_fishway_out_of_operation_gets_no_recommendation_and_no_feed_problem(
        plant, db_engine, mode):
    service, feed = plant
    evaluator = AlarmEvaluator(db_engine, service.site)
    service.evaluators.append(evaluator)
    supervisor_sets(service, "mode", 0, old_text="operating", new_text=mode)
    feed.values["west.forebay_level"] = math.nan  # dewatered: the gauges read nothing
    o = cycle(service, 2)
    assert o.recommendation is None and o.recommendation_id is None and not o.failed
    assert o.mode == mode and o.skipped.endswith(
        {"maintenance": "maintenance (dewatered)",
         "out_of_service": "out of service (watered, closed to fish)"}[mode])
    assert latest_recommendation(db_engine, service.fishway_db_ids["west"]) is None
    assert (service.totals["not_operating"], service.totals["skipped"]) == (1, 0)
    health = feed_health_frame(db_engine).loc["recommender:west"]
    assert feed_status(health).ok  # as the alarm inputs read a feed: not failed
    alarms = alarms_frame(db_engine)
    assert not [k for k, r in alarms.iterrows() if k.startswith("feed_comms") and
                r["state"] != "normal"]
    # back in operation with the gauge still dry: now it is a recommender failure
    supervisor_sets(service, "mode", 3, old_text=mode, new_text="operating")
    o = cycle(service, 5)
    assert o.failed and "no usable forebay reading" in o.skipped
    assert service.totals["skipped"] == 1
    assert not feed_status(feed_health_frame(db_engine).loc["recommender:west"]).ok

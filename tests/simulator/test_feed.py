"""SimulatedFeed: the Feed contract of tests/db/test_feed_contract.py, and its history.

The contract's checks are taken from that module and run here against a harness for the
simulated plant (the contract module invites this; its own list of harnesses is not ours to
edit). Its history check compares values with the ones a harness writes into its source, which
a plant that picks its own values cannot meet, so the history of this feed is checked by
:func:`test_history_returns_what_was_served_and_fills_gaps_on_the_poll_grid` instead:
the reference there is what ``read`` returned.
"""
from __future__ import annotations

import importlib.util
import sys
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np
import pytest

from db.feeds.base import FeedError
from ops_logic.tags import TagDef
from simulator.feed import SimulatedFeed
from simulator.plant import Plant
from simulator.scenario import Scenario


def _contract():
    name = "fishway_tests_feed_contract"
    if name not in sys.modules:
        path = Path(__file__).parents[1] / "db" / "test_feed_contract.py"
        spec = importlib.util.spec_from_file_location(name, path)
        module = importlib.util.module_from_spec(spec)
        sys.modules[name] = module
        spec.loader.exec_module(module)
    return sys.modules[name]


NOT_FOR_A_SELF_VALUED_SOURCE = {"test_history_is_kept_readings_or_nothing"}
_CONTRACT = _contract()
for _name in dir(_CONTRACT):
    if _name.startswith("test_") and _name not in NOT_FOR_A_SELF_VALUED_SOURCE:
        globals()[_name] = getattr(_CONTRACT, _name)

GHOST = TagDef("east.ghost", "east", "water_level", "m", "pool", "plant", "ns=2;i=4242", 10.0)
CALM = Scenario(random_forebay_drops_per_day=0.0)


class PlantHarness:
    """The contract's harness for the simulated plant: it picks its own values (``publish``
    returns None and makes the plant serve a reading at that time); an outage breaks it."""

    def __init__(self, site) -> None:
        self.plant = Plant(site, start=datetime.now(UTC) - timedelta(minutes=2), scenario=CALM,
                           profile_interval_s=600.0)
        self.feed = SimulatedFeed(self.plant)
        self.tags = [self.plant.tag(n) for n in
                     ("east.forebay_level", "east.P01.level", "east.water_temp")]

    def publish(self, values, ts) -> None:
        """Returns None: the contract's sign for a source that picks its own values."""
        self.feed.read(self.tags, ts)  # the plant serves (and keeps) a reading at ts

    def unknown_case(self):
        return [*self.tags, GHOST], GHOST.name

    def break_source(self):
        now = datetime.now(UTC)
        self.plant.inject_fault("*", "outage", now - timedelta(seconds=1), now + timedelta(days=1))

    def restore_source(self):
        self.plant.end_fault("*", "outage", datetime.now(UTC))

    def close(self):
        self.feed.close()


@pytest.fixture
def harness(site):
    h = PlantHarness(site)
    yield h
    h.close()


def test_the_contract_checks_were_found():
    names = [n for n in globals() if n.startswith("test_") and n in dir(_CONTRACT)]
    assert len(names) >= 3, names


def test_history_returns_what_was_served_and_fills_gaps_on_the_poll_grid(site):
    start = datetime(2026, 5, 1, 8, 0, tzinfo=UTC)
    plant = Plant(site, start=start, scenario=CALM, profile_interval_s=600.0)
    feed = SimulatedFeed(plant)
    tags = [plant.tag("east.P40.level"), plant.tag("west.do")]
    served = {}
    polls = [start + timedelta(seconds=3 + 10 * k) for k in range(60)]  # 10 min of polls
    plant.inject_fault("*", "outage", polls[20], polls[40])
    for ts in polls:
        try:
            for r in feed.read(tags, ts):
                served[(r.tag, r.ts)] = r.value
        except FeedError:
            pass
    got = feed.history(tags, polls[0], polls[-1])
    kept = {(r.tag, r.ts): r.value for r in got}
    assert all(kept[k] == v for k, v in served.items())  # the same values, exactly
    fill = sorted(ts for (tag, ts) in kept if tag == "west.do" and ("west.do", ts) not in served)
    # the gap (polls 20-39, 200 s) is filled on the 10-s grid of Unix time, away from the polls
    assert len(fill) >= 15 and all(polls[19] < ts < polls[40] for ts in fill)
    assert all(ts.timestamp() % 10.0 == 0.0 for ts in fill)
    assert [r.ts for r in got] == sorted(r.ts for r in got)
    assert feed.history(tags, polls[-1] + timedelta(hours=1), polls[-1] + timedelta(hours=2)) == []


def test_unknown_tags_are_reported_not_served(site):
    plant = Plant(site, start=datetime(2026, 5, 1, tzinfo=UTC), scenario=CALM)
    feed = SimulatedFeed(plant)
    readings = feed.read([plant.tags[0], GHOST], plant.start + timedelta(seconds=10))
    assert [r.tag for r in readings] == [plant.tags[0].name]
    assert any("east.ghost" in p for p in feed.problems)
    assert np.isfinite(readings[0].value)

"""Fixtures of the alarm storage and service tests: the demo site in a quiet, in-criteria state.

``quiet`` holds one healthy reading per tag of the shipped demo site (an invented dam): each
fishway at the recommended settings for the middle of its forebay and tailwater ranges, pool
levels from that solved profile, 12 °C water with 9.5 mg/L of oxygen, clean racks, no trips.
``Feeder`` stores those readings (with any overrides) at a time and marks the feed healthy, as
the ingest would; the evaluator then reads them back from the database.
"""
from __future__ import annotations

import math
from collections.abc import Mapping
from datetime import UTC, datetime, timedelta

import pytest

from db.alarm.evaluator import AlarmEvaluator
from db.alarm.service import AlarmService
from db.catalog import add_user
from db.feed_health import update_feed_health
from db.readings import store_batch
from ops_logic.site import Site, load_site
from simulator.steady import steady_readings

T0 = datetime(2026, 7, 1, 6, 0, tzinfo=UTC)


class Feeder:
    """Stores readings of every tag at a time, as the ingest would (flag 1, or 9 for NaN)."""

    def __init__(self, engine, site: Site, tag_ids: Mapping[str, int],
                 values: Mapping[str, float]):
        self.engine, self.site, self.tag_ids = engine, site, tag_ids
        self.values = dict(values)

    def __call__(self, t: datetime, flags: Mapping[str, int] | None = None,
                 **changes: float) -> None:
        values = {**self.values, **{k.replace("__", "."): v for k, v in changes.items()}}
        rows = []
        for name, v in values.items():
            missing = math.isnan(v)
            flag = (flags or {}).get(name, 9 if missing else 1)
            rows.append((self.tag_ids[name], t, None if missing else v, flag))
        store_batch(self.engine, rows)
        for feed in self.site.ingest.feeds:
            update_feed_health(self.engine, feed.id, t, ok=True, readings_per_min=6.0,
                               lag_s=0.0)


@pytest.fixture(scope="session")
def demo_site() -> Site:
    return load_site(None)


@pytest.fixture(scope="session")
def quiet(demo_site) -> dict[str, float]:
    return steady_readings(demo_site)


@pytest.fixture
def users(db_engine) -> dict[str, str]:
    """One account of each role (password hashes are placeholders)."""
    for name, role in (("ana", "operator"), ("sam", "supervisor"), ("vic", "viewer")):
        add_user(db_engine, name, role, "not-a-real-hash", now=T0)
    return {"operator": "ana", "supervisor": "sam", "viewer": "vic"}


@pytest.fixture
def evaluator(db_engine, demo_site) -> AlarmEvaluator:
    return AlarmEvaluator(db_engine, demo_site)


@pytest.fixture
def service(db_engine, demo_site, evaluator, users) -> AlarmService:
    return AlarmService(db_engine, demo_site, ids=evaluator.store.ids)


@pytest.fixture
def feed(db_engine, demo_site, evaluator, quiet) -> Feeder:
    return Feeder(db_engine, demo_site, evaluator.store.ids.tags, quiet)


@pytest.fixture(scope="session")
def at():
    """``at(m)``: ``m`` minutes after the start of the tests' day."""
    return lambda m: T0 + timedelta(minutes=m)

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
from ops_logic.ladder import Ladder
from ops_logic.site import Site, load_site
from ops_logic.tags import site_tags

T0 = datetime(2026, 7, 1, 6, 0, tzinfo=UTC)


def quiet_values(site: Site) -> dict[str, float]:
    """A healthy reading of every tag (SI, the tag's unit); see the module docstring."""
    out: dict[str, float] = {}
    for f in site.fishways:
        ladder = Ladder(f)
        fb, tw = 0.5 * sum(f.forebay_range), 0.5 * sum(f.tailwater_range)
        rec = ladder.recommend(fb, tw, temperature_c=12.0)
        p = ladder.solve(fb, tw, rec.settings, temperature_c=12.0)
        levels = {q.id: q.water_level_m for q in p.pools}
        aux = {a.id: a.flow_m3s for a in p.aux}
        fixed = {"forebay": fb, "tailwater": tw, "water_temp": 12.0, "do": 9.5,
                 "trash_rack_dp": 0.0, "picket_dp": 0.0, "pump_trip": 0.0}
        for t in site_tags(site):
            if t.fishway_id != f.id:
                continue
            if t.role in ("pool", "pool_b"):
                out[t.name] = levels[t.pool_id]
            elif t.role == "setting":
                out[t.name] = rec.settings[t.setting]
            elif t.role == "aux_flow":
                out[t.name] = aux[t.actuator]
            else:
                out[t.name] = fixed[t.role]
    return out


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
    return quiet_values(demo_site)


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

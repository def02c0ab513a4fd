"""Fixtures of the alarm tests: a small SI site with exactly 30 tags on one feed, its
recommended (in-criteria) state, and healthy readings built from that state (invented values)."""

from __future__ import annotations

from dataclasses import replace
from datetime import UTC, datetime, timedelta
from typing import Any

import pytest

from ops_logic.alarms.engine import AlarmEngine
from ops_logic.alarms.inputs import AlarmInputs, FeedStatus, FishwayInputs, TagValue
from ops_logic.ladder import Ladder
from ops_logic.profile import Criterion, Profile
from ops_logic.recommend import Recommendation, recommend
from ops_logic.site import Site, parse_site
from ops_logic.tags import site_tags

T0 = datetime(2026, 7, 1, 6, 0, tzinfo=UTC)
FOREBAY_M = 100.3


def alarm_site_dict(site_dict: Any, alarms: dict[str, Any] | None = None) -> dict[str, Any]:
    """Fifteen baffles, every pool gauged, a gravity source and a pump station: 30 tags."""
    d = site_dict(n_baffles=15, aux=True)
    fw = d["fishways"][0]
    fw["aux"].append({"type": "pumps", "id": "PS1", "into_pool": "entrance",
                      "diffuser_area": 4.0, "count": 2, "rated_flow": 0.1, "rated_head": 2.0,
                      "shutoff_head": 3.0})
    fw["gauging"] = {"pools": [f"P{i + 1:02d}" for i in range(16)]}
    if alarms is not None:
        fw["alarms"] = alarms
    return d


class Plant:
    """A quiet plant: the recommended state of the small site, with readings that match it."""

    def __init__(self, site: Site):
        self.site = site
        self.tags = site_tags(site)
        f = site.fishways[0]
        self.fishway_id = f.id
        self.rec: Recommendation = recommend(Ladder(f), FOREBAY_M, f.tailwater_range[0] + 1.0)
        self.profile: Profile = self.rec.profile
        self.settings = dict(self.rec.settings)
        levels = {p.id: p.water_level_m for p in self.profile.pools}
        aux_q = {a.id: a.flow_m3s for a in self.profile.aux}
        fixed = {"forebay": self.profile.forebay_m, "tailwater": self.profile.tailwater_m,
                 "water_temp": 12.0, "do": 9.5, "trash_rack_dp": 0.02, "picket_dp": 0.01,
                 "pump_trip": 0.0}
        self.values: dict[str, float] = {}
        for t in self.tags:
            if t.role in ("pool", "pool_b"):
                self.values[t.name] = levels[t.pool_id]
            elif t.role == "setting":
                self.values[t.name] = self.settings[t.setting]
            elif t.role == "aux_flow":
                self.values[t.name] = aux_q[t.actuator]
            else:
                self.values[t.name] = fixed[t.role]

    def criteria(self, **values: float) -> Profile:
        """The profile with some criteria values replaced (``entrance_head=0.6``; a name with a
        colon is given with ``__``: ``head_drop__B03=0.5``)."""
        crit = []
        for c in self.profile.criteria:
            name = c.name.replace(":", "__")
            if name in values:
                v = values[name]
                ok = (c.min is None or v >= c.min) and (c.max is None or v <= c.max)
                crit.append(Criterion(c.name, v, c.min, c.max, ok, c.unit, c.kind))
            else:
                crit.append(c)
        return replace(self.profile, criteria=tuple(crit))

    def inputs(self, now: datetime, *, values: dict[str, float] | None = None,
               flags: dict[str, int] | None = None, ages: dict[str, float] | None = None,
               drop: tuple[str, ...] = (), profile: Profile | None = None,
               feed_ok: bool = True, last_success: datetime | None = None,
               temp_7dadm_c: float | None = 12.0, mode: str | None = None,
               settings: dict[str, float] | None = None,
               recommendation: Recommendation | None = None) -> AlarmInputs:
        vals = {**self.values, **(values or {})}
        readings = {n: TagValue(v, (flags or {}).get(n, 1), (ages or {}).get(n, 5.0))
                    for n, v in vals.items() if n not in drop}
        fin = FishwayInputs(profile or self.profile, recommendation or self.rec,
                            settings if settings is not None else self.settings,
                            temp_7dadm_c, mode)
        feed = FeedStatus(feed_ok, now if feed_ok else (last_success or now), "" if feed_ok
                          else "read timed out")
        return AlarmInputs(readings, {self.fishway_id: fin}, {"plant": feed})


@pytest.fixture(scope="session")
def alarm_site(site_dict) -> Site:
    return parse_site(alarm_site_dict(site_dict))


@pytest.fixture(scope="session")
def plant(alarm_site) -> Plant:
    return Plant(alarm_site)


@pytest.fixture
def engine(alarm_site, plant) -> AlarmEngine:
    """An engine that has seen one quiet evaluation at T0 (every alarm record exists)."""
    eng = AlarmEngine(alarm_site, plant.tags)
    events = eng.evaluate(T0, plant.inputs(T0))
    assert events == [], events
    return eng


@pytest.fixture(scope="session")
def at():
    """``at(m)``: the time ``m`` minutes after the quiet evaluation of :func:`engine`."""
    return lambda m: T0 + timedelta(minutes=m)

"""The demo scenario produces the events it claims, judged by the published thresholds.

Thresholds (from memory, as listed in /work/shared/REFERENCES.md): 7DADM (seven-day average of
the daily maximum temperature) 18 °C for migration plus non-core rearing and 20 °C for a
migration corridor, US EPA Region 10 (2003) temperature guidance, EPA 910-B-03-002; dissolved
oxygen 5.0 mg/L (7-day mean minimum) and 4.0 mg/L (1-day minimum), coldwater, other life
stages, US EPA (1986) Quality Criteria for Water, EPA 440/5-86-003.
"""
from __future__ import annotations

from dataclasses import replace
from datetime import UTC, datetime, timedelta

import numpy as np
import pytest

from simulator.feed import SimulatedFeed
from simulator.plant import Plant
from simulator.scenario import (
    DEMO_DAYS,
    FAULT_KINDS,
    Fault,
    LowOxygen,
    Scenario,
    WarmSpell,
    demo_scenario,
)

START = datetime(2026, 6, 1, 8, 0, tzinfo=UTC)  # local midnight at the demo site (UTC-8)
STEP = 600.0
PER_DAY = int(86400 / STEP)
TAGS = ["east.water_temp", "east.do", "east.trash_rack_dp", "east.picket_dp"]


def _days(d: float) -> int:
    return int(round(d * PER_DAY))


@pytest.fixture(scope="module")
def demo(site):
    """Measured demo readings every 10 min for the whole scenario (no operator: this fixture
    looks at the river and the racks; the operator has its own test)."""
    plant = Plant(site, start=START, seed=0, profile_interval_s=1800.0,
                  scenario=replace(demo_scenario(START, site), operator=False))
    t = np.arange(0.0, DEMO_DAYS * 86400.0, STEP)
    return plant, t, plant.sample_arrays(TAGS, t)


def _7dadm(temps: np.ndarray) -> np.ndarray:
    daily_max = temps.reshape(-1, PER_DAY).max(axis=1)  # local days (the grid starts at 00:00)
    return np.convolve(daily_max, np.ones(7) / 7.0, mode="valid")


def test_warm_spell_takes_the_7dadm_over_the_migration_corridor_threshold(demo, site):
    _, t, a = demo
    assert _7dadm(a["east.water_temp"].values).max() > 20.0  # EPA Region 10 (2003), memory
    base = Plant(site, start=START, scenario=Scenario(random_forebay_drops_per_day=0.0),
                 profile_interval_s=3600.0)
    calm = base.sample_arrays(["east.water_temp"], t)["east.water_temp"].values
    assert _7dadm(calm).max() < 18.0  # without the spell this June stays below both


def test_low_oxygen_event_stays_below_5_mg_l_for_hours_but_above_4(demo):
    _, _, a = demo
    below = a["east.do"].values < 5.0  # EPA (1986) 7-day mean minimum, memory
    longest = run = 0
    for b in below:
        run = run + 1 if b else 0
        longest = max(longest, run)
    assert longest * STEP / 3600.0 >= 6.0
    assert a["east.do"].values.min() > 4.0  # the 1-day minimum is not broken
    assert not below[: _days(4.0)].any() and not below[_days(4.6):].any()


def test_trash_rack_loss_builds_in_the_debris_storm_and_the_cleaning_resets_it(demo):
    _, _, a = demo
    dp = a["east.trash_rack_dp"].values
    before, peak, after = dp[_days(0.39)], dp[_days(1.59)], dp[_days(1.62)]
    assert peak > 5 * before and peak > 0.05
    assert after < 0.2 * peak
    pickets = a["east.picket_dp"].values
    assert pickets[_days(3.39)] > 2 * pickets[_days(2.0)]
    assert pickets[_days(3.42)] < 0.3 * pickets[_days(3.39)]


def test_demo_faults_and_outage_show(demo, site):
    plant, _, _ = demo
    scenario = demo_scenario(START, site)
    assert {f.kind for f in scenario.faults} == set(FAULT_KINDS)
    stuck = next(f for f in scenario.faults if f.kind == "stuck")
    t = np.arange(plant.seconds(stuck.start), plant.seconds(stuck.end), 60.0)
    assert np.unique(plant.sample_arrays([stuck.tag], t)[stuck.tag].values).size == 1
    outage = next(f for f in scenario.faults if f.kind == "outage")
    assert plant.in_outage(outage.start + timedelta(minutes=5))
    assert [when for when, _ in scenario.timeline()] == sorted(w for w, _ in scenario.timeline())


def test_demo_pump_trip_raises_the_trip_flag(demo):
    plant, _, _ = demo
    t = np.array([5.45, 5.55, 5.62]) * 86400.0
    flag = plant.sample_arrays(["east.PS1.trip"], t)["east.PS1.trip"].values
    assert flag.tolist() == [0.0, 1.0, 0.0]


def _snapshots(plant, first_day, last_day):
    out = []
    for k in range(int(first_day * 48), int(last_day * 48)):  # every 30 min
        plant.advance_to(START + timedelta(minutes=30 * k))
        p = plant.profile("east")
        out.append((k / 48, p.state, p.in_criteria))
    return out


def test_operator_keeps_the_ladder_in_criteria_and_restores_it_after_the_drop(site):
    # the forebay moves the exit head out of its narrow band every few hours and the sudden
    # drop at day 0.85 stops the flow over the exit weir; the operator, checking every 30-60
    # min, follows the (rate-limited) recommendation
    scenario = demo_scenario(START, site)
    with_op = _snapshots(Plant(site, start=START, profile_interval_s=300.0, scenario=scenario),
                         0.5, 1.5)
    without = _snapshots(Plant(site, start=START, profile_interval_s=300.0,
                               scenario=replace(scenario, operator=False)), 0.5, 1.5)
    share = [np.mean([ok for _, _, ok in snaps]) for snaps in (with_op, without)]
    assert share[0] > 0.5 and share[0] > share[1] + 0.2
    stopped = [d for d, state, _ in with_op if state == "no_flow"]
    assert stopped and 0.85 <= stopped[0] < 0.9
    assert any(ok for d, _, ok in with_op if stopped[-1] < d <= stopped[-1] + 4 / 24)


def test_an_outage_makes_the_feed_fail(site):
    plant = Plant(site, start=START, scenario=Scenario(
        faults=(Fault("*", "outage", START + timedelta(minutes=1), START + timedelta(minutes=3)),)))
    feed = SimulatedFeed(plant)
    assert feed.read(plant.tags[:2], START + timedelta(seconds=30))
    from db.feeds.base import FeedError

    with pytest.raises(FeedError, match="outage"):
        feed.read(plant.tags[:2], START + timedelta(minutes=2))


@pytest.mark.parametrize("make", [
    lambda: WarmSpell(START, START - timedelta(hours=1)),
    lambda: WarmSpell(START, START + timedelta(days=1), peak_c=40.0),
    lambda: LowOxygen(START, START + timedelta(hours=1), min_do_mg_l=0.0),
    lambda: Scenario(operator_interval_s=(10.0, 20.0)),
    lambda: Scenario(rack_cleaning_interval_s=10.0),
    lambda: Fault("x", "stuck", START, START + timedelta(hours=1), {"magnitude": 1.0}),
    lambda: Fault("x", "spike", START.replace(tzinfo=None), START + timedelta(hours=1)),
])
def test_scenario_events_check_their_fields(make):
    with pytest.raises(ValueError):
        make()


def test_winter_demo_has_no_summer_events():
    # the seasonal curve (4 °C late January to 18 °C late July) is our plant's, not a source's
    from datetime import UTC, datetime

    from simulator.scenario import WARM_SEASON_MIN_C, demo_scenario, seasonal_temperature_c

    winter, summer = datetime(2026, 12, 1, tzinfo=UTC), datetime(2026, 7, 1, tzinfo=UTC)
    assert seasonal_temperature_c(335) < WARM_SEASON_MIN_C <= seasonal_temperature_c(182)
    w, s = demo_scenario(winter), demo_scenario(summer)
    assert w.warm_spells == () and w.low_oxygen == ()
    assert s.warm_spells and s.low_oxygen
    assert w.faults and w.debris  # the rest of the demo's events stay

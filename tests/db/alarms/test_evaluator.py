"""A simulated day through the ingest with the alarm evaluator on its hook (db/alarm/evaluator.py).

The plant is the simulator's demo site (simulator.plant.Plant) with a scenario of our own: a warm
spell to a daily mean of 23 °C (02:00–11:00), a low-oxygen event down to 3.8 mg/L
(12:00–16:00), debris building up on the west ladder's trash rack (from 03:00, cleaned at
21:00) and a 20-minute communications outage of the feed (18:00). db.ingest's IngestService
polls it every 120 s through the simulated feed and recommends every 600 s on a simulated
clock (db.ingest.schedule.run_simulated); after each recommendation the operator applies it,
so both fishways are kept at their recommended settings. The east ladder's thermal-stress rule
judges the reading (``basis = "instantaneous"``): a 7DADM needs seven days of history.

The limits the scenario crosses: temperature 20 °C (east's migration-corridor criterion) and
21 °C (migration blocked), dissolved oxygen 5.0 and 4.0 mg/L (US EPA 1986, from memory, as in
ops_logic.alarms.config), oxygen saturation 80 % and 60 % (common practice there), the west
trash rack's 0.15 m (common practice there).

"Spurious" here means any annunciation other than those the scenario causes: no criteria alarm
(head drop, entrance or exit head, power density, diffuser velocity, attraction flow, forebay or
tailwater range) on a fishway kept at its recommended settings, no adjustment-due or actuator
mismatch, no data-quality or stale-tag alarm outside the outage's group, and no alarm that
annunciates twice (chattering: ISA-18.2's 3 in a minute, from memory, or any repeat at all).
"""
from __future__ import annotations

import copy
import tomllib
from datetime import UTC, datetime, timedelta

import pytest

from db.alarm.evaluator import AlarmEvaluator
from db.alarm.history import alarm_history_frame, alarm_performance_report
from db.alarms import alarms_frame
from db.engine import make_engine
from db.ingest.schedule import SimulatedClock, run_simulated
from db.ingest.service import IngestService
from db.migrate import upgrade
from ops_logic.site import demo_site_path, parse_site
from ops_logic.tags import site_tags
from simulator.feed import SimulatedFeed
from simulator.plant import Plant
from simulator.scenario import Cleaning, DebrisPulse, Fault, LowOxygen, Scenario, WarmSpell

START = datetime(2026, 7, 1, tzinfo=UTC)
OUTAGE = (START + timedelta(hours=18), START + timedelta(hours=18, minutes=20))


def hour(h: float) -> datetime:
    return START + timedelta(hours=h)


EXPECTED = {
    # key: (not before, not after) the scenario's cause
    "temp_high@east": (hour(2), hour(11)),
    "temp_high_high@east": (hour(2), hour(11)),
    "temp_high_high@west": (hour(2), hour(11)),
    "do_low@east": (hour(12), hour(16)), "do_low@west": (hour(12), hour(16)),
    "do_low_low@east": (hour(12), hour(16)), "do_low_low@west": (hour(12), hour(16)),
    "do_sat_low@east": (hour(12), hour(16)), "do_sat_low@west": (hour(12), hour(16)),
    "do_sat_low_low@east": (hour(12), hour(16)), "do_sat_low_low@west": (hour(12), hour(16)),
    "trash_rack_dp_high@west": (hour(3), hour(21)),
    "feed_comms@plant": OUTAGE,
}
CRITERIA_RULES = {"head_drop", "entrance_head", "exit_head", "power_density",
                  "diffuser_velocity", "attraction_flow_low", "forebay_range",
                  "tailwater_range", "adjustment_due", "actuator_mismatch"}


def day_site():
    data = copy.deepcopy(tomllib.loads(demo_site_path().read_text(encoding="utf-8")))
    data["ingest"] = {"poll_seconds": 120, "recommend_seconds": 600}
    data["fishways"][0]["alarms"]["temp_high"] = {"basis": "instantaneous"}
    return parse_site(data, "<alarm day site>")


@pytest.fixture(scope="module")
def day(tmp_path_factory):
    site = day_site()
    scenario = Scenario(
        warm_spells=(WarmSpell(hour(2), hour(11), peak_c=23.0, ramp_s=3600.0),),
        low_oxygen=(LowOxygen(hour(12), hour(16), min_do_mg_l=3.8, ramp_s=1800.0),),
        debris=(DebrisPulse(hour(3), hour(20), 20.0, "trash_rack", "west"),),
        cleanings=(Cleaning(hour(21), "trash_rack", "west"),),
        faults=(Fault("*", "outage", *OUTAGE),), random_forebay_drops_per_day=0.0)
    plant = Plant(site, start=START, seed=3, scenario=scenario, profile_interval_s=300.0)
    folder = tmp_path_factory.mktemp("alarm-day")
    engine = make_engine(sqlite_path=folder / "day.sqlite")
    upgrade(engine)
    evaluator = AlarmEvaluator(engine, site)
    clock = SimulatedClock(START)
    calls = []

    def hook(now, ctx):
        calls.append(ctx.kind)
        return evaluator(now, ctx)

    service = IngestService(site, engine, {"plant": SimulatedFeed(plant)}, clock=clock,
                            tag_ids=evaluator.store.ids.tags, evaluators=[hook],
                            backup_dir=folder / "backups")

    def operator(job, now, result):  # applies every stored recommendation
        if job.name != "recommend":
            return
        for outcome in result:
            if outcome.recommendation is None:
                continue
            commanded = plant.setpoints(outcome.fishway_id)
            for name, value in outcome.recommendation.settings.items():
                if abs(value - commanded[name]) > 1e-9:
                    plant.apply_setting(outcome.fishway_id, name, value, now)

    runs = run_simulated(service, clock, hour(24), after=operator)
    events = alarm_history_frame(engine, START, hour(25))
    yield {"site": site, "engine": engine, "runs": runs, "calls": calls, "events": events}
    service.close()
    engine.dispose()


def annunciations(events):
    return events[(events["kind"] == "raised") & (events["state"] == "unacknowledged")]


def test_the_evaluator_ran_after_every_cycle(day):
    assert day["runs"]["poll:plant:120s"] == 721 and day["runs"]["recommend"] == 145
    assert day["calls"].count("poll") == 721 and day["calls"].count("recommend") == 145


def test_the_scenario_raises_its_alarms_each_once_and_nothing_else(day):
    ann = annunciations(day["events"])
    assert sorted(ann["key"]) == sorted(EXPECTED)  # each exactly once: no repeat, no extra
    for ts, key in zip(ann.index, ann["key"], strict=True):
        lo, hi = EXPECTED[key]
        assert lo <= ts <= hi, f"{key} raised at {ts}, outside its cause {lo}–{hi}"
    assert not set(day["events"]["rule"]) & CRITERIA_RULES  # not even a pending raise
    perf, _ = alarm_performance_report(day["engine"], START, hour(24))
    assert perf.annunciations == len(EXPECTED) and perf.chattering == ()
    assert perf.flood_periods_pct == 0.0


def test_the_feed_outage_is_one_grouped_alarm(day):
    events = day["events"]
    window = events[(events.index >= OUTAGE[0]) & (events.index < OUTAGE[1] +
                                                   timedelta(minutes=10))]
    assert annunciations(window)["key"].tolist() == ["feed_comms@plant"]
    stale = window[window["rule"] == "stale_tag"]
    tags = {t.name for t in site_tags(day["site"]) if t.feed == "plant"}
    raised = stale[stale["kind"] == "raised"]
    assert set(raised["tag"]) == tags  # every tag of the feed went stale …
    assert set(raised["state"]) == {"suppressed_by_design"}  # … none annunciated
    assert set(stale[stale["kind"] == "suppressed"]["parent"]) == {"feed_comms@plant"}
    # after the feed's return every child cleared and was released; nothing annunciated
    released = stale[stale["kind"] == "unsuppressed"]
    assert set(released["tag"]) == tags and set(released["state"]) == {"normal"}


def test_alarms_at_the_end_of_the_day(day):
    rows = alarms_frame(day["engine"])
    assert rows.loc["feed_comms@plant", "state"] == "rtn_unacknowledged"
    assert rows.loc["trash_rack_dp_high@west", "state"] == "rtn_unacknowledged"  # cleaned
    cleared = day["events"][(day["events"]["key"] == "trash_rack_dp_high@west")
                            & (day["events"]["kind"] == "cleared")]
    assert len(cleared) == 1 and hour(21) <= cleared.index[0] <= hour(21.5)
    assert (rows["state"] == "unacknowledged").sum() == 0  # every cause has passed

"""The alarm inputs read from the database (db/alarm/inputs.py), both engines.

The 7DADM is checked against its definition — the mean of the seven daily maxima ending on the
day, calendar days in the site's time zone (US EPA Region 10 (2003), EPA 910-B-03-002, from
memory) — computed here by hand from the readings' known maxima; QARTOD flag values are those of
the IOOS flags manual v1.2 (seen in ioos_qc, REFERENCES.md).
"""
from __future__ import annotations

import math
from datetime import UTC, datetime, timedelta

import pytest
import sqlalchemy as sa
from sqlalchemy import event

from db.alarm.inputs import InputReader, feed_status
from db.alarm.store import site_ids
from db.feed_health import update_feed_health
from db.history import record_actuator_setting, record_recommendation
from db.readings import store_batch
from ops_logic.site import parse_site
from ops_logic.tags import site_tags
from tests.db.alarms.conftest import T0

QARTOD = {"pass": 1, "not_evaluated": 2, "suspect": 3, "fail": 4, "missing": 9}


@pytest.fixture
def reader(db_engine, demo_site):
    ids = site_ids(db_engine, demo_site)
    return InputReader(db_engine, demo_site, ids, site_tags(demo_site))


def test_readings_carry_their_flag_and_age(db_engine, reader, feed):
    feed(T0, flags={"east.do": QARTOD["suspect"]}, east__water_temp=float("nan"))
    now = T0 + timedelta(seconds=42)
    inputs = reader.read(now)
    do = inputs.readings["east.do"]
    assert (do.value, do.flag, do.age_s) == (9.5, 3, 42.0)
    assert not do.usable(120.0)  # suspect readings drive no rule
    temp = inputs.readings["east.water_temp"]
    assert math.isnan(temp.value) and temp.flag == QARTOD["missing"]
    assert len(inputs.readings) == len(site_tags(reader.site))


def test_feed_status_from_feed_health(db_engine, reader, feed):
    feed(T0)
    update_feed_health(db_engine, "plant", T0 + timedelta(seconds=10), ok=False,
                       error="read timed out")
    st = reader.read(T0 + timedelta(seconds=20)).feeds["plant"]
    assert (st.ok, st.last_success, st.error) == (False, T0, "read timed out")
    update_feed_health(db_engine, "plant", T0 + timedelta(seconds=30), ok=True)
    assert reader.read(T0 + timedelta(seconds=30)).feeds["plant"].ok
    assert feed_status({"last_success_at": None, "last_error_at": None}).ok is False


def test_profile_from_the_gauges_and_positions(db_engine, reader, feed, quiet):
    feed(T0, east__trash_rack_dp=0.05, east__G1__opening=104.0)  # noise past fully open
    p = reader.read(T0).fishways["east"].profile
    assert p is not None and p.state == "flowing"
    assert p.forebay_m == pytest.approx(quiet["east.forebay_level"] - 0.05, abs=1e-12)
    assert p.settings["aux_G1_opening_pct"] == 100.0  # clipped to the valve's range
    assert p.temperature_c == 12.0
    feed(T0 + timedelta(minutes=1), flags={"east.forebay_level": QARTOD["fail"]})
    fin = reader.read(T0 + timedelta(minutes=1)).fishways["east"]
    assert fin.profile is None
    assert any("east: no profile: no usable reading of forebay" in p for p in reader.problems)


@pytest.mark.parametrize(("loss_m", "lowered_m", "problem"), [
    (0.10, 0.10, None),  # hand calculation: the ladder sees the forebay less 0.10 m
    (-0.02, 0.0, None),  # a negative reading counts as no loss
    (2.5, 0.0, "east: the profile uses the forebay (trash-rack head loss 2.5 m refused"),
])
def test_the_profile_sees_the_forebay_less_the_trash_rack_loss(db_engine, reader, feed, quiet,
                                                               loss_m, lowered_m, problem):
    feed(T0, east__trash_rack_dp=loss_m)
    p = reader.read(T0).fishways["east"].profile
    assert p.forebay_m == pytest.approx(quiet["east.forebay_level"] - lowered_m, abs=1e-12)
    exit_head = next(c for c in p.criteria if c.name == "exit_head")
    assert exit_head.value == pytest.approx(p.forebay_m - quiet["east.exit.crest"], abs=1e-12)
    named = [x for x in reader.problems if x.startswith("east: the profile uses")]
    assert (named[0].startswith(problem) if problem else named == []), reader.problems
    # an unusable loss reading: the forebay gauge itself
    feed(T0 + timedelta(minutes=1), flags={"east.trash_rack_dp": QARTOD["fail"]},
         east__trash_rack_dp=0.10)
    p = reader.read(T0 + timedelta(minutes=1)).fishways["east"].profile
    assert p.forebay_m == pytest.approx(quiet["east.forebay_level"], abs=1e-12)


def test_logged_settings_are_the_current_settings(db_engine, reader, feed, quiet):
    fw = reader.ids.fishways["east"]
    record_actuator_setting(db_engine, fw, T0 - timedelta(hours=1), "exit_crest_m", 76.5,
                            unit="m", set_by="ana", source="manual")
    record_actuator_setting(db_engine, fw, T0 - timedelta(minutes=5), "G1", 40.0, unit="%",
                            set_by="ana", source="manual")  # by actuator id
    feed(T0)
    fin = reader.read(T0).fishways["east"]
    assert fin.current_settings["exit_crest_m"] == 76.5
    assert fin.current_settings["aux_G1_opening_pct"] == 40.0
    assert fin.current_settings["aux_PS1_pumps"] == quiet["east.PS1.pumps"]  # never logged
    # the profile uses the positions, not the log
    assert fin.profile.settings["exit_crest_m"] == pytest.approx(quiet["east.exit.crest"])


def test_stored_recommendation_becomes_changes(db_engine, demo_site, reader, feed, quiet):
    fw = reader.ids.fishways["east"]
    target = quiet["east.exit.crest"] + 0.1
    record_recommendation(db_engine, fw, T0 - timedelta(seconds=30),
                          inputs={"forebay_m": 77.4}, settings={"exit_crest_m": target,
                                                                "not_a_setting": 1.0},
                          predicted={}, binding_constraint="exit_head", feasible=True,
                          reason="exit head at its aim")
    feed(T0)
    rec = reader.read(T0).fishways["east"].recommendation
    assert rec is not None and rec.forebay_m == 77.4 and rec.binding == "exit_head"
    assert [(c.name, c.recommended) for c in rec.changes] == [("exit_crest_m", target)]
    assert rec.changes[0].current == pytest.approx(quiet["east.exit.crest"])
    # too old: 3 recommender periods of 60 s
    late = T0 + timedelta(seconds=3 * demo_site.ingest.recommend_seconds)
    feed(late)
    assert reader.read(late).fishways["east"].recommendation is None


def test_seven_day_average_of_daily_maxima(db_engine, demo_site, reader):
    tz = demo_site.site.time_zone  # Etc/GMT+8: local midnight is 08:00 UTC
    assert tz == "Etc/GMT+8"
    tag = reader.ids.tags["east.water_temp"]
    first = datetime(2026, 7, 1, 8, 0, tzinfo=UTC)  # local midnight of July 1
    rows, maxima = [], []
    for day in range(8):
        peak = 14.0 + 0.7 * day
        maxima.append(peak)
        for hour in range(0, 24, 2):
            t = first + timedelta(days=day, hours=hour)
            v = peak if hour == 16 else peak - 3.0 + 0.1 * hour
            rows.append((tag, t, v, 1))
        # a failed spike must not count as the day's maximum
        rows.append((tag, first + timedelta(days=day, hours=17), 35.0, 4))
    store_batch(db_engine, rows)
    now = first + timedelta(days=7, hours=20)  # local July 8, 20:00
    got = reader.read(now).fishways["east"].temp_7dadm_c
    assert got == pytest.approx(sum(maxima[1:8]) / 7, abs=1e-9)  # July 2 … July 8
    # with one day missing in the window the 7DADM is undefined (never over fewer days)
    reader._temp_at = None
    with db_engine.begin() as conn:
        conn.execute(sa.text("DELETE FROM readings WHERE tag_id = :t AND ts_ms >= :a AND "
                             "ts_ms < :b"), {"t": tag,
                                             "a": int((first + timedelta(days=4)).timestamp()
                                                      * 1000),
                                             "b": int((first + timedelta(days=5)).timestamp()
                                                      * 1000)})
    assert reader.read(now).fishways["east"].temp_7dadm_c is None


def _copies(data: dict, name: str, prefix: str, copies: int):
    """The demo site with its first fishway repeated ``copies`` times."""
    d = {**data, "site": {**data["site"], "name": name}}
    d["fishways"] = [{**data["fishways"][0], "id": f"{prefix}{i:02d}", "name": f"Ladder {i}"}
                     for i in range(copies)]
    return parse_site(d)


def test_a_fixed_number_of_queries_whatever_the_tags(db_engine):
    """One read costs the same statements for 2 fishways as for 6 (no query per tag)."""
    import tomllib

    from ops_logic.site import demo_site_path

    data = tomllib.loads(demo_site_path().read_text())

    def statements(site, fill):
        ids = site_ids(db_engine, site)
        r = InputReader(db_engine, site, ids, site_tags(site))
        if fill:
            store_batch(db_engine, [(i, T0, 1.0, 1) for i in ids.tags.values()])
        count = []

        def on_exec(_conn, _cursor, statement, *_args):
            if statement.lstrip().upper().startswith("SELECT"):  # not SQLite's BEGIN
                count.append(statement)

        event.listen(db_engine, "before_cursor_execute", on_exec)
        try:
            r.read(T0 + timedelta(seconds=5))
        finally:
            event.remove(db_engine, "before_cursor_execute", on_exec)
        return len(count), len(ids.tags)

    small = statements(_copies(data, "Small copy", "s", 2), True)
    big = statements(_copies(data, "Big copy", "b", 6), True)
    assert big[1] == 3 * small[1]  # three times the tags
    assert small[0] == big[0] == 5  # readings, feeds, recommendations, logs, temperatures

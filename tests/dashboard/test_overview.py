"""Overview: the fishway states, values, staleness, alarms and adjustment-due judgement
(dashboard/services/overview.py), the bullet indicators and texts (dashboard/figures/overview.py)
and the page's refresh callbacks called as plain functions (dashboard/pages/overview.py).

The database is a copy of the session's seeded one (6 h of simulated readings ending at
SEED_END), so each test may add rows of its own; "now" is SEED_END + 20 s unless a test moves it.
"""
from __future__ import annotations

import doctest
import importlib
import sqlite3
from contextlib import contextmanager
from datetime import UTC, datetime, timedelta

import flask
import numpy as np
import pandas as pd
import pytest
from hypothesis import assume, given
from hypothesis import strategies as st

from dashboard import auth
from dashboard.figures.overview import panel_values, wall_values
from dashboard.services import overview as service
from db.alarms import record_alarm_event
from db.catalog import tag_id
from db.dashboard_queries import fishway_db_ids, record_setting_change
from db.engine import make_engine
from db.history import record_recommendation
from db.migrate import upgrade
from db.readings import readings_frame, store_batch
from db.site_sync import sync_site
from db.status import compute_status, read_status, update_status
from db.status.judge import _rows
from ops_logic.display import bullet_geometry
from ops_logic.ladder import Ladder
from ops_logic.profile import Criterion

SEED_END = datetime(2026, 7, 15, 12, 0, tzinfo=UTC)  # as in tests/dashboard/conftest.py
NOW = SEED_END + timedelta(seconds=20)
FT = 0.3048  # international foot, exactly (NIST SP 811, 2008, appendix B; from memory)
CFS = FT**3  # one cubic foot per second in m³/s, exactly


# -- fixtures ---------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def overview_page(page_module):
    return page_module("overview")


@pytest.fixture
def as_user():
    """``with as_user("viewer"):`` runs the block in a request signed in with that role."""
    server = flask.Flask("overview-tests")
    server.secret_key = "test"

    @contextmanager
    def run(role: str | None):
        with server.test_request_context("/"):
            if role is not None:
                flask.session["user"] = {"name": f"{role}9", "role": role}
            yield

    return run


def _snap(ctx, at=NOW):
    """The ingest stores the status at ``at`` (as every cycle), a refresh reads it at ``at``."""
    update_status(ctx.site, ctx.engine, at)
    return service.snapshot(ctx.site, ctx.engine, at)


def _raw_latest(engine, name: str) -> float:
    """Newest value of a tag straight from SQLite (independent of the storage API)."""
    con = sqlite3.connect(engine.url.database)
    try:
        return con.execute("SELECT r.value FROM readings r JOIN tags t ON t.id = r.tag_id "
                           "WHERE t.name = ? ORDER BY r.ts_ms DESC LIMIT 1", (name,)).fetchone()[0]
    finally:
        con.close()


def _store(engine, rows):
    store_batch(engine, [(tag_id(engine, n), ts, v, f) for n, ts, v, f in rows])


# -- doctests of the modules ---------------------------------------------------------------------
@pytest.mark.parametrize("name", ["dashboard.services.site", "dashboard.services.health",
                                  "dashboard.figures.overview", "ops_logic.display",
                                  "ops_logic.overrides"])
def test_doctests(name):
    result = doctest.testmod(importlib.import_module(name), optionflags=doctest.ELLIPSIS)
    assert result.attempted > 0 and result.failed == 0


# -- values ----------------------------------------------------------------------------------------
def test_levels_are_the_newest_readings_in_feet(app_ctx):
    snap = _snap(app_ctx)
    east = next(f for f in snap.fishways if f.id == "east")
    for key, tag in (("forebay", "east.forebay_level"), ("tailwater", "east.tailwater_level")):
        raw_m = _raw_latest(app_ctx.engine, tag)
        metric = east.metric(key)
        assert metric.value == pytest.approx(raw_m, abs=1e-12)
        texts, _, _ = panel_values(east)
        assert texts[f"east.{key}.value"] == f"{raw_m / FT:.2f} ft"  # 1 ft = 0.3048 m exactly
    # the forebay band is the site file's range, 252.0–255.5 ft (ops_logic/data/demo_site.toml)
    fb = east.metric("forebay")
    assert (fb.lo / FT, fb.hi / FT) == (pytest.approx(252.0), pytest.approx(255.5))


def test_entrance_and_exit_heads_come_from_the_gauges(app_ctx):
    # judged as the ingest does (compute_status keeps the solved profile; the store does not)
    east = next(f for f in compute_status(app_ctx.site, app_ctx.engine, NOW) if f.id == "east")
    e = app_ctx.engine
    entrance = _raw_latest(e, "east.P40.level") - _raw_latest(e, "east.tailwater_level")
    # the exit weir draws from the forebay less the trash-rack head loss (forebay to exit)
    loss = _raw_latest(e, "east.trash_rack_dp")
    assert 0.0 < loss < 0.2  # the simulator's clean rack (regression value)
    exit_head = (_raw_latest(e, "east.forebay_level") - loss) - _raw_latest(e, "east.exit.crest")
    assert east.metric("entrance_head").value == pytest.approx(entrance, abs=1e-12)
    assert east.metric("entrance_head").source == "gauge P40 − tailwater"
    assert east.metric("exit_head").value == pytest.approx(exit_head, abs=1e-12)
    assert east.metric("exit_head").source == "forebay − trash-rack head loss − crest"
    # and the state follows them: out of criteria when either is outside its band
    bands = {k: (east.metric(k).lo, east.metric(k).hi) for k in ("entrance_head", "exit_head")}
    outside = any(not lo <= v <= hi for v, (lo, hi) in
                  ((entrance, bands["entrance_head"]), (exit_head, bands["exit_head"])))
    assert (east.state == "out_of_criteria") == (outside or not east.profile.in_criteria)


def test_worst_drop_and_flows_are_those_of_the_solved_profile(app_ctx, demo_site):
    # internal consistency: the overview solves with the newest positions (solver checked in
    # tests/ops_logic/test_profile.py against published weir and orifice values)
    east = next(f for f in _snap(app_ctx).fishways if f.id == "east")
    ladder = Ladder.from_site(demo_site, "east")
    e = app_ctx.engine
    settings = {"exit_crest_m": _raw_latest(e, "east.exit.crest"),
                "entrance_E1_crest_m": _raw_latest(e, "east.E1.crest"),
                "entrance_E2_crest_m": _raw_latest(e, "east.E2.crest"),
                "aux_G1_opening_pct": _raw_latest(e, "east.G1.opening"),
                "aux_PS1_pumps": _raw_latest(e, "east.PS1.pumps")}
    settings = {k: min(max(v, ladder.settings[k].low), ladder.settings[k].high)
                for k, v in settings.items()}
    # the ladder sees the forebay less the trash-rack head loss (forebay to exit)
    forebay = _raw_latest(e, "east.forebay_level") - _raw_latest(e, "east.trash_rack_dp")
    p = ladder.solve(forebay, _raw_latest(e, "east.tailwater_level"),
                     settings, temperature_c=_raw_latest(e, "east.water_temp"))
    assert east.metric("head_drop").value == pytest.approx(
        max(pool.head_drop_m for pool in p.pools[1:]), abs=1e-9)
    assert east.metric("ladder_flow").value == pytest.approx(p.ladder_flow_m3s, rel=1e-9)
    assert east.metric("attraction_flow").value == pytest.approx(p.entrance_flow_m3s, rel=1e-9)
    texts, _, _ = panel_values(east)
    assert texts["east.attraction_flow.value"] == f"{p.entrance_flow_m3s / CFS:.1f} cfs"


def test_dissolved_oxygen_limit_is_the_epa_five_milligram_value(app_ctx):
    # US EPA (1986) coldwater, other life stages, 7-day mean minimum 5.0 mg/L (from memory),
    # the default of the do_low rule
    east = next(f for f in _snap(app_ctx).fishways if f.id == "east")
    do = east.metric("do")
    assert do.lo == 5.0 and do.hi is None
    assert do.value == pytest.approx(_raw_latest(app_ctx.engine, "east.do"))
    assert do.status == ("normal" if do.value >= 5.0 else "abnormal")


def test_temperature_7dadm_against_pandas_on_the_raw_readings(tmp_path, demo_site):
    """9 days of 10-minute temperatures; the 7DADM from the hourly rollups' maxima equals the
    mean of the last seven local-day maxima of the raw readings (EPA 910-B-03-002 definition,
    from memory), computed here with pandas alone."""
    engine = make_engine(sqlite_path=tmp_path / "t.sqlite")
    upgrade(engine)
    ids = sync_site(engine, demo_site)
    start = datetime(2026, 7, 1, tzinfo=UTC)
    t = np.arange(0, 9 * 86400, 600)
    temp = 15.0 + 3.0 * np.sin(2 * np.pi * (t / 86400.0 - 0.3)) + t / 86400.0 * 0.4
    store_batch(engine, [(ids["east.water_temp"], start.timestamp() + float(s), float(v), 1)
                         for s, v in zip(t, temp, strict=True)])
    now = start + timedelta(days=9)
    update_status(demo_site, engine, now)
    snap = service.snapshot(demo_site, engine, now)
    got = next(f for f in snap.fishways if f.id == "east").metric("temp_7dadm").value

    raw = readings_frame(engine, ids["east.water_temp"], start, now)["value"]
    daily = raw.tz_convert(demo_site.site.time_zone).groupby(
        raw.index.tz_convert(demo_site.site.time_zone).date).max()
    expected = daily.iloc[-7:].mean()
    assert got == pytest.approx(expected, abs=1e-9)
    # the criterion in force: 20 °C for this ladder's migration corridor (EPA Region 10 2003,
    # from memory; the site file sets temperature_use)
    assert next(f for f in snap.fishways if f.id == "east").metric("temp_7dadm").hi == 20.0
    engine.dispose()


# -- staleness and quality -----------------------------------------------------------------------
@pytest.mark.parametrize("age_s, stale", [(20, False), (30, False), (31, True), (600, True)])
def test_data_older_than_three_poll_periods_is_stale(app_ctx, age_s, stale):
    # the demo site polls every 10 s: stale beyond 3 × 10 s (common practice)
    snap = _snap(app_ctx, SEED_END + timedelta(seconds=age_s))
    for f in snap.fishways:
        assert f.stale is stale
        assert f.age_s == pytest.approx(age_s)
        assert (f.state == "no_data") is stale
        texts, classes, _ = panel_values(f)
        assert ("STALE" in texts[f"{f.id}.age"]) is stale
        assert ("is-stale" in classes[f"{f.id}.age"]) is stale
        assert (f.metric("forebay").status == "stale") is stale


def test_a_failed_reading_falls_back_to_the_last_good_one_while_it_is_fresh(app_ctx):
    t = SEED_END.timestamp()
    _store(app_ctx.engine, [("east.forebay_level", t + 10, 99.0, 4)])  # QARTOD 4: fail
    east = next(f for f in _snap(app_ctx, SEED_END + timedelta(seconds=25)).fishways
                if f.id == "east")
    assert east.metric("forebay").value == pytest.approx(
        readings_frame(app_ctx.engine, tag_id(app_ctx.engine, "east.forebay_level"),
                       SEED_END, SEED_END + timedelta(seconds=1))["value"].iloc[0])
    assert east.state != "no_data"
    later = next(f for f in _snap(app_ctx, SEED_END + timedelta(seconds=35)).fishways
                 if f.id == "east")
    assert later.state == "no_data"
    assert "forebay gauge failed QC" in later.reason
    assert later.metric("forebay").value is None and later.metric("forebay").status == "bad"


def test_tailwater_above_forebay_is_a_model_error_not_a_crash(app_ctx):
    t = SEED_END.timestamp() + 10
    _store(app_ctx.engine, [("west.forebay_level", t, 70.0, 1),
                            ("west.tailwater_level", t, 71.0, 1)])
    west = next(f for f in _snap(app_ctx).fishways if f.id == "west")
    assert west.state == "model_error" and "at or above the forebay" in west.reason
    assert west.state_label == "MODEL ERROR"
    assert west.metric("ladder_flow").value is None


def test_out_of_service_mode_overrides_the_hydraulic_state(app_ctx):
    fw = fishway_db_ids(app_ctx.engine, app_ctx.site.site.name)["west"]
    record_setting_change(app_ctx.engine, fw, "mode", NOW, action="set", set_by="sup1",
                          old_text="operating", new_text="maintenance")
    west = next(f for f in _snap(app_ctx).fishways if f.id == "west")
    assert west.state == "out_of_service" and west.state_label == "MAINTENANCE"
    assert "dewatered" in west.reason.lower()


# -- alarms ----------------------------------------------------------------------------------------
def test_no_alarm_rows_means_no_alarm_data(app_ctx):
    snap = _snap(app_ctx)
    assert snap.site_alarms is None and all(f.alarms is None for f in snap.fishways)
    texts, _ = wall_values(snap)
    assert texts["east.alarms"] == "no alarm data"


def test_active_alarms_are_counted_by_priority(app_ctx):
    e = app_ctx.engine
    fw = fishway_db_ids(e, app_ctx.site.site.name)["east"]
    events = [("do_low@east", "high", "unacknowledged"),
              ("head_drop@east", "high", "unacknowledged"),
              ("pump_trip@east", "medium", "acknowledged"),
              ("trash_rack_dp_high@east", "low", "shelved"),
              ("picket_dp_high@east", "low", "normal"),
              ("feed_comms@plant", "medium", "rtn_unacknowledged")]
    for key, priority, state in events:
        kind = {"normal": "cleared", "shelved": "shelved", "acknowledged": "acknowledged"}.get(
            state, "raised")
        record_alarm_event(e, key, NOW, kind=kind, state=state, priority=priority,
                           rule=key.split("@")[0], who="op1",
                           fishway_id=None if key.endswith("@plant") else fw)
    snap = _snap(app_ctx)
    east = next(f for f in snap.fishways if f.id == "east")
    assert east.alarms == {"critical": 0, "high": 2, "medium": 1, "low": 0,
                           "unacknowledged": 2, "shelved": 1}
    assert next(f for f in snap.fishways if f.id == "west").alarms["high"] == 0
    assert snap.site_alarms["medium"] == 1 and snap.site_alarms["unacknowledged"] == 1
    texts, classes, _ = panel_values(east)
    assert texts["east.alarm.high"] == "2" and "alarm-1" in classes["east.alarm.high"]
    assert texts["east.alarm.low"] == "0" and "is-zero" in classes["east.alarm.low"]
    assert texts["east.alarms"] == "3 active, 2 unacknowledged; 1 shelved"


# -- adjustment due --------------------------------------------------------------------------------
def _current_positions(engine) -> dict[str, float]:
    names = {"exit_crest_m": "east.exit.crest", "entrance_E1_crest_m": "east.E1.crest",
             "entrance_E2_crest_m": "east.E2.crest", "aux_G1_opening_pct": "east.G1.opening",
             "aux_PS1_pumps": "east.PS1.pumps"}
    return {k: _raw_latest(engine, v) for k, v in names.items()}


@pytest.mark.parametrize("offset_m, due", [(0.10, True), (0.02, False)])
def test_adjustment_due_beyond_the_threshold(app_ctx, offset_m, due):
    # adjustment_due.threshold_m = 0.03 m (about 0.1 ft; common practice)
    e = app_ctx.engine
    fw = fishway_db_ids(e, app_ctx.site.site.name)["east"]
    settings = _current_positions(e)
    settings["exit_crest_m"] += offset_m
    record_recommendation(e, fw, NOW - timedelta(seconds=30), inputs={}, settings=settings,
                          predicted={}, binding_constraint="exit_head", feasible=True)
    adj = next(f for f in _snap(app_ctx).fishways if f.id == "east").adjustment
    assert (adj.status == "due") is due and not adj.stale
    if due:
        assert adj.changes == (
            f"Exit weir crest {settings['exit_crest_m'] / FT - offset_m / FT:.2f} ft → "
            f"{settings['exit_crest_m'] / FT:.2f} ft",)
    else:
        assert adj.text == "settings match the latest recommendation"


def test_an_old_recommendation_is_marked_stale_and_none_stored_is_said(app_ctx):
    e = app_ctx.engine
    assert next(f for f in _snap(app_ctx).fishways if f.id == "east").adjustment.status == \
        "no_recommendation"
    fw = fishway_db_ids(e, app_ctx.site.site.name)["east"]
    record_recommendation(e, fw, NOW - timedelta(hours=2), inputs={},
                          settings=_current_positions(e), predicted={},
                          binding_constraint=None, feasible=True)
    adj = next(f for f in _snap(app_ctx).fishways if f.id == "east").adjustment
    assert adj.stale and "2.0 h old" in adj.text


# -- the indicators --------------------------------------------------------------------------------
@given(lo=st.floats(-100, 100), width=st.floats(0.01, 100), value=st.floats(-1e4, 1e4))
def test_bullet_marker_is_inside_the_drawn_band_exactly_when_the_value_is(lo, width, value):
    hi = lo + width
    assume(min(abs(value - lo), abs(value - hi)) > 1e-6 * width)  # clear of the edges
    b = bullet_geometry(value, lo, hi, None)
    assert 0.0 <= b.value_pct <= 100.0
    edge_l, edge_r = b.band_left_pct, b.band_left_pct + b.band_width_pct
    assert (edge_l <= b.value_pct <= edge_r) == (lo <= value <= hi)
    assert b.off_scale == (value < lo - 0.5 * width or value > hi + 0.5 * width)


@given(a=st.floats(0, 50), b=st.floats(0, 50))
def test_bullet_marker_moves_with_the_value(a, b):
    ga, gb = bullet_geometry(a, None, 21.0, None), bullet_geometry(b, None, 21.0, None)
    assert (ga.value_pct <= gb.value_pct) == (a <= b) or ga.value_pct == gb.value_pct


def test_worst_criterion_is_the_one_farthest_out_relative_to_its_band():
    drop = Criterion("head_drop:B05", 0.40, None, 0.366, False, "m", "length")  # 9 % over
    head = Criterion("entrance_head", 0.20, 0.305, 0.457, False, "m", "length")  # 69 % under
    ok = Criterion("attraction_flow", 5.0, 4.25, None, True, "m3/s", "flow")
    assert service.worst_criterion([drop, head, ok]).name == "entrance_head"
    assert service.worst_criterion([drop, ok]).name == "head_drop:B05"
    assert service.worst_criterion([ok]).name == "attraction_flow"
    assert service.worst_criterion([]) is None


# -- the callbacks as plain functions --------------------------------------------------------------
def _ids(layout, kind):
    found = []

    def walk(node):
        if isinstance(node, list | tuple):
            for n in node:
                walk(n)
            return
        node_id = getattr(node, "id", None)
        if isinstance(node_id, dict) and node_id.get("type") == kind:
            found.append(node_id)
        walk(getattr(node, "children", None) or [])

    walk(layout)
    return found


def test_refresh_fills_every_item_of_the_layout(overview_page, app_ctx, as_user):
    with as_user("viewer"):
        layout = overview_page.layout()
    items = _ids(layout, overview_page.OVERVIEW_ITEM)
    rows = _ids(layout, overview_page.OVERVIEW_ROW)
    styles = _ids(layout, overview_page.OVERVIEW_STYLE)
    assert len(items) > 40 and len(rows) == len(
        [m for f in app_ctx.site.fishways for m in service.metric_keys(f)])
    with as_user("viewer"):
        texts, classes, row_classes, style_patches = overview_page.refresh(1, items, rows, styles)
    by_key = dict(zip((i["key"] for i in items), texts, strict=True))
    assert by_key["east.state"] in service.STATE_LABELS.values()
    assert by_key["east.forebay.value"].endswith(" ft")
    assert all(t != "…" for t in texts)
    assert all(c for c in classes) and all(c.startswith("ov-metric") for c in row_classes)
    # the markers get a few style properties each (position, visibility), never a layout
    assert all(isinstance(p, dict) and set(p) <= {"display", "left", "width", "outline"}
               and p["display"] in ("block", "none") for p in style_patches)
    shown = [p for p in style_patches if p["display"] == "block"]
    assert shown and all(0.0 <= float(p["left"].rstrip("%")) <= 100.0 for p in shown)


def test_refresh_needs_a_signed_in_user(overview_page, app_ctx, as_user):
    with as_user(None), pytest.raises(auth.PermissionDenied):
        overview_page.refresh(1, [], [], [])


def test_layout_asks_anonymous_users_to_sign_in(overview_page, app_ctx, as_user):
    with as_user(None):
        layout = overview_page.layout()
    assert "Sign in" in str(layout) and not _ids(layout, overview_page.OVERVIEW_ITEM)


def test_sparklines_load_whole_then_extend_with_new_minutes(overview_page, app_ctx, as_user):
    with as_user("viewer"):
        sparks = _ids(overview_page.layout(), overview_page.OVERVIEW_SPARK)
        figures, extends, state = overview_page.refresh_sparklines(0, None, sparks)
    assert len(sparks) == 8  # forebay, tailwater, temperature, DO of two fishways
    fig = figures[0]
    assert 300 <= len(fig.data[0].x) <= 360  # six hours of one-minute rollups
    assert all(x is overview_page.no_update for x in extends)
    first = sparks[0]["key"]
    # a new complete minute arrives: only it is sent
    t = SEED_END.timestamp()
    _store(app_ctx.engine, [(f"east.{n}", t + 60, v, 1) for n, v in
                            (("forebay_level", 77.5), ("tailwater_level", 65.8),
                             ("water_temp", 17.9), ("do", 8.3))])
    with as_user("viewer"):
        later = SEED_END + timedelta(seconds=125)
        with pytest.MonkeyPatch.context() as mp:
            mp.setattr(service, "now", lambda: later)
            figures2, extends2, state2 = overview_page.refresh_sparklines(1, state, sparks)
    assert all(f is overview_page.no_update for f in figures2)
    extended = dict(zip((s["key"] for s in sparks), extends2, strict=True))
    data, traces, keep = extended["east.forebay"]
    # the minutes 12:00 (its one seeded reading) and 12:01 (the new one) have completed
    assert traces == [0] and keep == 360 and len(data["y"][0]) == 2
    assert data["y"][0][-1] == pytest.approx(77.5 / FT)
    west = extended["west.forebay"][0]["y"][0]  # no new reading there: only 12:00 completed
    assert west == [pytest.approx(_raw_latest(app_ctx.engine, "west.forebay_level") / FT)]
    assert state2[first] > state[first]


def test_snapshot_is_quick_enough_for_a_ten_second_refresh(app_ctx):
    # a guard, not a benchmark (tests/bench/bench_dashboard.py measures): far below 10 s
    import time

    _snap(app_ctx)
    t = time.perf_counter()
    for _ in range(5):
        _snap(app_ctx, NOW + timedelta(seconds=1))
    assert (time.perf_counter() - t) / 5 < 0.5


def test_stale_values_are_greyed_with_their_age(app_ctx):
    east = next(f for f in _snap(app_ctx, SEED_END + timedelta(minutes=5)).fishways
                if f.id == "east")
    texts, classes, _ = panel_values(east)
    assert classes["east.forebay.row"].startswith("ov-metric is-stale")
    assert "5 min old" in texts["east.forebay.note"]
    assert texts["east.age"] == "STALE: data 5 min old"


def test_values_are_shown_in_si_for_an_si_site(app_ctx):
    # the texts are formatted in the site's units when the status is judged
    site = app_ctx.site
    si = site.model_copy(update={"site": site.site.model_copy(update={"units": "si"})})
    east = next(f for f in compute_status(si, app_ctx.engine, NOW) if f.id == "east")
    texts, _, _ = panel_values(east)
    assert texts["east.forebay.value"] == f"{east.metric('forebay').value:.3f} m"
    assert texts["east.attraction_flow.value"].endswith(" m³/s")


def test_pandas_index_of_latest_values_keeps_milliseconds(app_ctx):
    # the overview converts the latest-values frame to epoch ms; pandas 3 keeps ms units
    latest = _rows(pd.DataFrame(
        {"ts": pd.DatetimeIndex([SEED_END]).as_unit("ms"), "value": [1.0], "flag": [1]},
        index=pd.Index([7], name="tag_id")))
    assert latest == {7: (int(SEED_END.timestamp() * 1000), 1.0, 1)}


# -- the stored status as of now -----------------------------------------------------------------
def test_a_status_the_ingest_stopped_renewing_goes_stale_loudly(app_ctx):
    update_status(app_ctx.site, app_ctx.engine, NOW)  # readings 20 s old: fresh for 10 s more
    fresh = service.snapshot(app_ctx.site, app_ctx.engine, SEED_END + timedelta(seconds=30))
    assert not any(f.stale for f in fresh.fishways) and not fresh.problems
    late = service.snapshot(app_ctx.site, app_ctx.engine, SEED_END + timedelta(seconds=31))
    for f in late.fishways:
        assert f.stale and f.state == "no_data" and "not renewed" in f.reason
        assert f.age_s == pytest.approx(31.0)
        assert all(m.status in ("stale", "bad", "none") for m in f.metrics)
        texts, classes, _ = panel_values(f)
        assert "is-stale" in classes[f"{f.id}.age"]
        assert texts[f"{f.id}.age"] == "STALE: data 31 s old"
    assert any("is the ingest service running?" in p for p in late.problems)


def test_without_any_stored_status_the_panels_say_so(app_ctx):
    with app_ctx.engine.begin() as conn:
        conn.exec_driver_sql("DELETE FROM fishway_status_metrics")
        conn.exec_driver_sql("DELETE FROM fishway_status")
    snap = service.snapshot(app_ctx.site, app_ctx.engine, NOW)
    assert [f.state for f in snap.fishways] == ["no_data", "no_data"]
    assert all("no status computed yet" in f.reason for f in snap.fishways)
    texts, _, _ = panel_values(snap.fishways[0])
    assert texts["east.forebay.value"] == "—"


def test_refreshes_of_one_status_share_the_outputs_and_renew_the_age(overview_page, app_ctx,
                                                                     as_user):
    update_status(app_ctx.site, app_ctx.engine, NOW)
    with as_user("viewer"):
        layout = overview_page.layout()
        ids = [_ids(layout, k) for k in (overview_page.OVERVIEW_ITEM,
                                         overview_page.OVERVIEW_ROW,
                                         overview_page.OVERVIEW_STYLE)]
        first = overview_page.refresh(1, *ids)
        with pytest.MonkeyPatch.context() as mp:
            mp.setattr(service, "now", lambda: NOW + timedelta(seconds=5))
            second = overview_page.refresh(2, *ids)
    keys = [i["key"] for i in ids[0]]
    a, b = dict(zip(keys, first[0], strict=True)), dict(zip(keys, second[0], strict=True))
    assert (a["east.age"], b["east.age"]) == ("data 20 s old", "data 25 s old")
    assert a["site.time"] != b["site.time"]
    assert {k for k in keys if a[k] != b[k]} == {"site.time", "east.age", "west.age"}
    assert first[1:] == second[1:]
    # a new status (the next ingest cycle) is built anew
    with app_ctx.engine.begin() as conn:
        conn.exec_driver_sql("UPDATE fishway_status SET state = 'model_error', "
                             "reason = 'a test reason'")
    with app_ctx.engine.begin() as conn:  # same judging time: only the content differs
        conn.exec_driver_sql("UPDATE fishway_status SET computed_ms = computed_ms + 1")
    with as_user("viewer"):
        third = overview_page.refresh(3, *ids)
    c = dict(zip(keys, third[0], strict=True))
    assert c["east.reason"] == "a test reason" and c["east.state"] == "MODEL ERROR"


def test_logging_an_adjustment_renews_the_stored_status_at_once(app_ctx):
    from dashboard.services import log as log_service

    update_status(app_ctx.site, app_ctx.engine, NOW)
    spec = next(s for s in app_ctx.ladder("west").settings.values() if s.kind == "level")
    to_ft = (spec.low + spec.high) / 2 / FT
    later = NOW + timedelta(seconds=5)
    result = log_service.submit(app_ctx, "op9", log_service.LogForm(
        kind="adjustment", fishway_id="west", text="test adjustment",
        adjustments={spec.name: ("", f"{to_ft:.2f}")}), later)
    assert result.ok, result.problems
    stored = read_status(app_ctx.engine, app_ctx.site.site.name).statuses
    assert {s.computed_ms for s in stored} == {int(later.timestamp() * 1000)}

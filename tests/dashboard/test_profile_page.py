"""Fishway profile page: the side view is to scale, the bars show the published power-density
form, the live state picks the newest usable readings, the refresh patches data only.

Outside references: the demo site file read directly (``tomllib``, not through the site
model) for the geometry; the international foot, 1 ft = 0.3048 m, and the pound-force,
1 lbf = 4.4482216152605 N (NIST SP 811, both exact by definition; from memory); water density
from IAPWS-95 (``iapws``); P/V = ρ·g·Q·Δh/V (REFERENCES.md, volumetric power dissipation).
"""

from __future__ import annotations

import doctest
import importlib
import json
import sys
import tomllib
from datetime import UTC, datetime, timedelta
from types import SimpleNamespace

import pytest
from dash import Patch, no_update
from dash._callback_context import context_value
from dash._utils import AttributeDict
from plotly.utils import PlotlyJSONEncoder

FT = 0.3048  # m, exact (NIST SP 811; from memory)
LBF = 4.4482216152605  # N, exact (NIST SP 811; from memory)
G = 9.80665  # m/s², standard gravity (CGPM 1901; from memory)
FTLBF_S_FT3 = LBF * FT / FT**3  # W/m³ in one ft·lbf/s/ft³ (= 47.88 W/m³)
NOW = datetime(2026, 7, 15, 12, 0, tzinfo=UTC)


@pytest.fixture(scope="module")
def raw_site():
    from ops_logic.site import demo_site_path

    return tomllib.loads(demo_site_path().read_text(encoding="utf-8"))


@pytest.fixture(scope="module")
def east(demo_site):
    from ops_logic.ladder import Ladder

    ladder = Ladder.from_site(demo_site, "east")
    return ladder, ladder.solve(253.5 * FT, 215.0 * FT, ladder.default_settings())


def test_geometry_follows_the_pool_lengths_of_the_site_file(east, raw_site):
    from dashboard.figures.profile import geometry

    fw = raw_site["fishways"][0]
    lengths = [fw["exit"]["pool"]["length"]]
    for b in fw["baffles"]:
        lengths += [b["pool"]["length"]] * b.get("repeat", 1)
    g = geometry(east[0])
    assert [x / FT for x in g.length] == pytest.approx(lengths, abs=1e-9)
    starts = [sum(lengths[:j]) for j in range(len(lengths))]
    assert [x / FT for x in g.x0] == pytest.approx(starts, abs=1e-9)
    assert g.end / FT == pytest.approx(sum(lengths)) == pytest.approx(39 * 16 + 30)


def test_side_view_draws_pools_walls_and_surface_to_scale(east, raw_site):
    from dashboard.figures.profile import profile_figure

    ladder, profile = east
    fig = profile_figure(ladder, profile, (), "us")
    water = fig.data[0]
    assert len(water.x) == ladder.n_pools + 2  # forebay, pools, tailwater
    fw = raw_site["fishways"][0]
    floors = [fw["exit"]["pool"]["floor"]] + [fw["baffles"][0]["pool"]["floor"] - k
                                              for k in range(38)] + [fw["baffles"][1]["pool"]
                                                                     ["floor"]]
    assert list(water.base[1:-1]) == pytest.approx(floors, abs=1e-9)
    assert list(water.width[1:-1]) == pytest.approx([16.0] * 39 + [30.0], abs=1e-9)
    tops = [b + h for b, h in zip(water.base[1:-1], water.y[1:-1], strict=True)]
    assert tops == pytest.approx([p.water_level_m / FT for p in profile.pools], abs=1e-9)
    # baffle B01 at x = 16 ft: wall from the lower floor (243 ft) to the orifice invert
    # (244 ft), the 1.25 ft orifice left open, then the wall up to the weir crest (251 ft)
    walls = fig.data[2]
    pieces = [(walls.y[i], walls.y[i + 1]) for i in range(0, len(walls.y), 3)
              if walls.x[i] == pytest.approx(16.0)]
    assert pieces == [pytest.approx((243.0, 244.0)), pytest.approx((245.25, 251.0))]
    surface = fig.data[4]
    assert surface.y[0] == pytest.approx(253.5) and surface.y[-1] == pytest.approx(215.0)


def test_power_bars_are_rho_g_q_dh_over_v(east):
    from iapws import IAPWS95

    from dashboard.figures.profile import profile_figure

    ladder, profile = east
    fig = profile_figure(ladder, profile, (), "us")
    power = fig.data[list(t.name for t in fig.data).index("power")]
    rho = IAPWS95(T=273.15 + profile.temperature_c, P=0.101325).rho
    for j in (1, 20, 38):
        p = profile.pools[j]
        expected = rho * G * p.inflow_m3s * p.head_drop_m / p.volume_m3 / FTLBF_S_FT3
        # IAPWS-95 and the project's water density agree within 0.2 % (REFERENCES.md)
        assert power.y[j] == pytest.approx(expected, rel=2e-3)
    drops = fig.data[list(t.name for t in fig.data).index("drops")]
    assert drops.y[1] == pytest.approx(profile.pools[1].head_drop_m / FT, abs=1e-12)


def test_measured_marker_beyond_the_gauge_tolerance_is_amber(east):
    from dashboard.figures.profile import COLORS, profile_figure
    from dashboard.services.profile import Measured

    ladder, profile = east
    p10 = profile.pools[9].water_level_m
    fig = profile_figure(ladder, profile, [
        Measured("P10", "east.P10.level", p10 + 0.02, NOW),
        Measured("P10", "east.P10.level_b", p10 + 0.1 * FT + 0.001, NOW, redundant=True)],
        "us", tolerance_m=0.03)
    marks = fig.data[5]
    assert list(marks.marker.color) == [COLORS["measured"], COLORS["abnormal"]]


def test_pool_details_describe_the_control_above(east, raw_site):
    from dashboard.services.profile import pool_details

    ladder, profile = east
    j = 12  # pool P13, below baffle B12 (crest 251 − 11 ft from the site file's drop)
    crest_ft = raw_site["fishways"][0]["baffles"][0]["crest"] - (j - 1) * 1.0
    rows = dict(pool_details(ladder, profile, j, None, "us"))
    head = profile.pools[j - 1].water_level_m / FT - crest_ft
    assert rows["Head on the weir"].startswith(f"{head:.2f} ft")
    assert rows["Control above"] == "B12 (weir orifice)"
    assert rows["Regime"] in ("free", "submerged")
    assert "Orifice velocity" in rows
    with pytest.raises(ValueError, match="pool index"):
        pool_details(ladder, profile, 40, None, "us")


def test_headline_marks_out_of_band_values_amber(demo_site):
    from dashboard.figures.profile import headline
    from ops_logic.ladder import Ladder

    ladder = Ladder.from_site(demo_site, "east")
    s = ladder.default_settings()
    s["entrance_E1_crest_m"] = s["entrance_E2_crest_m"] = 205.0 * FT  # gates wide open
    p = ladder.solve(253.5 * FT, 215.0 * FT, s)
    bullets = {b.children[0].children: b for b in headline(ladder, p, "us")}
    eh = bullets["Entrance head"]
    ok = 1.0 * FT - 1e-9 <= p.entrance_head_m <= 1.5 * FT + 1e-9  # band of the site file
    assert ("abnormal" in eh.children[1].className) is (not ok)
    assert bullets["Forebay"].children[1].className == "bullet-value"  # in its range


# -- live state from the database ------------------------------------------------------------
@pytest.fixture(scope="module")
def fresh(tmp_path_factory, demo_site):
    """A migrated database with hand-made readings of the east ladder, and an app on it."""
    from dashboard import context
    from dashboard.app import create_app
    from db.dashboard_queries import fishway_db_ids
    from db.engine import make_engine
    from db.history import record_actuator_setting
    from db.migrate import upgrade
    from db.readings import store_batch
    from db.site_sync import sync_site

    engine = make_engine(sqlite_path=tmp_path_factory.mktemp("profile") / "p.sqlite")
    upgrade(engine)
    tag = sync_site(engine, demo_site)
    t = NOW - timedelta(seconds=60)
    store_batch(engine, [
        (tag["east.forebay_level"], t, 254.0 * FT, 1),
        (tag["east.forebay_level"], t + timedelta(seconds=50), 300.0 * FT, 4),  # failed QC
        (tag["east.tailwater_level"], t, 215.0 * FT, 1),
        (tag["east.exit.crest"], t, 252.9 * FT, 1),
        (tag["east.G1.opening"], t, 40.0, 2),
        (tag["east.PS1.pumps"], t, 1.0, 1),
        (tag["east.E2.crest"], t, 204.0 * FT, 1),  # below its 205 ft range
        (tag["east.water_temp"], t, 14.0, 1),
        (tag["east.P10.level"], t, 234.3 * FT, 1),
        (tag["east.P40.level_b"], t, 216.3 * FT, 1),
    ])
    fw = fishway_db_ids(engine, demo_site.site.name)["east"]
    record_actuator_setting(engine, fw, t, "entrance_E1_crest_m", 214.0 * FT, unit="m",
                            set_by="op1", source="manual")
    old = context._current
    app = create_app(demo_site, engine, secret_key="test")
    app.server.test_client().get("/login")
    yield SimpleNamespace(app=app, engine=engine, ctx=context.current(),
                          page=sys.modules["pages.profile"])
    if old is not None:
        context.install(old)
    engine.dispose()


def test_live_state_takes_the_newest_usable_readings(fresh):
    from dashboard.services.profile import live_state

    s = live_state(fresh.ctx, "east", NOW)
    assert s.forebay_m == pytest.approx(254.0 * FT)  # the failed newer reading is skipped
    assert s.tailwater_m == pytest.approx(215.0 * FT) and s.temperature_c == 14.0
    assert s.settings["exit_crest_m"] == pytest.approx(252.9 * FT)
    assert s.setting_sources["exit_crest_m"].startswith("position reading")
    assert s.settings["entrance_E1_crest_m"] == pytest.approx(214.0 * FT)
    assert s.setting_sources["entrance_E1_crest_m"].startswith("logged by op1")
    assert s.settings["entrance_E2_crest_m"] == pytest.approx(205.0 * FT)  # clipped
    assert any("outside its range" in n for n in s.notes)
    assert (s.settings["aux_G1_opening_pct"], s.settings["aux_PS1_pumps"]) == (40.0, 1.0)
    assert {(m.where, m.redundant) for m in s.measured} == {
        ("forebay", False), ("tailwater", False), ("P10", False), ("P40", True)}
    assert not s.stale and s.age_s == pytest.approx(60.0)
    later = live_state(fresh.ctx, "east", NOW + timedelta(hours=3))
    assert later.stale and any("old" in n for n in later.notes)


def test_live_state_without_levels_gives_no_profile(fresh):
    from dashboard.services.profile import live_state, solve_live

    s = live_state(fresh.ctx, "west", NOW)
    assert s.forebay_m is None and s.stale
    profile, why = solve_live(fresh.ctx.ladder("west"), s)
    assert profile is None and "forebay" in why
    assert any("default" in n for n in s.notes)


def _triggered(prop_id: str):
    return context_value.set(AttributeDict(triggered_inputs=[{"prop_id": prop_id, "value": 1}]))


def test_render_draws_then_refresh_patches_only_data(fresh, monkeypatch):
    page = fresh.page
    monkeypatch.setattr(page, "now_utc", lambda: NOW)
    token = _triggered("profile-fishway.value")
    try:
        fig, status, bullets, drawn = page.render("east", None, None, None)
    finally:
        context_value.reset(token)
    assert [t.name for t in fig.data][:2] == ["water", "floor"] and len(bullets) >= 6
    assert drawn == "east" and "Levels as of" in str(status)
    token = _triggered("profile-refresh.n_intervals")
    try:
        patch, _, _, _ = page.render("east", 1, {"fishway": "east", "pool": 3}, "east")
        full, _, _, _ = page.render("east", 2, None, None)  # nothing drawn yet: a full figure
    finally:
        context_value.reset(token)
    assert not isinstance(full, Patch) and full.data[0].name == "water"
    assert isinstance(patch, Patch)
    json.dumps(patch.to_plotly_json(), cls=PlotlyJSONEncoder)  # what Dash sends
    ops = patch.to_plotly_json()["operations"]
    touched = {tuple(o["location"][:1]) for o in ops}
    assert touched <= {("data",), ("layout",)}
    assert all(o["location"][:2] == ["layout", "annotations"] for o in ops
               if o["location"][0] == "layout")  # axes, shapes and zoom are left alone
    empty, status, _, drawn = page.render("west", None, None, None)
    assert empty == {} and "No profile" in str(status) and drawn is None


def test_clicking_a_pool_shows_its_details(fresh, monkeypatch):
    page = fresh.page
    monkeypatch.setattr(page, "now_utc", lambda: NOW)
    details, selected, patch = page.select_pool({"points": [{"customdata": 9}]}, "east")
    assert selected == {"fishway": "east", "pool": 9}
    assert "Pool P10" in str(details) and "Gauge (east.P10.level)" in str(details)
    assert isinstance(patch, Patch)
    hint, keep, _ = page.select_pool({"points": [{"customdata": -1}]}, "east")  # the forebay
    assert "Click a pool" in str(hint) and keep is no_update


@pytest.mark.parametrize("name", ["dashboard.services.profile", "dashboard.figures.profile"])
def test_doctests(name):
    result = doctest.testmod(importlib.import_module(name), optionflags=doctest.ELLIPSIS)
    assert result.attempted > 0 and result.failed == 0


def test_the_conversion_used_here_matches_the_reference_value():
    per_unit = FTLBF_S_FT3
    assert per_unit == pytest.approx(47.880, abs=1e-3)  # 1 ft·lbf/s/ft³ in W/m³
    assert 4.0 * per_unit == pytest.approx(191.5, abs=0.05)  # REFERENCES.md: 191.5 W/m³


# -- the fishway in force and the forebay the ladder sees (on a copy of the seeded database) ----
SEED_END = NOW  # tests/dashboard/conftest.py: the seeded readings end here
SEEDED_NOW = SEED_END + timedelta(seconds=20)


def _store(engine, rows):
    from db.catalog import tag_id
    from db.readings import store_batch

    store_batch(engine, [(tag_id(engine, n), ts, v, f) for n, ts, v, f in rows])


def _newest(engine, name):
    from db.catalog import tag_id
    from db.dashboard_queries import latest_good_values

    return float(latest_good_values(engine, [tag_id(engine, name)])["value"].iloc[0])


@pytest.mark.parametrize(("loss_m", "lowered_m"), [(0.10, 0.10), (-0.02, 0.0)])
def test_the_profile_sees_the_forebay_less_the_trash_rack_loss(app_ctx, loss_m, lowered_m):
    from dashboard.services.profile import ladder_in_force, live_state, solve_live

    # a trash-rack reading 10 s after the newest forebay reading (hand calculation: the ladder
    # sees the forebay gauge less max(loss, 0), the loss measured forebay to exit)
    _store(app_ctx.engine, [("east.trash_rack_dp", SEED_END + timedelta(seconds=10), loss_m,
                             1)])
    s = live_state(app_ctx, "east", SEEDED_NOW)
    forebay = _newest(app_ctx.engine, "east.forebay_level")
    assert s.forebay_m == pytest.approx(forebay, abs=1e-12)
    assert s.ladder_forebay_m == pytest.approx(forebay - lowered_m, abs=1e-12)
    assert s.trash_rack_loss_m == pytest.approx(max(loss_m, 0.0))
    assert s.ladder_forebay_from == "forebay − trash-rack head loss"
    assert any(n.startswith("the ladder sees a forebay of") and n.endswith(
        s.ladder_forebay_from) for n in s.notes)
    profile, why = solve_live(ladder_in_force(app_ctx, "east"), s)
    assert why is None and profile.forebay_m == pytest.approx(forebay - lowered_m, abs=1e-12)


@pytest.mark.parametrize(("rows", "why"), [
    # a loss reading an hour after the newest forebay reading is not paired with it
    ([("east.trash_rack_dp", SEED_END + timedelta(hours=1), 0.10, 1)],
     "forebay (no usable trash-rack head loss)"),
    ([("east.trash_rack_dp", SEED_END + timedelta(seconds=10), 0.10, 4)],  # failed QC:
     "forebay − trash-rack head loss"),  # the seeded reading before it is used
    ([("east.trash_rack_dp", SEED_END + timedelta(seconds=10), 2.5, 1)],
     "forebay (trash-rack head loss 2.5 m refused"),
])
def test_which_loss_reading_the_profile_uses(app_ctx, rows, why):
    from dashboard.services.profile import live_state

    seeded = _newest(app_ctx.engine, "east.trash_rack_dp")
    _store(app_ctx.engine, rows)
    s = live_state(app_ctx, "east", SEEDED_NOW + timedelta(hours=1))
    assert s.ladder_forebay_from.startswith(why)
    if s.trash_rack_loss_m is not None:
        assert s.ladder_forebay_m == pytest.approx(s.forebay_m - seeded, abs=1e-12)
        return
    assert s.ladder_forebay_m == pytest.approx(s.forebay_m, abs=1e-12)
    assert s.trash_rack_loss_m is None and s.ladder_forebay_from.startswith(why)


def test_a_supervisors_band_is_the_band_of_the_profile_criteria(app_ctx):
    from dashboard.services.profile import (
        fishway_db_id,
        ladder_in_force,
        live_state,
        pool_details,
        solve_live,
    )
    from db.dashboard_queries import record_setting_change

    site_max = app_ctx.ladder("east").fishway.targets.pool_head_drop.max
    record_setting_change(app_ctx.engine, fishway_db_id(app_ctx, "east"),
                          "targets.pool_head_drop.max", SEED_END, action="set", set_by="sup1",
                          old_value=site_max, new_value=0.33)
    ladder = ladder_in_force(app_ctx, "east")
    assert ladder.fishway.targets.pool_head_drop.max == 0.33 != site_max
    profile, _ = solve_live(ladder, live_state(app_ctx, "east", SEEDED_NOW))
    assert {c.max for c in profile.criteria if c.name.startswith("head_drop:")} == {0.33}
    rows = dict(pool_details(ladder, profile, 5, None, "us"))
    # 0.33 m = 1.08 ft (1 ft = 0.3048 m), with the SI value beside
    assert rows["Head drop from the pool above"].endswith(f"– {0.33 / FT:.2f} ft (0.330 m))")


def test_a_fishway_in_maintenance_says_so(app_ctx):
    from dashboard.services.profile import fishway_db_id, live_state
    from db.dashboard_queries import record_setting_change

    record_setting_change(app_ctx.engine, fishway_db_id(app_ctx, "west"), "mode", SEED_END,
                          action="set", set_by="sup1", old_text="operating",
                          new_text="maintenance")
    s = live_state(app_ctx, "west", SEEDED_NOW)
    assert s.mode == "maintenance"
    assert any(n.startswith("Maintenance (dewatered): no recommendation") for n in s.notes)


def test_the_page_draws_with_the_fishway_in_force(app_ctx, page_module, monkeypatch):
    """The render callback takes the ladder in force: a supervisor's pool-drop maximum of
    0.33 m (1.08 ft; 1 ft = 0.3048 m) is the band of the page's largest-pool-drop bullet."""
    from dashboard.services.profile import fishway_db_id
    from db.dashboard_queries import record_setting_change

    page = page_module("profile")
    monkeypatch.setattr(page, "now_utc", lambda: SEEDED_NOW)
    site_max = app_ctx.ladder("east").fishway.targets.pool_head_drop.max
    record_setting_change(app_ctx.engine, fishway_db_id(app_ctx, "east"),
                          "targets.pool_head_drop.max", SEED_END, action="set", set_by="sup1",
                          old_value=site_max, new_value=0.33)
    token = _triggered("profile-fishway.value")
    try:
        _, _, bullets, drawn = page.render("east", None, None, None)
    finally:
        context_value.reset(token)
    assert drawn == "east"
    drop = next(b for b in bullets if "Largest pool drop" in str(b))
    assert f"{0.33 / FT:.2f}" in str(drop) and f"{site_max / FT:.2f} ft" not in str(drop)

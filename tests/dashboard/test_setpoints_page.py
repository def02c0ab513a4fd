"""Setpoints page: current against recommended settings, their predicted effect, the log link,
the what-if solve and the printable setpoint table.

Outside references: the demo site file read directly (``tomllib``) for ranges, rate limits and
target bands; 1 ft = 0.3048 m exactly (NIST SP 811; from memory); the exit head is defined
as forebay − exit crest (the site file's targets).
"""

from __future__ import annotations

import doctest
import importlib
import sys
import tomllib
from datetime import UTC, datetime, timedelta
from types import SimpleNamespace
from urllib.parse import parse_qs, urlsplit

import pytest

FT = 0.3048  # m, exact (NIST SP 811; from memory)
NOW = datetime(2026, 7, 15, 12, 0, tzinfo=UTC)
FOREBAY_FT, TAILWATER_FT = 254.0, 215.0
CURRENT = {"exit_crest_m": 252.0 * FT, "entrance_E1_crest_m": 214.0 * FT,
           "entrance_E2_crest_m": 214.0 * FT, "aux_G1_opening_pct": 30.0, "aux_PS1_pumps": 0.0}


@pytest.fixture(scope="module")
def raw_site():
    from ops_logic.site import demo_site_path

    return tomllib.loads(demo_site_path().read_text(encoding="utf-8"))


@pytest.fixture(scope="module")
def fresh(tmp_path_factory, demo_site):
    """East ladder readings at NOW − 30 s (no recommendation stored yet), and an app."""
    from dashboard import context
    from dashboard.app import create_app
    from db.engine import make_engine
    from db.migrate import upgrade
    from db.readings import store_batch
    from db.site_sync import sync_site

    engine = make_engine(sqlite_path=tmp_path_factory.mktemp("setpoints") / "s.sqlite")
    upgrade(engine)
    tag = sync_site(engine, demo_site)
    t = NOW - timedelta(seconds=30)
    positions = {"exit_crest_m": "east.exit.crest", "entrance_E1_crest_m": "east.E1.crest",
                 "entrance_E2_crest_m": "east.E2.crest", "aux_G1_opening_pct": "east.G1.opening",
                 "aux_PS1_pumps": "east.PS1.pumps"}
    store_batch(engine, [(tag["east.forebay_level"], t, FOREBAY_FT * FT, 1),
                         (tag["east.tailwater_level"], t, TAILWATER_FT * FT, 1),
                         *((tag[positions[n]], t, v, 1) for n, v in CURRENT.items())])
    old = context._current
    app = create_app(demo_site, engine, secret_key="test")
    app.server.test_client().get("/login")
    yield SimpleNamespace(app=app, engine=engine, ctx=context.current(),
                          page=sys.modules["pages.setpoints"])
    if old is not None:
        context.install(old)
    engine.dispose()


def test_without_a_stored_recommendation_one_is_computed_within_the_rate_limits(
        fresh, raw_site):
    from dashboard.services.setpoints import setpoint_view

    view = setpoint_view(fresh.ctx, "east", NOW)
    assert view.source == "computed" and view.recommendation_id is None
    rows = {r.name: r for r in view.settings}
    assert {n: r.current for n, r in rows.items()} == pytest.approx(CURRENT)
    fw = raw_site["fishways"][0]
    exit_limit_ft = fw["rate_limits"]["exit_crest"]
    aim_ft = FOREBAY_FT - fw["targets"]["exit_head"]["target"]  # crest = forebay − aim
    want_ft = min(max(aim_ft, 252.0 - exit_limit_ft), 252.0 + exit_limit_ft)
    assert rows["exit_crest_m"].recommended / FT == pytest.approx(want_ft, abs=1e-6)
    assert rows["exit_crest_m"].limited_by == "rate limit"  # 253 ft is 1 ft away: 0.5 ft step
    for name, r in rows.items():
        if name.startswith("entrance_"):
            assert abs(r.recommended - r.current) <= fw["rate_limits"]["entrance_crest"] * FT + 1e-9
    crit = {c.name: c for c in view.criteria}
    eh = crit["exit_head"]
    assert eh.before / FT == pytest.approx(FOREBAY_FT - 252.0)
    assert eh.after == pytest.approx(FOREBAY_FT * FT - rows["exit_crest_m"].recommended)
    band = fw["targets"]["exit_head"]
    assert (eh.min / FT, eh.max / FT) == pytest.approx((band["min"], band["max"]))
    assert eh.ok_before is False and eh.ok_after is False  # 2.0 ft, then 1.5 ft: above 1.2 ft


def test_family_rows_show_the_worst_member(fresh):
    from dashboard.services.setpoints import setpoint_view

    view = setpoint_view(fresh.ctx, "east", NOW)
    worst_before = max(p.head_drop_m for p in view.before.pools[1:])
    worst_after = max(p.head_drop_m for p in view.after.pools[1:])
    row = next(c for c in view.criteria if c.name == "head_drop:max")
    assert (row.before, row.after) == pytest.approx((worst_before, worst_after))
    assert "of 39" in row.label
    out = [c for c in view.criteria if c.name.startswith("head_drop:B") and c.ok_after is False]
    assert len(out) == sum(1 for c in view.after.criteria
                           if c.name.startswith("head_drop:") and not c.ok)


def test_a_stored_recommendation_is_shown_and_handed_to_the_log(fresh):
    from dashboard.services.log import prefill
    from dashboard.services.setpoints import log_link, setpoint_view
    from db.dashboard_queries import fishway_db_ids
    from db.history import record_recommendation

    fw = fishway_db_ids(fresh.engine, fresh.ctx.site.site.name)["east"]
    stored = {"exit_crest_m": 252.5 * FT, "aux_G1_opening_pct": 45.0, "gate_m": 0.4}
    rec = record_recommendation(fresh.engine, fw, NOW - timedelta(seconds=20), inputs={},
                                settings=stored, predicted={}, binding_constraint="exit_head",
                                feasible=False, reason="exit crest held at its rate limit")
    view = setpoint_view(fresh.ctx, "east", NOW)
    assert (view.source, view.recommendation_id, view.binding) == ("stored", rec, "exit_head")
    assert any("unknown setting 'gate_m'" in n for n in view.notes)
    rows = {r.name: r for r in view.settings}
    assert rows["exit_crest_m"].recommended == pytest.approx(252.5 * FT)
    assert rows["entrance_E1_crest_m"].recommended == rows["entrance_E1_crest_m"].current
    assert [r.name for r in view.changes] == ["exit_crest_m", "aux_G1_opening_pct"]
    link = log_link(view)
    query = parse_qs(urlsplit(link).query)
    assert query["rec"] == [str(rec)] and query["kind"] == ["adjustment"]
    got = prefill(fresh.ctx, query)
    assert got["adjustments"] == {"exit_crest_m": ("252.00", "252.50"),
                                  "aux_G1_opening_pct": ("30.0", "45.0")}
    assert got["rec"] == rec


@pytest.mark.parametrize(("forebay", "tailwater", "settings", "problems"), [
    ("253.6", "215", {}, []),
    ("77.3 m", "65.5 m", {"aux_G1_opening_pct": "55"}, []),
    ("", "215", {}, ["Forebay: give a level in ft"]),
    ("253.6", "40 cfs", {}, ["Tailwater: '40 cfs' is not a length (expected e.g. ft)"]),
    ("253.6", "215", {"exit_crest_m": "256"},
     ["Exit weir crest: 256.00 ft (78.029 m) is outside 250.00–255.00 ft, at most 0.50 ft per "
      "adjustment"]),
    ("253.6", "215", {"aux_PS1_pumps": "x"},
     ["Pumps running at PS1: could not convert string to float: 'x'"]),
])
def test_what_if_reads_display_units(fresh, forebay, tailwater, settings, problems):
    from dashboard.services.setpoints import what_if

    ladder = fresh.ctx.ladder("east")
    profile, got = what_if(ladder, "us", forebay, tailwater, settings)
    assert got == problems
    if not problems:
        want = 77.3 if forebay.endswith("m") else 253.6 * FT
        assert profile.forebay_m == pytest.approx(want, abs=1e-12)
        if "aux_G1_opening_pct" in settings:
            assert profile.settings["aux_G1_opening_pct"] == 55.0


def test_predict_callback(fresh):
    predict = fresh.page.predict
    ids = [{"type": "setpoints-whatif-setting", "name": n} for n in CURRENT]
    values = ["252.0", "214.0", "214.0", "30", "0"]
    result, fig, style = predict(1, "east", "254.0", "215.0", values, ids)
    assert style == {"display": "block"} and fig.data[0].name == "water"
    assert "Predicted:" in str(result)
    result, fig, style = predict(1, "east", "254.0", "260.0", values, ids)
    assert style == {"display": "none"} and "at or above the forebay" in str(result)


def test_render_callback_links_the_change(fresh, monkeypatch):
    from db.dashboard_queries import fishway_db_ids
    from db.history import record_recommendation

    fw = fishway_db_ids(fresh.engine, fresh.ctx.site.site.name)["east"]
    rec = record_recommendation(fresh.engine, fw, NOW - timedelta(seconds=10), inputs={},
                                settings={"aux_G1_opening_pct": 50.0}, predicted={},
                                binding_constraint="attraction_flow", feasible=True)
    page = fresh.page
    monkeypatch.setattr(page, "now_utc", lambda: NOW)
    status, table, binding, criteria, href, label, table_href = page.render("east", None)
    assert href == (f"/log?kind=adjustment&fishway=east&rec={rec}"
                    "&set=aux_G1_opening_pct%3A30%3A50")
    assert label == "Log this change…" and table_href == "/setpoint-table/east"
    assert "open 20.0 %" in str(table) and "Attraction flow" in str(binding)
    assert "Exit head" in str(criteria)
    assert "Recommendation #" in str(status)


def test_setpoint_table_route_is_gated_and_prints_the_grid(fresh, raw_site):
    from ops_logic.advisory import ADVISORY_CAUTION

    client = fresh.app.server.test_client()
    anonymous = client.get("/setpoint-table/east")
    assert anonymous.status_code == 302 and "/login" in anonymous.headers["Location"]
    with client.session_transaction() as s:
        s["user"] = {"name": "view1", "role": "viewer"}
    page = client.get("/setpoint-table/east")
    assert page.status_code == 200 and page.mimetype == "text/html"
    text = page.get_data(as_text=True)
    fw = raw_site["fishways"][0]
    n_fb = round((fw["forebay_range"][1] - fw["forebay_range"][0]) / 0.5) + 1  # 0.5 ft steps
    n_tw = round((fw["tailwater_range"][1] - fw["tailwater_range"][0]) / 1.0) + 1  # 1 ft steps
    assert f"{n_fb} forebay × {n_tw} tailwater levels" in text
    assert ADVISORY_CAUTION.replace("'", "&#x27;") in text
    assert text.count("<section>") == 5  # one table per setting of the east ladder
    assert client.get("/setpoint-table/nowhere").status_code == 404


@pytest.mark.parametrize("name", ["dashboard.services.setpoints"])
def test_doctests(name):
    result = doctest.testmod(importlib.import_module(name), optionflags=doctest.ELLIPSIS)
    assert result.attempted > 0 and result.failed == 0


# -- the fishway in force and the forebay the ladder sees (on a copy of the seeded database) ----
SEEDED_NOW = NOW + timedelta(seconds=20)  # tests/dashboard/conftest.py: seeded up to NOW


def _store(engine, rows):
    from db.catalog import tag_id
    from db.readings import store_batch

    store_batch(engine, [(tag_id(engine, n), ts, v, f) for n, ts, v, f in rows])


def _change(ctx, fishway, key, **values):
    from dashboard.services.profile import fishway_db_id
    from db.dashboard_queries import record_setting_change

    record_setting_change(ctx.engine, fishway_db_id(ctx, fishway), key, NOW, action="set",
                          set_by="sup1", **values)


def test_a_supervisors_band_is_the_band_of_the_criteria(app_ctx):
    from dashboard.services.setpoints import setpoint_view

    site_max = app_ctx.ladder("east").fishway.targets.pool_head_drop.max
    before = setpoint_view(app_ctx, "east", SEEDED_NOW)
    row = next(c for c in before.criteria if c.name == "head_drop:max")
    assert row.max == pytest.approx(site_max, abs=1e-12)
    _change(app_ctx, "east", "targets.pool_head_drop.max", old_value=site_max, new_value=0.33)
    view = setpoint_view(app_ctx, "east", SEEDED_NOW)
    drops = [c for c in view.criteria if c.name.startswith("head_drop:")]
    assert drops and {c.max for c in drops} == {0.33}  # the band set, every row
    assert {c.max for c in view.after.criteria if c.name.startswith("head_drop:")} == {0.33}
    # each row is judged against it: met exactly when at or below 0.33 m
    assert all(c.ok_after is (c.after <= 0.33 + 1e-9) for c in drops if c.after is not None)


def test_the_predictions_see_the_forebay_less_the_trash_rack_loss(app_ctx):
    from dashboard.services.setpoints import setpoint_view

    _store(app_ctx.engine, [("east.trash_rack_dp", NOW + timedelta(seconds=10), 0.10, 1)])
    view = setpoint_view(app_ctx, "east", SEEDED_NOW)
    s = view.state
    # hand calculation: the ladder sees the forebay gauge less the 0.10 m loss
    assert s.ladder_forebay_m == pytest.approx(s.forebay_m - 0.10, abs=1e-12)
    assert view.before.forebay_m == pytest.approx(s.forebay_m - 0.10, abs=1e-12)
    assert view.after.forebay_m == pytest.approx(s.forebay_m - 0.10, abs=1e-12)
    head = next(c for c in view.criteria if c.name == "exit_head")
    assert head.before == pytest.approx(s.forebay_m - 0.10 - s.settings["exit_crest_m"],
                                        abs=1e-12)
    assert view.source == "computed"  # from the same level (no stored recommendation here)
    assert any(n.endswith("forebay − trash-rack head loss") for n in s.notes)


@pytest.mark.parametrize("mode", ["maintenance", "out_of_service"])
def test_a_fishway_out_of_operation_gets_no_recommendation(app_ctx, mode):
    from dashboard.services.profile import fishway_db_id
    from dashboard.services.setpoints import setpoint_view
    from db.history import record_recommendation

    record_recommendation(app_ctx.engine, fishway_db_id(app_ctx, "west"), NOW, inputs={},
                          settings={"aux_G2_opening_pct": 50.0}, predicted={},
                          binding_constraint=None, feasible=True)
    _change(app_ctx, "west", "mode", old_text="operating", new_text=mode)
    view = setpoint_view(app_ctx, "west", SEEDED_NOW)
    assert view.source == "none" and view.recommendation_id is None and not view.changes
    assert any("no recommendation while the fishway is not operating" in n
               for n in view.state.notes)


@pytest.mark.parametrize(("loss_m", "want_m", "problems"), [
    (None, 253.6 * FT, []),
    (0.10, 253.6 * FT - 0.10, []),  # hand calculation: the gauge level less the live loss
    (1.5, None, ["Trash-rack head loss 1.5 m is above the 1 m taken as real (a blocked rack "
                 "or a failed gauge)"]),
])
def test_what_if_with_the_live_trash_rack_loss(fresh, loss_m, want_m, problems):
    from dashboard.services.setpoints import what_if

    profile, got = what_if(fresh.ctx.ladder("east"), "us", "253.6", "215", {},
                           trash_rack_loss_m=loss_m)
    assert got == problems
    if want_m is not None:
        assert profile.forebay_m == pytest.approx(want_m, abs=1e-12)

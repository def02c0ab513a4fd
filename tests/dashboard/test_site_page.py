"""Site & settings (dashboard/services/site.py, dashboard/pages/site.py): the configuration in
display units, supervisors' overrides of targets, alarm limits and mode (validated like the
site file, stored with old and new value and author, logged), and accounts."""
from __future__ import annotations

import tomllib
from contextlib import contextmanager
from datetime import UTC, datetime, timedelta

import flask
import pytest

from dashboard import auth
from dashboard.services import overview as overview_service
from dashboard.services import site as service
from db.dashboard_queries import setting_changes_frame, users_frame
from db.history import operator_log_frame
from ops_logic.site import demo_site_path

SEED_END = datetime(2026, 7, 15, 12, 0, tzinfo=UTC)  # as in tests/dashboard/conftest.py
NOW = SEED_END + timedelta(seconds=20)
FT = 0.3048  # international foot, exactly (NIST SP 811, 2008, appendix B; from memory)
SUP = {"name": "sup1", "role": "supervisor"}
TOML = tomllib.loads(demo_site_path().read_text(encoding="utf-8"))
EAST = next(f for f in TOML["fishways"] if f["id"] == "east")  # the site file, read directly


@pytest.fixture(scope="module")
def site_page(page_module):
    return page_module("site")


@contextmanager
def signed_in(role: str | None, name: str | None = None):
    server = flask.Flask("site-tests")
    server.secret_key = "test"
    with server.test_request_context("/"):
        if role:
            flask.session["user"] = {"name": name or f"{role}9", "role": role}
        yield


def _changes(engine):
    return setting_changes_frame(engine)


# -- the configuration view ---------------------------------------------------------------------
def test_configuration_is_the_site_file_in_feet(app_ctx):
    eff = service.effective_site(app_ctx.site, app_ctx.engine)
    tables = service.config_tables(app_ctx.site, eff, "east")
    ranges = dict((r[0], r[1]) for r in tables["Operating ranges"][1])
    lo, hi = EAST["forebay_range"]
    assert ranges["Forebay"] == f"{lo:.2f} ft–{hi:.2f} ft"
    targets = {r[0]: r for r in tables["Targets, alarm limits and mode"][1]}
    band = EAST["targets"]["entrance_head"]
    assert targets["Entrance head, maximum"][1:3] == [f"{band['max']:.2f} ft"] * 2
    assert targets["Attraction flow, minimum"][1] == \
        f"{EAST['targets']['min_attraction_flow']:.1f} cfs"
    # the one unit-string limit of the file: trash rack at "0.4 ft"
    assert targets["Trash rack head loss high: limit"][1] == "0.40 ft"
    # 7DADM limit unset in the file: the criterion of its temperature use applies
    assert "20.0 °C (migration corridor criterion)" in targets[
        "Water temperature high (7DADM): limit"][1]
    pools = tables["Controls and pools (exit to entrance)"][1]
    assert len(pools) == 40  # exit pool + 38 repeated + the entrance pool
    assert pools[-1][3:] == ["P40", "203.00 ft", "30.00 ft", "16.00 ft"]
    gates = tables["Entrance gates"][1]
    assert [g[0] for g in gates] == [g["id"] for g in EAST["entrance"]["gates"]]


@pytest.mark.parametrize("text, kind, units, si", [
    ("1.2", "length", "us", 1.2 * FT), ("0.4 m", "length", "us", 0.4),
    ("40", "flow", "us", 40 * FT**3), ("1.1", "length", "si", 1.1), ("5.5", "do", "us", 5.5),
    (" 18 ", "temperature", "us", 18.0)])
def test_values_are_read_in_display_units_or_their_own(text, kind, units, si):
    assert service.parse_value(text, kind, units) == pytest.approx(si, rel=1e-12)


@pytest.mark.parametrize("text", ["", "abc", "nan", "inf", "3 cfs"])
def test_unreadable_values_are_refused(text):
    with pytest.raises(ValueError):
        service.parse_value(text, "length", "us")


# -- overrides -------------------------------------------------------------------------------------
def test_a_supervisor_changes_a_target_with_old_and_new_value_logged(app_ctx):
    msg = service.change_setting(app_ctx.site, app_ctx.engine, SUP, "east",
                                 "targets.entrance_head.max", "1.4", now=NOW,
                                 note="high tailwater season")
    assert msg == "East ladder: Entrance head, maximum 1.50 ft → 1.40 ft"
    row = _changes(app_ctx.engine).iloc[0]
    assert row["old_value"] == pytest.approx(1.5 * FT) and row["new_value"] == pytest.approx(
        1.4 * FT)
    assert (row["set_by"], row["action"], row["note"]) == ("sup1", "set", "high tailwater season")
    log = operator_log_frame(app_ctx.engine, NOW - timedelta(seconds=1), NOW + timedelta(1))
    assert log["author"].tolist() == ["sup1"]
    assert log["text"].iloc[0] == f"Setting changed: {msg} (high tailwater season)"
    # the ladder in force judges with the new band
    eff = service.effective_site(app_ctx.site, app_ctx.engine)
    assert eff.fishways["east"].targets.entrance_head.max == pytest.approx(1.4 * FT)
    f = app_ctx.site.fishway("east")
    p = eff.ladders["east"].solve(sum(f.forebay_range) / 2, sum(f.tailwater_range) / 2)
    assert p.criterion("entrance_head").max == pytest.approx(1.4 * FT)
    # and the overview too
    east = next(s for s in overview_service.snapshot(app_ctx.site, app_ctx.engine, NOW).fishways
                if s.id == "east")
    assert east.metric("entrance_head").hi == pytest.approx(1.4 * FT)


@pytest.mark.parametrize("key, text, reason", [
    ("targets.entrance_head.max", "1.2", "target must lie within"),  # target 1.25 ft
    ("targets.entrance_head.min", "1.6", "min must be below max"),
    ("targets.max_power_density", "-1", "greater than 0"),
    ("alarms.do_low.limit_mg_l", "0", "greater than 0"),
    ("targets.entrance_head.max", "fast", "cannot read"),
    ("targets.no_such", "1", "no editable setting"),
])
def test_values_the_site_file_could_not_hold_are_refused(app_ctx, key, text, reason):
    with pytest.raises(ValueError, match=reason):
        service.change_setting(app_ctx.site, app_ctx.engine, SUP, "east", key, text, now=NOW)
    assert _changes(app_ctx.engine).empty


def test_both_sides_of_a_band_can_move_past_each_other(app_ctx):
    """Target 1.25 → 1.1 ft, then max 1.5 → 1.2 ft: each step holds, and the pair holds
    together when read back (max alone, with the file's target, would not)."""
    e = app_ctx.engine
    service.change_setting(app_ctx.site, e, SUP, "east", "targets.entrance_head.target", "1.1",
                           now=NOW)
    service.change_setting(app_ctx.site, e, SUP, "east", "targets.entrance_head.max", "1.2",
                           now=NOW)
    eff = service.effective_site(app_ctx.site, e)
    band = eff.fishways["east"].targets.entrance_head
    assert (band.target / FT, band.max / FT) == (pytest.approx(1.1), pytest.approx(1.2))
    assert eff.problems == ()
    with pytest.raises(ValueError, match="would not hold without"):  # 1.25 ft > max 1.2 ft
        service.revert_setting(app_ctx.site, e, SUP, "east", "targets.entrance_head.target",
                               now=NOW)
    assert service.revert_setting(app_ctx.site, e, SUP, "east", "targets.entrance_head.max",
                                  now=NOW).endswith("maximum 1.20 ft → 1.50 ft (the site file's)")
    assert service.revert_setting(app_ctx.site, e, SUP, "east", "targets.entrance_head.target",
                                  now=NOW) == ("East ladder: Entrance head, target 1.10 ft → "
                                               "1.25 ft (the site file's)")
    assert len(_changes(e)) == 4


def test_revert_returns_to_the_site_file(app_ctx):
    e = app_ctx.engine
    service.change_setting(app_ctx.site, e, SUP, "west", "alarms.do_low.limit_mg_l", "5.5",
                           now=NOW)
    west = next(s for s in overview_service.snapshot(app_ctx.site, e, NOW).fishways
                if s.id == "west")
    assert west.metric("do").lo == 5.5
    msg = service.revert_setting(app_ctx.site, e, SUP, "west", "alarms.do_low.limit_mg_l",
                                 now=NOW)
    assert msg == "West ladder: Dissolved oxygen low: limit 5.50 mg/L → 5.00 mg/L (the site file's)"
    assert service.effective_site(app_ctx.site, e).fishways["west"].alarms.do_low.limit_mg_l \
        == 5.0
    changes = _changes(e)
    assert changes["action"].tolist() == ["revert", "set"]
    with pytest.raises(ValueError, match="site file's value already"):
        service.revert_setting(app_ctx.site, e, SUP, "west", "alarms.do_low.limit_mg_l",
                               now=NOW)


def test_an_override_the_site_file_no_longer_allows_is_reported_not_applied(app_ctx):
    from db.dashboard_queries import fishway_db_ids, record_setting_change

    fw = fishway_db_ids(app_ctx.engine, app_ctx.site.site.name)["east"]
    record_setting_change(app_ctx.engine, fw, "targets.entrance_head.max", NOW, action="set",
                          set_by="sup1", new_value=0.1)  # below the file's minimum
    eff = service.effective_site(app_ctx.site, app_ctx.engine)
    assert eff.fishways["east"].targets.entrance_head.max == pytest.approx(1.5 * FT)
    assert len(eff.problems) == 1 and "targets.entrance_head.max" in eff.problems[0]


# -- the callbacks as plain functions -------------------------------------------------------
def test_only_supervisors_change_settings(site_page, app_ctx):
    for role in (None, "viewer", "operator"):
        with signed_in(role):
            text, cls, version = site_page.handle_change(
                "apply", "east", "targets.entrance_head.max", "1.4", "", None, 0)
        assert text.startswith("Not changed:") and cls == "feedback error"
        assert version is site_page.no_update
    assert _changes(app_ctx.engine).empty
    with signed_in("supervisor", "sup1"):
        text, cls, version = site_page.handle_change(
            "apply", "east", "targets.entrance_head.max", "1.4", "", None, 3)
    assert cls == "feedback ok" and version == 4 and "Logged by sup1" in text


def test_mode_is_set_through_the_callback_and_shown_on_the_overview(site_page, app_ctx):
    with signed_in("supervisor", "sup1"):
        text, cls, _ = site_page.handle_change("mode", "east", None, None, "gate repair",
                                               "out_of_service", 0)
        again, cls2, _ = site_page.handle_change("mode", "east", None, None, "",
                                                 "out_of_service", 1)
    assert cls == "feedback ok" and "Out of service" in text
    assert cls2 == "feedback error" and "already" in again
    east = next(s for s in overview_service.snapshot(app_ctx.site, app_ctx.engine, NOW).fishways
                if s.id == "east")
    assert east.state == "out_of_service"


def test_history_shows_what_users_typed_as_text(site_page, app_ctx):
    note = "<script>alert(1)</script> & <b>bold</b>"
    service.change_setting(app_ctx.site, app_ctx.engine, SUP, "east",
                           "alarms.trash_rack_dp_high.limit_m", "0.5", now=NOW, note=note)
    with signed_in("viewer"):
        _, changes = site_page.show("east", 1)
    cells = [c.children for row in changes.children[1].children for c in row.children]
    assert note in cells  # a plain string child: Dash renders it as text, never as markup
    assert "0.40 ft" in cells and "0.50 ft" in cells


def test_accounts_are_created_by_supervisors_only(site_page, app_ctx):
    args = ("new.operator", "operator", "long-enough-1", "long-enough-1", 0)
    with signed_in("operator"):
        text, cls, *_ = site_page.create_account(1, *args)
    assert cls == "feedback error" and "supervisor" in text
    with signed_in("supervisor", "sup1"):
        text, cls, version, pw1, pw2 = site_page.create_account(1, *args)
        assert cls == "feedback ok" and version == 1 and (pw1, pw2) == ("", "")
        dup = site_page.create_account(1, *args)
        short = site_page.create_account(1, "x.y", "viewer", "short", "short", 0)
        differ = site_page.create_account(1, "x.z", "viewer", "long-enough-1", "long-enough-2",
                                          0)
    for (text, cls, *_), why in ((dup, "exists already"), (short, "8 characters"),
                                 (differ, "differ")):
        assert why in text and cls == "feedback error"
    users = users_frame(app_ctx.engine)
    assert users.loc["new.operator", "role"] == "operator"
    assert "x.y" not in users.index and "x.z" not in users.index
    log = operator_log_frame(app_ctx.engine, NOW - timedelta(seconds=1), NOW + timedelta(1))
    assert log["text"].tolist() == ["Account new.operator created with role operator"]
    assert log["author"].tolist() == ["sup1"]
    # the new account signs in with the password given (scrypt hash checked by auth)
    from db.catalog import get_user

    assert auth.verify_password("long-enough-1",
                                get_user(app_ctx.engine, "new.operator")["password_hash"])


def test_layout_by_role(site_page, app_ctx):
    with signed_in(None):
        assert "Sign in" in str(site_page.layout())
    with signed_in("viewer"):
        viewer = str(site_page.layout())
    with signed_in("supervisor"):
        supervisor = str(site_page.layout())
    assert site_page.SITE_APPLY not in viewer and "changed by supervisors" in viewer
    assert site_page.SITE_APPLY in supervisor and site_page.SITE_USER_CREATE in supervisor
    assert "Advisory only" in supervisor  # the caution beside the settings


def test_history_formats_keys_this_page_does_not_offer_by_their_unit(app_ctx):
    """The alarms page records its own edits (deadbands, say) in the same table."""
    from db.dashboard_queries import fishway_db_ids, record_setting_change

    fw = fishway_db_ids(app_ctx.engine, app_ctx.site.site.name)["east"]
    record_setting_change(app_ctx.engine, fw, "alarms.head_drop.deadband_m", NOW, action="set",
                          set_by="sup1", old_value=0.05 * FT, new_value=0.1 * FT)
    (row,) = service.changes_rows(app_ctx.site, app_ctx.engine)
    assert (row["setting"], row["from"], row["to"]) == ("alarms.head_drop.deadband_m",
                                                        "0.05 ft", "0.10 ft")
    eff = service.effective_site(app_ctx.site, app_ctx.engine)
    assert eff.fishways["east"].alarms.head_drop.deadband_m == pytest.approx(0.1 * FT)

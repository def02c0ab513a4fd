"""Operator log page: entries are checked, stored with their author and SI values, never
edited; staff gauge readings are checked against the sensor; only operators may write; user
text stays text.

Unit conversions use the exact definition of the international foot, 1 ft = 0.3048 m
(NIST SP 811, from memory). The gauge tolerance is the demo site's ``gauge_disagree`` limit,
0.03 m, the "0.1 ft / 3 cm" of common practice.
"""

from __future__ import annotations

import doctest
import importlib
import sys
from datetime import UTC, datetime, timedelta
from pathlib import Path
from types import SimpleNamespace

import flask
import pytest
import sqlalchemy as sa

FT = 0.3048  # m per international foot, exact by definition (NIST SP 811; from memory)
NOW = datetime(2026, 7, 15, 12, 0, tzinfo=UTC)


@pytest.fixture(scope="module")
def fresh(tmp_path_factory, demo_site):
    """A migrated database with the demo catalogue and an app on it (callbacks consumed by
    one request, so no other app picks them up); the previous dashboard context is restored
    afterwards."""
    from dashboard import context
    from dashboard.app import create_app
    from db.engine import make_engine
    from db.migrate import upgrade
    from db.site_sync import sync_site

    engine = make_engine(sqlite_path=tmp_path_factory.mktemp("log") / "log.sqlite")
    upgrade(engine)
    ids = sync_site(engine, demo_site)
    old = context._current
    app = create_app(demo_site, engine, secret_key="test")
    app.server.test_client().get("/login")
    yield SimpleNamespace(app=app, engine=engine, ctx=context.current(), tag=ids,
                          page=sys.modules["pages.log"])
    if old is not None:
        context.install(old)
    engine.dispose()


def _form(**kw):
    from dashboard.services.log import LogForm

    return LogForm(**{"kind": "shift_note", "fishway_id": "east", **kw})


def _entries(engine, author=None):
    from db.dashboard_queries import log_entries

    return log_entries(engine, author=author, limit=1000)


def test_adjustment_is_stored_in_si_with_its_actuator_setting(fresh):
    from dashboard.services.log import submit
    from db.dashboard_queries import fishway_db_ids
    from db.history import actuator_settings_frame

    form = _form(kind="adjustment", text="entrance head high",
                 adjustments={"entrance_E1_crest_m": ("214.78", "214.14"),
                              "aux_G1_opening_pct": ("", "52.8"),
                              "exit_crest_m": ("", "")})  # empty: not an adjustment
    result = submit(fresh.ctx, "op1", form, NOW)
    assert result.ok, result.problems
    assert len(result.ids) == 2
    entries = _entries(fresh.engine).set_index("id").loc[list(result.ids)]
    crest = entries[entries["actuator"] == "entrance_E1_crest_m"].iloc[0]
    assert crest["from_value"] == pytest.approx(214.78 * FT, abs=1e-9)
    assert crest["to_value"] == pytest.approx(214.14 * FT, abs=1e-9)
    assert set(entries["author"]) == {"op1"} and set(entries["kind"]) == {"adjustment"}
    valve = entries[entries["actuator"] == "aux_G1_opening_pct"].iloc[0]
    assert valve["to_value"] == pytest.approx(52.8) and valve["from_value"] != valve[
        "from_value"]  # NaN: no "from" given
    fw = fishway_db_ids(fresh.engine, fresh.ctx.site.site.name)["east"]
    made = actuator_settings_frame(fresh.engine, fw, NOW - timedelta(hours=1),
                                   NOW + timedelta(hours=1))
    assert set(made["actuator"]) >= {"entrance_E1_crest_m", "aux_G1_opening_pct"}
    assert set(made["source"]) == {"manual"} and set(made["set_by"]) == {"op1"}


def test_adjustment_carrying_out_a_recommendation_links_it(fresh):
    from dashboard.services.log import submit
    from db.dashboard_queries import fishway_db_ids
    from db.history import actuator_settings_frame, record_recommendation

    fw = fishway_db_ids(fresh.engine, fresh.ctx.site.site.name)
    rec = record_recommendation(fresh.engine, fw["east"], NOW, inputs={}, settings={
        "aux_G1_opening_pct": 60.0}, predicted={}, binding_constraint="attraction_flow",
        feasible=True)
    when = NOW + timedelta(minutes=1)
    ok = submit(fresh.ctx, "op1", _form(kind="adjustment", text="as recommended",
                                        recommendation_id=rec,
                                        adjustments={"aux_G1_opening_pct": ("52.8", "60")}),
                when)
    assert ok.ok, ok.problems
    made = actuator_settings_frame(fresh.engine, fw["east"], when, when + timedelta(seconds=1))
    assert made["source"].tolist() == ["recommendation"]
    assert made["recommendation_id"].tolist() == [rec]
    # a recommendation of another fishway is refused, and nothing is stored
    before = len(_entries(fresh.engine))
    bad = submit(fresh.ctx, "op1", _form(kind="adjustment", fishway_id="west", text="x",
                                         recommendation_id=rec,
                                         adjustments={"aux_G2_opening_pct": ("", "50")}), when)
    assert not bad.ok and any("Recommendation" in p for p in bad.problems)
    assert len(_entries(fresh.engine)) == before


@pytest.mark.parametrize(("adjustments", "text", "problem"), [
    ({"exit_crest_m": ("", "256.0")}, "why", "Exit weir crest, to: 256.00 ft is outside"),
    ({"aux_PS1_pumps": ("", "1.5")}, "why", "whole number"),
    ({"aux_G1_opening_pct": ("", "abc")}, "why", "Auxiliary valve G1 opening, to"),
    ({"aux_G1_opening_pct": ("", "40")}, "  ", "Why: write a few words"),
    ({"exit_crest_m": ("", "")}, "why", "at least one actuator"),
])
def test_bad_adjustments_name_the_field_and_store_nothing(fresh, adjustments, text, problem):
    from dashboard.services.log import submit

    before = len(_entries(fresh.engine))
    result = submit(fresh.ctx, "op1", _form(kind="adjustment", text=text,
                                            adjustments=adjustments), NOW)
    assert not result.ok
    assert any(problem in p for p in result.problems), result.problems
    assert len(_entries(fresh.engine)) == before


@pytest.fixture(scope="module")
def sensor_reading(fresh):
    """A P10 gauge reading of 234.00 ft at NOW − 2 min (and a failed one at NOW − 30 min)."""
    from db.readings import store_batch

    tag = fresh.tag["east.P10.level"]
    store_batch(fresh.engine, [(tag, NOW - timedelta(minutes=2), 234.00 * FT, 1),
                               (tag, NOW - timedelta(minutes=30), 230.0 * FT, 4)])
    return 234.00 * FT


# 0.1 ft = 3.048 cm: just beyond the 3 cm tolerance (common practice: "0.1 ft / 3 cm")
@pytest.mark.parametrize(("offset_ft", "flagged"), [
    (0.00, False), (0.05, False), (-0.09, False), (0.10, True), (0.12, True), (-0.25, True)])
def test_staff_gauge_reading_is_checked_against_the_sensor(fresh, sensor_reading, offset_ft,
                                                           flagged):
    from dashboard.services.log import list_entries, manual_tag_name, submit
    from db.catalog import tag_id, tags_frame
    from db.readings import readings_frame

    when = NOW + timedelta(seconds=round(offset_ft * 1000))  # a distinct time per case
    reading_ft = 234.00 + offset_ft
    result = submit(fresh.ctx, "op1", _form(kind="observation", topic="staff_gauge",
                                            gauge_where="P10", gauge_reading=f"{reading_ft}",
                                            when=""), when)
    assert result.ok, result.problems
    entry = _entries(fresh.engine).set_index("id").loc[result.ids[0]]
    assert entry["actuator"] == "staff_gauge:P10"
    assert entry["to_value"] == pytest.approx(reading_ft * FT, abs=1e-9)
    assert entry["from_value"] == pytest.approx(sensor_reading, abs=1e-9)
    assert ("FLAGGED" in entry["text"]) is flagged
    view = next(e for e in list_entries(fresh.ctx, when, period_h=None) if e.id == result.ids[0])
    assert view.flagged is flagged
    # also stored as a manual reading (flag 2: not evaluated) of a manual catalogue tag
    tag = tag_id(fresh.engine, manual_tag_name("east", "P10"))
    row = tags_frame(fresh.engine).loc[tag]
    assert (row["source"], row["role"], row["pool_id"]) == ("manual", "staff_gauge", "P10")
    got = readings_frame(fresh.engine, tag, when, when + timedelta(seconds=1))
    assert got["value"].tolist() == pytest.approx([reading_ft * FT])
    assert got["flag"].tolist() == [2]


def test_staff_gauge_without_a_sensor_reading_nearby_says_so(fresh):
    from dashboard.services.log import submit

    result = submit(fresh.ctx, "op1", _form(kind="observation", topic="staff_gauge",
                                            gauge_where="forebay", gauge_reading="254.1"),
                    NOW - timedelta(days=3))
    assert result.ok
    entry = _entries(fresh.engine).set_index("id").loc[result.ids[0]]
    assert "no sensor reading" in entry["text"] and "FLAGGED" not in entry["text"]
    assert entry["from_value"] != entry["from_value"]  # NaN


@pytest.mark.parametrize(("form", "problem"), [
    ({"kind": "observation", "topic": "staff_gauge", "gauge_where": "P99",
      "gauge_reading": "1"}, "Staff gauge: choose"),
    ({"kind": "observation", "topic": "staff_gauge", "gauge_where": "P10",
      "gauge_reading": "3 cfs"}, "not a length"),
    ({"kind": "observation", "topic": "debris", "debris_place": "moon", "text": "x"},
     "Debris cleaned: say where"),
    ({"kind": "shift_note", "text": ""}, "Note: write"),
    ({"kind": "shift_note", "text": "x" * 4001}, "at most 4000"),
    ({"kind": "shift_note", "text": "x", "when": "25:99"}, "Time:"),
    ({"kind": "shift_note", "text": "x", "when": "2026-07-16 12:00"}, "in the future"),
    ({"kind": "correction", "text": "x", "refers_to": "abc"}, "Corrects entry"),
    ({"kind": "correction", "text": "x", "refers_to": "99999"}, "no entry #99999"),
    ({"kind": "nonsense"}, "Kind"),
])
def test_bad_entries_are_refused_with_the_field_named(fresh, form, problem):
    from dashboard.services.log import submit

    result = submit(fresh.ctx, "op1", _form(**form), NOW)
    assert not result.ok and any(problem in p for p in result.problems), result.problems


def test_debris_and_fish_observations_carry_their_topic(fresh):
    from dashboard.services.log import submit

    a = submit(fresh.ctx, "op1", _form(kind="observation", topic="debris",
                                       debris_place="trash rack", text="two bags of leaves"),
               NOW)
    b = submit(fresh.ctx, "op1", _form(kind="observation", topic="fish_entrance",
                                       text="fish holding below E1"), NOW)
    texts = _entries(fresh.engine).set_index("id")["text"]
    assert texts[a.ids[0]] == "Debris cleaned (trash rack): two bags of leaves"
    assert texts[b.ids[0]] == "Fish behaviour at the entrance: fish holding below E1"


def test_a_mistake_is_corrected_by_a_new_entry_never_edited(fresh):
    from dashboard.services.log import list_entries, submit
    from db.models import OperatorLogEntry

    first = submit(fresh.ctx, "op1", _form(text="E2 crest at 241 ft"), NOW).ids[0]
    fix = submit(fresh.ctx, "sup_x", _form(kind="correction", refers_to=f"#{first}",
                                           text="E2 crest at 214 ft, not 241"), NOW).ids[0]
    views = {e.id: e for e in list_entries(fresh.ctx, NOW, period_h=None)}
    assert views[first].text == "E2 crest at 241 ft"  # the original stays as written
    assert views[first].corrected_by == (fix,)
    assert views[fix].refers_to == first and views[fix].details == f"corrects #{first}"
    t = OperatorLogEntry.__table__
    with pytest.raises(sa.exc.DatabaseError, match="append-only"), fresh.engine.begin() as c:
        c.execute(sa.update(t).where(t.c.id == first).values(text="edited"))


def test_list_filters(fresh):
    from dashboard.services.log import list_entries, submit

    submit(fresh.ctx, "op2", _form(text="pickets 50% blocked", fishway_id="west"), NOW)
    submit(fresh.ctx, "op2", _form(text="pickets 50 blocked", fishway_id="west"), NOW)
    got = list_entries(fresh.ctx, NOW, text="50%", period_h=None)
    assert [e.text for e in got] == ["pickets 50% blocked"]  # % is literal, not a wildcard
    west = list_entries(fresh.ctx, NOW, fishway_id="west", period_h=None)
    assert west and {e.fishway for e in west} == {"West ladder"}
    assert {e.author for e in list_entries(fresh.ctx, NOW, author="op2", period_h=None)} == {
        "op2"}
    kinds = list_entries(fresh.ctx, NOW, kinds=["correction"], period_h=None)
    assert kinds and {e.kind for e in kinds} == {"Correction"}
    assert list_entries(fresh.ctx, NOW + timedelta(days=30), period_h=24) == []


def _request(app, user):
    ctx = app.server.test_request_context("/_dash-update-component", method="POST")
    ctx.push()
    if user is not None:
        flask.session["user"] = user
    return ctx


@pytest.mark.parametrize(("user", "reason"), [
    (None, "sign in first"),
    ({"name": "view1", "role": "viewer"}, "needs the operator role"),
])
def test_save_callback_refuses_anyone_below_operator(fresh, user, reason):
    save = fresh.page.save
    before = len(_entries(fresh.engine))
    ctx = _request(fresh.app, user)
    try:
        out = save(1, "shift_note", "east", "", "written by a viewer", "staff_gauge", None,
                   "", None, "", None, [], [], [], 0)
    finally:
        ctx.pop()
    assert out[0].startswith("Not saved:") and reason in out[0]
    assert out[1] == "feedback error"
    assert len(_entries(fresh.engine)) == before


def test_save_callback_records_the_signed_in_author(fresh):
    ctx = _request(fresh.app, {"name": "op1", "role": "operator"})
    try:
        out = fresh.page.save(1, "shift_note", "east", "", "handover: all normal",
                              "staff_gauge", None, "", None, "", None, [], [], [], 3)
    finally:
        ctx.pop()
    assert out[1] == "feedback ok" and out[2] == 4  # the list is asked to refresh
    assert out[6] == out[7] == []  # no adjustment rows sent: nothing to clear
    newest = _entries(fresh.engine)
    row = newest[newest["text"] == "handover: all normal"].iloc[0]
    assert row["author"] == "op1" and row["kind"] == "shift_note"


def test_saving_an_adjustment_moves_the_from_fields(fresh):
    ctx = _request(fresh.app, {"name": "op1", "role": "operator"})
    try:
        out = fresh.page.save(1, "adjustment", "east", "", "valve opened for attraction",
                              "staff_gauge", None, "", None, "", None, ["35.9", ""],
                              ["41", ""], [{"type": "log-adj-to", "name": "aux_G1_opening_pct"},
                                           {"type": "log-adj-to", "name": "aux_PS1_pumps"}], 0)
    finally:
        ctx.pop()
    assert out[1] == "feedback ok"
    assert out[6] == ["", ""] and out[7] == ["41", ""]  # "to" cleared, "from" = new position
    row = _entries(fresh.engine, author="op1").iloc[0]
    assert (row["actuator"], row["from_value"], row["to_value"]) == ("aux_G1_opening_pct",
                                                                      35.9, 41.0)


def test_user_text_is_rendered_as_text(fresh):
    from dash import html

    from dashboard.services.log import EntryView

    evil = "<script>window.__x = 1</script><b>bold</b>"
    row = fresh.page._entry_row(EntryView(1, "t", "<i>op</i>", "Shift note", "East ladder", "",
                                          evil, False, None, ()))
    cells = row.children
    assert cells[6].children == evil and isinstance(cells[6], html.Td)
    assert cells[2].children == "<i>op</i>"
    pages = Path(fresh.page.__file__).parent
    for name in ("log", "profile", "setpoints", "trends"):
        source = (pages / f"{name}.py").read_text()
        assert "dangerously_allow_html" not in source and "Markdown" not in source


@pytest.mark.parametrize(("text", "expected"), [
    ("", NOW),
    ("03:30", datetime(2026, 7, 15, 11, 30, tzinfo=UTC)),  # site time is UTC−8
    ("04:03", datetime(2026, 7, 15, 12, 3, tzinfo=UTC)),   # within the 5 min slack
    ("05:00", datetime(2026, 7, 14, 13, 0, tzinfo=UTC)),   # later than now: yesterday
    ("2026-07-14 20:00", datetime(2026, 7, 15, 4, 0, tzinfo=UTC)),
])
def test_parse_when_reads_site_time(text, expected):
    from dashboard.services.log import parse_when

    assert parse_when(text, NOW, "Etc/GMT+8") == expected


def test_prefill_from_the_setpoints_link(fresh):
    from dashboard.services.log import prefill

    got = prefill(fresh.ctx, {"kind": "adjustment", "fishway": "east", "rec": "12",
                              "set": ["exit_crest_m:76.9:77.0", "bogus:1:2", "aux_PS1_pumps:x:1"]})
    assert got["adjustments"] == {"exit_crest_m": (f"{76.9 / FT:.2f}", f"{77.0 / FT:.2f}")}
    assert got["rec"] == 12 and "recommendation #12" in got["text"]
    assert prefill(fresh.ctx, {"kind": ["correction", "adjustment"], "refers_to": ["7"]})[
        "kind"] == "correction"  # a repeated key: the first counts
    assert prefill(fresh.ctx, {"fishway": "nowhere", "kind": "drop table", "rec": "1;2"}) == {
        "fishway": "east", "kind": "shift_note", "adjustments": {}, "rec": None,
        "refers_to": ""}


@pytest.mark.parametrize("name", ["dashboard.services.log", "db.dashboard_queries"])
def test_doctests(name):
    result = doctest.testmod(importlib.import_module(name), optionflags=doctest.ELLIPSIS)
    assert result.attempted > 0 and result.failed == 0

"""Data health (dashboard/services/health.py, dashboard/pages/health.py): feed status, newest
reading per tag and its age, QARTOD flag counts over the last hour and day."""
from __future__ import annotations

from contextlib import contextmanager
from datetime import UTC, datetime, timedelta

import flask
import pytest
from ioos_qc.qartod import QartodFlags

from dashboard import auth
from dashboard.services import health
from db.catalog import tag_id
from db.dashboard_queries import QARTOD_FLAG_NAMES
from db.feed_health import update_feed_health
from db.readings import readings_frame, store_batch

SEED_END = datetime(2026, 7, 15, 12, 0, tzinfo=UTC)  # as in tests/dashboard/conftest.py
NOW = SEED_END + timedelta(seconds=20)
FT = 0.3048  # international foot, exactly (NIST SP 811, 2008, appendix B; from memory)


@pytest.fixture(scope="module")
def health_page(page_module):
    return page_module("health")


@contextmanager
def signed_in(role: str | None):
    server = flask.Flask("health-tests")
    server.secret_key = "test"
    with server.test_request_context("/"):
        if role:
            flask.session["user"] = {"name": f"{role}9", "role": role}
        yield


def test_flag_names_are_the_qartod_flags_of_ioos_qc():
    # IOOS QARTOD flags manual v1.2 (2020), as ioos_qc.qartod.QartodFlags holds them
    assert {QartodFlags.GOOD: "pass", QartodFlags.UNKNOWN: "not evaluated",
            QartodFlags.SUSPECT: "suspect", QartodFlags.FAIL: "fail",
            QartodFlags.MISSING: "missing"} == QARTOD_FLAG_NAMES
    assert health.FLAGS == (1, 2, 3, 4, 9)


@pytest.mark.parametrize("success_age_s, error_age_s, status", [
    (5, None, "ok"), (60, None, "ok"), (61, None, "stale"),  # feed_comms max_age_s = 60 s
    (5, 2, "failing"), (5, 30, "ok"), (None, 3, "failing")])
def test_feed_status(app_ctx, success_age_s, error_age_s, status):
    e = app_ctx.engine
    if success_age_s is not None:
        update_feed_health(e, "plant", NOW - timedelta(seconds=success_age_s), ok=True,
                           readings_per_min=210.0, lag_s=1.5)
    if error_age_s is not None:
        update_feed_health(e, "plant", NOW - timedelta(seconds=error_age_s), ok=False,
                           error="connection refused <b>not markup</b>")
    (row,) = health.feed_rows(app_ctx.site, e, NOW)
    assert row.status == status and row.feed == "plant"
    if error_age_s is not None:
        assert row.last_error == "connection refused <b>not markup</b>"
    assert row.errors_in_a_row == (1 if error_age_s is not None else 0)  # the last call failed
    if success_age_s is not None:
        assert row.rate == "210 /min" and row.lag == "1.5 s"


def _poll(engine, seconds: float, name: str | None = None) -> None:
    """Give tags another poll period (the seeded readings are 60 s apart, the site's 10 s)."""
    with engine.begin() as conn:
        conn.exec_driver_sql("UPDATE tags SET poll_period_s = ?" + (" WHERE name = ?" if name
                                                                    else ""),
                             (seconds, name) if name else (seconds,))


def test_tag_rows_count_flags_like_pandas_on_the_raw_readings(app_ctx):
    e = app_ctx.engine
    _poll(e, 60.0, "east.forebay_level")
    t = SEED_END.timestamp()
    level = tag_id(e, "east.P20.level")
    store_batch(e, [(level, t + 1, 70.0, 3), (level, t + 2, 71.0, 4),
                    (level, t + 3, None, 9), (level, t + 4, 70.1, 2)])
    rows = {r.name: r for r in health.tag_rows(app_ctx.site, e, NOW)}
    row = rows["east.P20.level"]
    for window, got in ((timedelta(hours=1), row.hour), (timedelta(days=1), row.day)):
        raw = readings_frame(e, level, NOW - window, NOW)["flag"].value_counts()
        assert got == tuple(int(raw.get(f, 0)) for f in (1, 2, 3, 4, 9))
    assert row.hour[2:] == (1, 1, 1) and row.problem
    assert row.status == "ok"  # the newest (flag 2, not evaluated) is usable
    assert row.flag == "2 not evaluated"
    # 64 readings with a value or missing in the hour, 63 with a value; 360 expected at 10 s
    assert row.hour_received == f"{100 * 63 / 360:.0f} %"
    forebay = rows["east.forebay_level"]
    raw_m = readings_frame(e, tag_id(e, "east.forebay_level"), SEED_END,
                           NOW)["value"].iloc[-1]
    assert forebay.value == f"{raw_m / FT:.2f} ft" and forebay.age == "20 s"
    assert forebay.hour_received == "100 %" and not forebay.gaps and not forebay.problem
    assert rows["east.do"].gaps and rows["east.do"].problem  # 60 of 360 expected at 10 s


@pytest.mark.parametrize("poll_s, gaps", [(60.0, False), (55.0, False), (50.0, True)])
def test_gaps_below_ninety_percent_of_the_expected_readings(app_ctx, poll_s, gaps):
    # 60 readings in the last hour; expected 3600 / poll: 100 %, 92 %, 83 %
    _poll(app_ctx.engine, poll_s, "west.do")
    row = next(r for r in health.tag_rows(app_ctx.site, app_ctx.engine, NOW)
               if r.name == "west.do")
    assert row.gaps is gaps and row.problem is gaps


@pytest.mark.parametrize("flag, value, status", [(3, 1.0, "suspect"), (4, 1.0, "fail"),
                                                 (9, None, "missing")])
def test_newest_reading_status(app_ctx, flag, value, status):
    e = app_ctx.engine
    store_batch(e, [(tag_id(e, "west.do"), SEED_END.timestamp() + 5, value, flag)])
    row = next(r for r in health.tag_rows(app_ctx.site, e, NOW) if r.name == "west.do")
    assert row.status == status and row.problem


def test_old_readings_are_stale_and_missing_tags_say_never(app_ctx):
    rows = health.tag_rows(app_ctx.site, app_ctx.engine, SEED_END + timedelta(seconds=31))
    assert {r.status for r in rows} == {"stale"}  # 3 × 10 s poll period exceeded
    with app_ctx.engine.begin() as conn:
        conn.exec_driver_sql("INSERT INTO tags (fishway_id, name, quantity, unit, "
                             "poll_period_s) SELECT fishway_id, 'east.new_gauge', quantity, "
                             "unit, 10 FROM tags WHERE name = 'east.do'")
    new = next(r for r in health.tag_rows(app_ctx.site, app_ctx.engine, NOW)
               if r.name == "east.new_gauge")
    assert (new.status, new.last, new.hour) == ("none", "never", (0, 0, 0, 0, 0))


def test_refresh_callback_filters_problems_and_needs_a_user(health_page, app_ctx):
    e = app_ctx.engine
    _poll(e, 60.0)  # no gaps anywhere
    store_batch(e, [(tag_id(e, "west.do"), SEED_END.timestamp() + 5, 1.0, 4)])
    with signed_in("viewer"):
        feeds, tags_all, summary = health_page.refresh(1, [])
        _, tags_bad, _ = health_page.refresh(1, ["only"])
    n_tags = len(health.tag_rows(app_ctx.site, e, NOW))

    def body_rows(table):
        return table.children[1].children

    assert len(body_rows(tags_all)) == n_tags and len(body_rows(tags_bad)) == 1
    assert summary.startswith(f"{n_tags} tags, 1 with problems")
    assert "No feed has reported yet" in str(feeds)
    with signed_in(None), pytest.raises(auth.PermissionDenied):
        health_page.refresh(1, [])

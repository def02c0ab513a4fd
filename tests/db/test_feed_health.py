"""Feed health (db/feed_health.py) and the catalogue (db/catalog.py), both engines."""
from __future__ import annotations

from datetime import UTC, datetime, timedelta

import pytest

from db.catalog import (
    QUANTITIES,
    add_fishway,
    add_site,
    add_tag,
    add_user,
    get_user,
    tag_id,
    tags_frame,
)
from db.feed_health import feed_health_frame, update_feed_health

T = datetime(2026, 10, 1, tzinfo=UTC)


def test_feed_health_keeps_last_success_through_failures(db_engine):
    update_feed_health(db_engine, "opcua", T, ok=True, readings_per_min=600.0, lag_s=0.8)
    update_feed_health(db_engine, "opcua", T + timedelta(seconds=10), ok=False,
                       error="BadCommunicationError")
    update_feed_health(db_engine, "csv", T, ok=True, readings_per_min=1.0, lag_s=30.0)
    frame = feed_health_frame(db_engine)
    assert list(frame.index) == ["csv", "opcua"]
    row = frame.loc["opcua"]
    assert row["last_success_at"].to_pydatetime() == T
    assert row["last_error"] == "BadCommunicationError"
    assert row["updated_at"].to_pydatetime() == T + timedelta(seconds=10)
    assert row["readings_per_min"] == 600.0 and row["lag_s"] == 0.8
    with pytest.raises(ValueError):
        update_feed_health(db_engine, "opcua", T, ok=False)
    with pytest.raises(ValueError):
        update_feed_health(db_engine, "opcua", T, ok=True, lag_s=-1.0)


def test_failed_polls_in_a_row_are_counted_by_the_database(db_engine):
    """The count rises by one per failure (the first failure of a new feed included) and
    returns to 0 at a success; other feeds keep their own."""
    def count(feed):
        return int(feed_health_frame(db_engine).loc[feed, "consecutive_errors"])

    for k in range(3):
        update_feed_health(db_engine, "opcua", T + timedelta(seconds=10 * k), ok=False,
                           error=f"timeout {k}")
        assert count("opcua") == k + 1
    update_feed_health(db_engine, "csv", T, ok=True, readings_per_min=1.0, lag_s=5.0)
    assert count("csv") == 0 and count("opcua") == 3
    update_feed_health(db_engine, "opcua", T + timedelta(seconds=40), ok=True,
                       readings_per_min=60.0, lag_s=1.0)
    assert count("opcua") == 0
    update_feed_health(db_engine, "opcua", T + timedelta(seconds=50), ok=False, error="again")
    assert count("opcua") == 1


def test_catalogue(db_engine):
    site = add_site(db_engine, "Catalogue site", time_zone="Etc/GMT+8")
    fw = add_fishway(db_engine, site, "Upper ladder", kind="pool_and_weir")
    t1 = add_tag(db_engine, fw, "U.pool3.level", "water_level", "m", poll_period_s=5, role="pool",
                 pool_id="P3",
                 source="opcua", source_address="ns=2;i=1043", fail_low=90.0, fail_high=120.0,
                 suspect_low=95.0, suspect_high=115.0)
    tags = tags_frame(db_engine, fishway_id=fw)
    assert list(tags.index) == [t1] and tag_id(db_engine, "U.pool3.level") == t1
    row = tags.loc[t1]
    assert (row["role"], row["pool_id"], row["setting"]) == ("pool", "P3", None)
    assert (row["fail_low"], row["suspect_high"], row["source_address"]) == \
        (90.0, 115.0, "ns=2;i=1043")
    with pytest.raises(KeyError):
        tag_id(db_engine, "nope")
    add_user(db_engine, "sup1", "supervisor", "$argon2id$placeholder")
    user = get_user(db_engine, "sup1")
    assert user["role"] == "supervisor" and user["created_at"].tzinfo is not None
    assert get_user(db_engine, "ghost") is None


@pytest.mark.parametrize("kwargs", [
    {"quantity": "colour"},
    {"poll_period_s": 0},
    {"fail_low": 5.0, "fail_high": 1.0},
    {"fail_low": 0.0, "suspect_low": -1.0},
    {"fail_high": 10.0, "suspect_high": 11.0},
    {"fail_low": float("nan")},
])
def test_tag_validation(db_engine, kwargs):
    fw = add_fishway(db_engine, add_site(db_engine, "V site"), "V fishway")
    args = {"quantity": "temperature", "poll_period_s": 60, **kwargs}
    with pytest.raises(ValueError):
        add_tag(db_engine, fw, "V.t", args.pop("quantity"), "degC", **args)


def test_quantities_cover_the_brief():
    # the brief, and the quantities ops_logic.tags.TagDef uses
    assert {"water_level", "temperature", "dissolved_oxygen", "position", "flow",
            "head_differential", "opening", "count", "status"} <= set(QUANTITIES)


def test_user_role_is_checked(db_engine):
    with pytest.raises(ValueError):
        add_user(db_engine, "x", "admin", "h")

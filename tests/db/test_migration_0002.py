"""Migration 0002 (setting_changes): upgrading from 0001 keeps the data; the new table is
append-only and gives the overrides in force (db/migrations/versions/0002_setting_changes.py,
its model db.models.SettingChange, the dashboard section of db/dashboard_queries.py)."""
from __future__ import annotations

import subprocess
import sys
from datetime import UTC, datetime, timedelta

import pytest
import sqlalchemy as sa

from db.catalog import add_fishway, add_site, add_tag, add_user
from db.dashboard_queries import (
    flag_counts,
    record_setting_change,
    setting_changes_frame,
    setting_overrides,
    users_frame,
)
from db.engine import make_engine
from db.history import add_log_entry
from db.migrate import current_revision, head_revision, upgrade
from db.readings import readings_frame, store_batch

BACKENDS = ["sqlite", "postgresql"]
T0 = datetime(2026, 6, 1, tzinfo=UTC)
TABLES = ("sites", "fishways", "tags", "users", "readings", "rollups", "operator_log")


def _counts(engine) -> dict[str, int]:
    with engine.connect() as conn:
        return {t: conn.execute(sa.text(f"SELECT count(*) FROM {t}")).scalar() for t in TABLES}


@pytest.mark.parametrize("empty_db_url", BACKENDS, indirect=True)
def test_upgrade_from_0001_keeps_data(empty_db_url):
    engine = make_engine(empty_db_url)
    try:
        assert upgrade(engine, "0001_initial") == "0001_initial"
        fw = add_fishway(engine, add_site(engine, "Upgrade site"), "left")
        tag = add_tag(engine, fw, "left.P01.level", "water_level", "m", poll_period_s=10)
        add_user(engine, "sup9", "supervisor", "hash-not-real")
        store_batch(engine, [(tag, T0.timestamp() + 10 * i, 76.0 + i / 100, 1)
                             for i in range(50)])
        add_log_entry(engine, T0, "sup9", "shift_note", text="before the upgrade")
        before = _counts(engine)
        frame_before = readings_frame(engine, tag, T0, T0 + timedelta(days=1))

        assert upgrade(engine, "0002_setting_changes") == "0002_setting_changes"
        assert current_revision(engine) == "0002_setting_changes"
        assert _counts(engine) == before
        assert readings_frame(engine, tag, T0, T0 + timedelta(days=1)).equals(frame_before)
        # the new table takes rows, and the old ones still take new data
        record_setting_change(engine, fw, "targets.entrance_head.max", T0, action="set",
                              set_by="sup9", old_value=0.457, new_value=0.427)
        assert store_batch(engine, [(tag, T0.timestamp() + 10_000, 77.0, 1)]) == 1
        assert setting_overrides(engine)[1] == {fw: {"targets.entrance_head.max":
                                                     (0.427, None)}}
        # later revisions build on it and keep its rows
        assert upgrade(engine) == head_revision()
        assert len(setting_changes_frame(engine)) == 1
    finally:
        engine.dispose()


@pytest.mark.parametrize("sql", ["UPDATE setting_changes SET note = 'changed'",
                                 "DELETE FROM setting_changes"])
def test_setting_changes_are_append_only(db_engine, sql):
    fw = add_fishway(db_engine, add_site(db_engine, "Audit site"), "left")
    record_setting_change(db_engine, fw, "mode", T0, action="set", set_by="sup9",
                          old_text="operating", new_text="maintenance")
    with pytest.raises(sa.exc.DBAPIError, match="append-only"), db_engine.begin() as conn:
        conn.execute(sa.text(sql))
    assert len(setting_changes_frame(db_engine)) == 1


def test_overrides_in_force_are_the_newest_change_unless_reverted(db_engine):
    site = add_site(db_engine, "Override site")
    left, right = add_fishway(db_engine, site, "left"), add_fishway(db_engine, site, "right")
    assert setting_overrides(db_engine) == (0, {})
    key = "alarms.do_low.limit_mg_l"
    record_setting_change(db_engine, left, key, T0, action="set", set_by="sup9",
                          old_value=5.0, new_value=5.5)
    record_setting_change(db_engine, left, key, T0, action="set", set_by="sup9",
                          old_value=5.5, new_value=6.0)
    record_setting_change(db_engine, right, key, T0, action="set", set_by="sup9",
                          old_value=5.0, new_value=4.5)
    last = record_setting_change(db_engine, right, key, T0 + timedelta(minutes=1),
                                 action="revert", set_by="sup9", old_value=4.5)
    version, overrides = setting_overrides(db_engine)
    assert version == last
    assert overrides == {left: {key: (6.0, None)}}
    changes = setting_changes_frame(db_engine, fishway_id=left)
    assert changes["new_value"].tolist() == [6.0, 5.5]  # newest first
    assert changes["old_value"].tolist() == [5.5, 5.0]


@pytest.mark.parametrize("kwargs, match", [
    ({"action": "delete"}, "unknown action"),
    ({"action": "set"}, "needs the new value"),
    ({"action": "set", "new_value": float("nan")}, "finite"),
    ({"action": "set", "new_value": 1.0, "set_by": ""}, "who made it"),
])
def test_record_setting_change_refuses_bad_rows(db_engine, kwargs, match):
    fw = add_fishway(db_engine, add_site(db_engine, "Bad site"), "left")
    args = {"set_by": "sup9", **kwargs}
    with pytest.raises(ValueError, match=match):
        record_setting_change(db_engine, fw, "targets.x", T0, **args)
    assert setting_changes_frame(db_engine).empty


def test_flag_counts_per_tag_and_window(db_engine, tags):
    t0 = T0.timestamp()
    store_batch(db_engine, [(tags["level"], t0, 1.0, 1), (tags["level"], t0 + 10, 1.0, 3),
                            (tags["level"], t0 + 20, None, 9), (tags["level"], t0 + 30, 2.0, 4),
                            (tags["do"], t0, 8.0, 1), (tags["do"], t0 + 60, 8.0, 1)])
    counts = flag_counts(db_engine, t0, t0 + 30)  # [start, end): the fail at +30 is out
    assert counts.loc[tags["level"]].tolist() == [1, 0, 1, 0, 1]
    assert counts.loc[tags["do"]].tolist() == [1, 0, 0, 0, 0]
    assert tags["temp"] not in counts.index
    assert list(counts.columns) == [1, 2, 3, 4, 9]
    assert flag_counts(db_engine, t0 - 100, t0 - 50).empty


def test_users_frame_has_no_password_hashes(db_engine):
    add_user(db_engine, "view9", "viewer", "hash-not-real")
    frame = users_frame(db_engine)
    assert frame.loc["view9", "role"] == "viewer"
    assert "password_hash" not in frame.columns


_MODEL_ONLY = """
import sys
from alembic.autogenerate import compare_metadata
from alembic.runtime.migration import MigrationContext
from db.engine import make_engine
from db.migrate import upgrade
from db.models import Base
engine = make_engine(sys.argv[1])
upgrade(engine)
with engine.connect() as conn:
    diff = compare_metadata(MigrationContext.configure(conn, opts={"compare_type": True}),
                            Base.metadata)
print("setting_changes" in Base.metadata.tables, "db.dashboard_queries" in sys.modules, diff)
"""


def test_the_model_lives_in_db_models_and_matches_the_migration(tmp_path):
    # a fresh interpreter: nothing but db.models describes the table, and migrating does not
    # need db.dashboard_queries (alembic's own comparison is the reference)
    url = f"sqlite:///{tmp_path / 'fresh.sqlite'}"
    out = subprocess.run([sys.executable, "-c", _MODEL_ONLY, url], capture_output=True,
                         text=True, check=True, timeout=120)
    assert out.stdout.split() == ["True", "False", "[]"]


def test_dashboard_queries_still_exports_the_table_and_actions():
    import db.dashboard_queries as q
    from db.models import SETTING_ACTIONS, SettingChange

    assert q.SETTING_CHANGES is SettingChange.__table__
    assert q.SETTING_ACTIONS == SETTING_ACTIONS == ("set", "revert")
    assert {"SETTING_CHANGES", "SETTING_ACTIONS"} <= set(q.__all__)

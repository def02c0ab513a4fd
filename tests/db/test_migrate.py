"""Migrations (db/migrate.py, db/migrations/): build, re-run, extend, keep data.

The reference for "the schema" is the SQLAlchemy models (alembic's own comparison,
``alembic.autogenerate.compare_metadata``, must find no difference).
"""
from __future__ import annotations

import shutil
from datetime import UTC, datetime

import pytest
import sqlalchemy as sa
from alembic import command
from alembic.autogenerate import compare_metadata
from alembic.runtime.migration import MigrationContext

from db.catalog import add_fishway, add_site, add_tag, add_user
from db.engine import is_postgresql, make_engine
from db.migrate import MIGRATIONS_DIR, alembic_config, current_revision, head_revision, upgrade
from db.models import Base
from db.readings import readings_frame, store_batch

BACKENDS = ["sqlite", "postgresql"]
T0 = datetime(2026, 6, 1, tzinfo=UTC)


def _not_a_partition(obj, name, type_, reflected, compare_to) -> bool:
    return not (type_ == "table" and name.startswith("readings_p"))


@pytest.mark.parametrize("empty_db_url", BACKENDS, indirect=True)
def test_upgrade_builds_the_models_schema(empty_db_url):
    assert upgrade(empty_db_url) == head_revision()  # by URL
    engine = make_engine(empty_db_url)
    try:
        with engine.connect() as conn:
            ctx = MigrationContext.configure(conn, opts={"compare_type": True,
                                                         "include_object": _not_a_partition})
            assert compare_metadata(ctx, Base.metadata) == []
        expected = set(Base.metadata.tables)
        assert expected <= set(sa.inspect(engine).get_table_names())
        assert current_revision(engine) == head_revision()
    finally:
        engine.dispose()


def _seed(engine) -> dict:
    site = add_site(engine, "Migration site")
    fw = add_fishway(engine, site, "Migration fishway")
    tag = add_tag(engine, fw, "M.level", "water_level", "m", poll_period_s=5)
    add_user(engine, "op1", "operator", "hash-not-real")
    store_batch(engine, [(tag, T0.timestamp() + i, 10.0 + i / 8, 1) for i in range(100)])
    return {"tag": tag}


def _snapshot(engine, tag: int):
    with engine.connect() as conn:
        counts = {t: conn.execute(sa.text(f"SELECT count(*) FROM {t}")).scalar()
                  for t in ("sites", "fishways", "tags", "users", "readings", "rollups")}
    return counts, readings_frame(engine, tag, T0, datetime(2027, 1, 1, tzinfo=UTC))


def test_upgrade_again_keeps_data(db_engine):
    ids = _seed(db_engine)
    before = _snapshot(db_engine, ids["tag"])
    assert upgrade(db_engine) == head_revision()
    after = _snapshot(db_engine, ids["tag"])
    assert after[0] == before[0]
    assert after[1].equals(before[1])


SECOND_REVISION = '''"""Test-only: a later revision that adds to the first one."""
import sqlalchemy as sa
from alembic import op

revision = "0002_test_addition"
down_revision = "{head}"
branch_labels = None
depends_on = None


def upgrade():
    with op.batch_alter_table("tags") as batch:
        batch.add_column(sa.Column("display_order", sa.Integer, nullable=False,
                                   server_default="0"))
    op.create_table("notes", sa.Column("id", sa.Integer, primary_key=True),
                    sa.Column("text", sa.Text, nullable=False))


def downgrade():
    raise NotImplementedError
'''


def test_a_later_revision_adds_without_losing_data(db_engine, tmp_path):
    ids = _seed(db_engine)
    before = _snapshot(db_engine, ids["tag"])
    scripts = tmp_path / "migrations"
    shutil.copytree(MIGRATIONS_DIR, scripts, ignore=shutil.ignore_patterns("__pycache__"))
    (scripts / "versions" / "0002_test_addition.py").write_text(
        SECOND_REVISION.format(head=head_revision()))
    cfg = alembic_config()
    cfg.set_main_option("script_location", str(scripts))
    with db_engine.begin() as conn:
        cfg.attributes["connection"] = conn
        command.upgrade(cfg, "head")
    assert current_revision(db_engine) == "0002_test_addition"
    after = _snapshot(db_engine, ids["tag"])
    assert after[0] == before[0] and after[1].equals(before[1])
    columns = {c["name"] for c in sa.inspect(db_engine).get_columns("tags")}
    assert "display_order" in columns
    # readings still take new data after the change (FKs intact on SQLite's table copy)
    assert store_batch(db_engine, [(ids["tag"], T0.timestamp() + 1000, 1.0, 1)]) == 1


@pytest.mark.parametrize("table, sql", [
    ("operator_log", "UPDATE operator_log SET text = 'changed'"),
    ("operator_log", "DELETE FROM operator_log"),
    ("alarm_events", "UPDATE alarm_events SET why = 'changed'"),
    ("alarm_events", "DELETE FROM alarm_events"),
])
def test_history_tables_are_append_only(db_engine, table, sql):
    now = datetime(2026, 6, 1, tzinfo=UTC)
    with db_engine.begin() as conn:
        conn.execute(sa.text("INSERT INTO operator_log (ts, author, kind, text) "
                             "VALUES (:ts, 'op1', 'observation', 'fish seen')"), {"ts": now})
        conn.execute(sa.text("INSERT INTO alarms (key, rule, priority, state, updated_at) "
                             "VALUES ('k', 'r', 'low', 'unacknowledged', :ts)"), {"ts": now})
        conn.execute(sa.text("INSERT INTO alarm_events (alarm_id, ts, kind, state, priority) "
                             "VALUES (1, :ts, 'raised', 'unacknowledged', 'low')"), {"ts": now})
    with pytest.raises(sa.exc.DatabaseError, match="append-only"), db_engine.begin() as conn:
        conn.execute(sa.text(sql))


def test_migration_is_transactional_on_sqlite(tmp_path):
    # SQLAlchemy emits BEGIN on SQLite (engine recipe), so a failing step leaves nothing.
    engine = make_engine(sqlite_path=tmp_path / "t.sqlite")
    try:
        with pytest.raises(sa.exc.OperationalError), engine.begin() as conn:
            conn.exec_driver_sql("CREATE TABLE a (x INTEGER)")
            conn.exec_driver_sql("CREATE TABLE a (x INTEGER)")
        assert "a" not in sa.inspect(engine).get_table_names()
        assert not is_postgresql(engine)
    finally:
        engine.dispose()

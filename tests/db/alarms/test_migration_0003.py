"""Migration 0003 (alarm engine state): one head, existing events kept, the new kind accepted,
the history still append-only — on SQLite (where alarm_events is rebuilt) and PostgreSQL."""
from __future__ import annotations

from datetime import UTC, datetime

import pytest
import sqlalchemy as sa
from alembic.script import ScriptDirectory

from db.engine import make_engine
from db.migrate import alembic_config, head_revision, upgrade

BACKENDS = ["sqlite", "postgresql"]
T = datetime(2026, 6, 1, tzinfo=UTC)


def test_exactly_one_head():
    heads = ScriptDirectory.from_config(alembic_config()).get_heads()
    assert len(heads) == 1, f"migrations have several heads: {heads}"
    chain = [r.revision for r in ScriptDirectory.from_config(alembic_config()).walk_revisions()]
    assert "0003_alarm_engine_state" in chain and chain[-1] == "0001_initial"


@pytest.mark.parametrize("empty_db_url", BACKENDS, indirect=True)
def test_upgrade_keeps_alarm_events(empty_db_url):
    engine = make_engine(empty_db_url)
    try:
        upgrade(engine, "0002_setting_changes")
        with engine.begin() as conn:
            conn.execute(sa.text("INSERT INTO alarms (key, rule, priority, state, updated_at) "
                                 "VALUES ('do_low@east', 'do_low', 'medium', 'acknowledged', "
                                 ":t)"), {"t": T})
            for i, (kind, state) in enumerate((("raised", "unacknowledged"),
                                               ("acknowledged", "acknowledged"))):
                conn.execute(sa.text(
                    "INSERT INTO alarm_events (alarm_id, ts, kind, state, priority, value, "
                    "who, why) VALUES (1, :t, :k, :s, 'medium', :v, 'ana', 'low oxygen')"),
                    {"t": T, "k": kind, "s": state, "v": 4.5 + i})
        with engine.connect() as conn:
            before = conn.execute(sa.text("SELECT id, alarm_id, kind, state, priority, value, "
                                          "who, why FROM alarm_events ORDER BY id")).all()
        assert upgrade(engine) == head_revision()
        with engine.connect() as conn:
            after = conn.execute(sa.text("SELECT id, alarm_id, kind, state, priority, value, "
                                         "who, why FROM alarm_events ORDER BY id")).all()
        assert after == before and len(after) == 2
        with engine.begin() as conn:  # the new kind and columns
            conn.execute(sa.text(
                "INSERT INTO alarm_events (alarm_id, ts, kind, state, priority, value, "
                "old_value, previous_state) VALUES (1, :t, 'limit_changed', 'acknowledged', "
                "'medium', 6.0, 5.0, 'acknowledged')"), {"t": T})
        with pytest.raises(sa.exc.DatabaseError), engine.begin() as conn:
            conn.execute(sa.text("INSERT INTO alarm_events (alarm_id, ts, kind, state, "
                                 "priority) VALUES (1, :t, 'exploded', 'normal', 'low')"),
                         {"t": T})
        for sql in ("UPDATE alarm_events SET why = 'changed'", "DELETE FROM alarm_events"):
            with pytest.raises(sa.exc.DatabaseError, match="append-only"), \
                    engine.begin() as conn:
                conn.execute(sa.text(sql))
    finally:
        engine.dispose()

"""Alarm engine state: the engine's working state between cycles, richer alarm events.

Revision ID: 0003_alarm_engine_state
Revises: 0002_setting_changes
Create Date: 2026-12-12

What it adds (:mod:`db.alarm` uses it):

- ``alarm_engine_state``: one row per site holding the alarm engine's site-wide working state
  (fishway modes, supervisors' limit edits, the recent annunciations and the flood status,
  the last evaluation time: ``EngineState.to_dict()`` without the alarms) and a ``version``
  that every writer increments first thing in its transaction, which serialises the writers
  (the ingest's evaluator and the dashboards' operator actions);
- ``alarms``: ``record`` (the engine's working record of the alarm: delay timers, grouping
  parent, suppression reason: ``AlarmRecord.to_dict()``), ``parent`` and ``suppressed_by``;
- ``alarm_events``: ``previous_state``, ``message``, ``parent``, ``old_value`` (a changed
  limit's value before, beside ``value`` after) and ``shelved_until``; the event kind
  ``limit_changed`` (the engine emits it for a supervisor's limit edit).

The new kind changes the ``kind`` CHECK constraint of ``alarm_events``. PostgreSQL swaps the
constraint in place (under the name 0001 gave it). SQLite cannot alter a constraint, so there
the table is rebuilt: a new table with the new constraint and columns, every row copied as it
was (ids included), the old table dropped (a drop fires no DELETE trigger), the new one
renamed, its indexes and its append-only triggers made again; the rows are kept, none is
changed.

Rules for fishway migrations: a migration only adds (tables, nullable columns or columns with
a server default, indexes, partitions); it never drops or rewrites data.
"""
from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0003_alarm_engine_state"
down_revision: str | None = "0002_setting_changes"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

TS = sa.DateTime(timezone=True)
STATES = ("'normal', 'unacknowledged', 'acknowledged', 'rtn_unacknowledged', 'shelved', "
          "'suppressed_by_design', 'out_of_service'")
EVENT_KINDS = ("'raised', 'cleared', 'acknowledged', 'shelved', 'unshelved', 'suppressed', "
               "'unsuppressed', 'out_of_service', 'returned_to_service', 'priority_changed', "
               "'comment', 'limit_changed'")
OLD_COLUMNS = "id, alarm_id, ts, kind, state, priority, value, who, why"


def _new_event_columns() -> list[sa.Column]:
    return [sa.Column("previous_state", sa.String(32)), sa.Column("message", sa.Text),
            sa.Column("parent", sa.String(200)), sa.Column("old_value", sa.Double),
            sa.Column("shelved_until", TS)]


def _rebuild_alarm_events_sqlite() -> None:
    op.create_table(
        "alarm_events_new",
        sa.Column("id", sa.Integer, primary_key=True),
        sa.Column("alarm_id", sa.Integer,
                  sa.ForeignKey("alarms.id", name="fk_alarm_events_alarm_id_alarms"),
                  nullable=False),
        sa.Column("ts", TS, nullable=False),
        sa.Column("kind", sa.String(32), nullable=False),
        sa.Column("state", sa.String(32), nullable=False),
        sa.Column("priority", sa.String(16), nullable=False),
        sa.Column("value", sa.Double),
        sa.Column("who", sa.String(100)),
        sa.Column("why", sa.Text, nullable=False, server_default=""),
        *_new_event_columns(),
        sa.CheckConstraint(f"kind IN ({EVENT_KINDS})", name=op.f("ck_alarm_events_kind_known")),
        sa.CheckConstraint(f"state IN ({STATES})", name=op.f("ck_alarm_events_state_known")),
    )
    op.execute(f"INSERT INTO alarm_events_new ({OLD_COLUMNS}) "
               f"SELECT {OLD_COLUMNS} FROM alarm_events ORDER BY id")
    op.execute("DROP TABLE alarm_events")  # its indexes and triggers go with it
    op.execute("ALTER TABLE alarm_events_new RENAME TO alarm_events")
    op.create_index("ix_alarm_events_alarm_ts", "alarm_events", ["alarm_id", "ts"])
    op.create_index("ix_alarm_events_ts", "alarm_events", ["ts"])
    for action in ("UPDATE", "DELETE"):
        op.execute(f"CREATE TRIGGER alarm_events_no_{action.lower()} BEFORE {action} ON "
                   "alarm_events BEGIN SELECT RAISE(ABORT, 'alarm_events is append-only'); END")


def upgrade() -> None:
    dialect = op.get_bind().dialect.name
    op.create_table(
        "alarm_engine_state",
        sa.Column("site_id", sa.Integer,
                  sa.ForeignKey("sites.id", name="fk_alarm_engine_state_site_id_sites"),
                  primary_key=True, autoincrement=False),
        sa.Column("version", sa.BigInteger, nullable=False, server_default="0"),
        sa.Column("state", sa.JSON, nullable=False),
        sa.Column("updated_at", TS, nullable=False),
    )
    op.add_column("alarms", sa.Column("parent", sa.String(200)))
    op.add_column("alarms", sa.Column("suppressed_by", sa.String(200)))
    op.add_column("alarms", sa.Column("record", sa.JSON))
    if dialect == "sqlite":
        _rebuild_alarm_events_sqlite()
        return
    for column in _new_event_columns():
        op.add_column("alarm_events", column)
    # 0001's names went through the models' naming convention (which doubled the prefix):
    # find the kind constraint by what it checks, and keep its name
    name = op.get_bind().execute(sa.text(
        "SELECT conname FROM pg_constraint WHERE conrelid = 'alarm_events'::regclass "
        "AND contype = 'c' AND pg_get_constraintdef(oid) LIKE '%kind%'")).scalar_one()
    op.execute(f'ALTER TABLE alarm_events DROP CONSTRAINT "{name}"')
    op.execute(f'ALTER TABLE alarm_events ADD CONSTRAINT "{name}" '
               f"CHECK (kind IN ({EVENT_KINDS}))")


def downgrade() -> None:
    raise NotImplementedError("fishway migrations are forward-only (no data loss)")

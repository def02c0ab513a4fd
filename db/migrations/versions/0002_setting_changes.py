"""Setting changes: supervisors' overrides of a fishway's targets, alarm limits and mode.

Revision ID: 0002_setting_changes
Revises: 0001_initial
Create Date: 2026-12-10

One append-only table, ``setting_changes``: each row is one change made on the dashboard's
Site & settings page, with the value before and after (SI, or text for the fishway's mode), who
made it and when. The override in force for a (fishway, key) is the newest row; a ``revert``
row returns the key to the site file's value. Like ``operator_log`` and ``alarm_events`` the
table refuses UPDATE and DELETE (the trigger function of 0001 on PostgreSQL).

Rules for fishway migrations: a migration only adds (tables, nullable columns or columns with
a server default, indexes, partitions); it never drops or rewrites data.
"""
from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

# The table is spelled out below, as in 0001; its model is db.models.SettingChange.

revision: str = "0002_setting_changes"
down_revision: str | None = "0001_initial"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

TABLE = "setting_changes"


def upgrade() -> None:
    dialect = op.get_bind().dialect.name
    op.create_table(
        TABLE,
        sa.Column("id", sa.Integer, primary_key=True),
        sa.Column("ts", sa.DateTime(timezone=True), nullable=False),
        sa.Column("fishway_id", sa.Integer,
                  sa.ForeignKey("fishways.id", name="fk_setting_changes_fishway_id_fishways"),
                  nullable=False),
        sa.Column("key", sa.String(200), nullable=False),
        sa.Column("action", sa.String(16), nullable=False),
        sa.Column("old_value", sa.Double),
        sa.Column("new_value", sa.Double),
        sa.Column("old_text", sa.String(100)),
        sa.Column("new_text", sa.String(100)),
        sa.Column("set_by", sa.String(100), nullable=False),
        sa.Column("note", sa.Text, nullable=False, server_default=""),
        sa.CheckConstraint("action IN ('set', 'revert')", name="ck_setting_changes_action_known"),
    )
    op.create_index("ix_setting_changes_fishway_key", TABLE, ["fishway_id", "key"])
    if dialect == "sqlite":
        for action in ("UPDATE", "DELETE"):
            op.execute(
                f"CREATE TRIGGER {TABLE}_no_{action.lower()} BEFORE {action} ON {TABLE} "
                f"BEGIN SELECT RAISE(ABORT, '{TABLE} is append-only'); END"
            )
    elif dialect == "postgresql":
        op.execute(
            f"CREATE TRIGGER {TABLE}_append_only BEFORE UPDATE OR DELETE ON {TABLE} "
            "FOR EACH ROW EXECUTE FUNCTION fishway_append_only()"
        )


def downgrade() -> None:
    raise NotImplementedError("fishway migrations are forward-only (no data loss)")

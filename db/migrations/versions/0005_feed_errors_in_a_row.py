"""Feed health: the number of failed polls in a row, as a column.

Revision ID: 0005_feed_errors_in_a_row
Revises: 0004_fishway_status
Create Date: 2026-12-01

``feed_health.consecutive_errors``: failed polls since the last success, counted by the
database itself (:func:`db.feed_health.update_feed_health` adds one on a failure and sets 0 on
a success in the same upsert), so the count survives a restart of the ingest and the data
health page can sort and show it without reading it out of the error text. Existing rows
start at 0.

Rules for fishway migrations: a migration only adds (tables, nullable columns or columns with
a server default, indexes, partitions); it never drops or rewrites data.
"""
from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0005_feed_errors_in_a_row"
down_revision: str | None = "0004_fishway_status"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    op.add_column("feed_health", sa.Column("consecutive_errors", sa.Integer, nullable=False,
                                           server_default="0"))


def downgrade() -> None:
    raise NotImplementedError("fishway migrations are forward-only (no data loss)")

"""Fishway status: the newest overview status of each fishway, written every ingest cycle.

Revision ID: 0004_fishway_status
Revises: 0003_alarm_engine_state
Create Date: 2026-12-01

What it adds (:mod:`db.status` uses it):

- ``fishway_status``: one row per fishway: when the status was judged, its state and reason,
  the worst criterion, the mode, the time of the readings it rests on and when they go stale,
  whether an adjustment is due (with the changes), the gauges-against-model note;
- ``fishway_status_metrics``: the displayed quantities of that status, one row per
  (fishway, key): SI value, band (lo, hi, target), display status, note, source, the value
  and band as displayed in the site's units, and the geometry of its bullet indicator
  (percent of the track).

The ingest replaces a fishway's rows in one transaction per cycle; the dashboard reads them
(the overview, the wall display) instead of solving the profiles for every viewer.

Rules for fishway migrations: a migration only adds (tables, nullable columns or columns with
a server default, indexes, partitions); it never drops or rewrites data.
"""
from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0004_fishway_status"
down_revision: str | None = "0003_alarm_engine_state"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

STATES = "'in_criteria', 'out_of_criteria', 'out_of_service', 'no_data', 'model_error'"
METRIC_STATUSES = "'normal', 'abnormal', 'stale', 'bad', 'none'"


def _fishway_fk(table: str) -> sa.Column:
    return sa.Column("fishway_id", sa.Integer,
                     sa.ForeignKey("fishways.id", name=f"fk_{table}_fishway_id_fishways"),
                     primary_key=True, autoincrement=False)


def upgrade() -> None:
    op.create_table(
        "fishway_status",
        _fishway_fk("fishway_status"),
        sa.Column("computed_ms", sa.BigInteger, nullable=False),
        sa.Column("state", sa.String(20), nullable=False),
        sa.Column("reason", sa.Text, nullable=False, server_default=""),
        sa.Column("worst", sa.Text, nullable=False, server_default=""),
        sa.Column("mode", sa.String(20), nullable=False),
        sa.Column("data_ms", sa.BigInteger),
        sa.Column("fresh_until_ms", sa.BigInteger),
        sa.Column("stale", sa.Boolean, nullable=False),
        sa.Column("adjust_status", sa.String(20), nullable=False),
        sa.Column("adjust_text", sa.Text, nullable=False, server_default=""),
        sa.Column("adjust_changes", sa.Text, nullable=False, server_default=""),
        sa.Column("adjust_stale", sa.Boolean, nullable=False),
        sa.Column("gauges", sa.Text, nullable=False, server_default=""),
        sa.Column("gauges_ok", sa.Boolean, nullable=False),
        sa.Column("problems", sa.Text, nullable=False, server_default=""),
        sa.CheckConstraint(f"state IN ({STATES})", name=op.f("ck_fishway_status_state_known")),
    )
    op.create_table(
        "fishway_status_metrics",
        _fishway_fk("fishway_status_metrics"),
        sa.Column("key", sa.String(40), primary_key=True),
        sa.Column("position", sa.SmallInteger, nullable=False),
        sa.Column("label", sa.String(100), nullable=False),
        sa.Column("kind", sa.String(20), nullable=False),
        sa.Column("value", sa.Double),
        sa.Column("lo", sa.Double),
        sa.Column("hi", sa.Double),
        sa.Column("target", sa.Double),
        sa.Column("status", sa.String(10), nullable=False),
        sa.Column("note", sa.Text, nullable=False, server_default=""),
        sa.Column("source", sa.String(100), nullable=False, server_default=""),
        sa.Column("text", sa.String(60), nullable=False, server_default=""),
        sa.Column("band_text", sa.String(200), nullable=False, server_default=""),
        sa.Column("band_left_pct", sa.Double),
        sa.Column("band_width_pct", sa.Double),
        sa.Column("target_pct", sa.Double),
        sa.Column("value_pct", sa.Double),
        sa.Column("off_scale", sa.Boolean, nullable=False, server_default=sa.false()),
        sa.CheckConstraint(f"status IN ({METRIC_STATUSES})",
                           name=op.f("ck_fishway_status_metrics_status_known")),
    )


def downgrade() -> None:
    raise NotImplementedError("fishway migrations are forward-only (no data loss)")

"""SQLAlchemy 2 models of the fishway database (the schema the migrations build).

The schema itself is created and changed only by the alembic migrations in
``db/migrations/versions`` (:func:`db.migrate.upgrade`); these classes describe the same
tables for queries, and a test checks that they agree.

Tables
------
``sites`` → ``fishways`` → ``tags`` (measured quantities of one fishway: quantity, unit,
feed and source address, QC limits, poll period) → ``readings`` (raw values) and
``rollups`` (1 min / 15 min / 1 h / 1 day aggregates, kept forever).
``recommendations`` (what the recommender advised, with inputs, settings, predicted
criteria, binding constraint, feasibility and reason; JSON payloads),
``actuator_settings`` (what was actually set, by whom, from which source),
``alarms`` (current state of each alarm, ISA-18.2 states, with the alarm engine's working
record of it) and ``alarm_events`` (append-only history), ``alarm_engine_state`` (one row per
site: the rest of the engine's working state and the version that serialises its writers,
:mod:`db.alarm.store`), ``operator_log`` (append-only; mistakes are fixed by a
``correction`` entry that refers to the entry it corrects), ``setting_changes``
(append-only; supervisors' changes of a fishway's targets, alarm limits and mode, migration
0002), ``users`` and ``feed_health``. ``fishway_status`` and ``fishway_status_metrics``: the
newest overview status of each fishway (replaced every ingest cycle, :mod:`db.status`).

Readings layout
---------------
``readings(tag_id INTEGER, ts_ms BIGINT, value DOUBLE, flag SMALLINT)``, primary key
``(tag_id, ts_ms)``; on SQLite a ``WITHOUT ROWID`` table (the primary-key b-tree *is*
the table), on PostgreSQL range-partitioned by ``ts_ms`` (monthly partitions,
:mod:`db.partitions`). Choices, measured on SQLite 3.40 with 200 000 readings of 10 tags
after VACUUM: epoch **milliseconds** and a float64 value take 23.1 bytes/reading;
epoch seconds would take 21.1 (but allow one reading per second per tag); a value
scaled to an integer of milli-units 17.1 (but it needs a resolution per tag and
quantises silently when that is set wrong). Float64 keeps any sensor's precision and
stays usable in SQL, so milliseconds + float64 it is. A missing value (QARTOD flag 9)
is stored as NULL.
"""
from __future__ import annotations

from datetime import datetime

import sqlalchemy as sa
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column

from db.types import UTCDateTime

__all__ = [
    "ALARM_EVENT_KINDS",
    "ALARM_PRIORITIES",
    "ALARM_STATES",
    "METRIC_STATUSES",
    "NAMING_CONVENTION",
    "OPERATOR_LOG_KINDS",
    "QARTOD_FLAGS",
    "SETTING_ACTIONS",
    "STATUS_STATES",
    "USER_ROLES",
    "ActuatorSetting",
    "Alarm",
    "AlarmEngineState",
    "AlarmEvent",
    "Base",
    "FeedHealth",
    "Fishway",
    "FishwayStatusRow",
    "OperatorLogEntry",
    "Reading",
    "Recommendation",
    "Rollup",
    "SettingChange",
    "Site",
    "StatusMetric",
    "Tag",
    "User",
]

NAMING_CONVENTION = {
    "ix": "ix_%(column_0_label)s",
    "uq": "uq_%(table_name)s_%(column_0_name)s",
    "ck": "ck_%(table_name)s_%(constraint_name)s",
    "fk": "fk_%(table_name)s_%(column_0_name)s_%(referred_table_name)s",
    "pk": "pk_%(table_name)s",
}

#: QARTOD flags: 1 pass, 2 not evaluated, 3 suspect, 4 fail, 9 missing.
QARTOD_FLAGS = (1, 2, 3, 4, 9)
USER_ROLES = ("viewer", "operator", "supervisor")
OPERATOR_LOG_KINDS = ("adjustment", "observation", "shift_note", "correction")
#: What a setting change does: set a new value, or revert to the site file's value.
SETTING_ACTIONS = ("set", "revert")
ALARM_PRIORITIES = ("low", "medium", "high", "critical")
#: ANSI/ISA-18.2-2016 alarm states.
ALARM_STATES = ("normal", "unacknowledged", "acknowledged", "rtn_unacknowledged",
                "shelved", "suppressed_by_design", "out_of_service")
ALARM_EVENT_KINDS = ("raised", "cleared", "acknowledged", "shelved", "unshelved",
                     "suppressed", "unsuppressed", "out_of_service", "returned_to_service",
                     "priority_changed", "comment", "limit_changed")


def _in(column: str, values: tuple) -> str:
    return f"{column} IN ({', '.join(repr(v) for v in values)})"


class Base(DeclarativeBase):
    metadata = sa.MetaData(naming_convention=NAMING_CONVENTION)


class Site(Base):
    __tablename__ = "sites"
    id: Mapped[int] = mapped_column(sa.Integer, primary_key=True)
    name: Mapped[str] = mapped_column(sa.String(200), unique=True)
    time_zone: Mapped[str] = mapped_column(sa.String(64), server_default="UTC")
    description: Mapped[str] = mapped_column(sa.Text, server_default="")
    created_at: Mapped[datetime] = mapped_column(UTCDateTime())


class Fishway(Base):
    __tablename__ = "fishways"
    __table_args__ = (sa.UniqueConstraint("site_id", "name", name="uq_fishways_site_name"),)
    id: Mapped[int] = mapped_column(sa.Integer, primary_key=True)
    site_id: Mapped[int] = mapped_column(sa.ForeignKey("sites.id"), index=True)
    name: Mapped[str] = mapped_column(sa.String(200))
    kind: Mapped[str] = mapped_column(sa.String(40), server_default="")
    description: Mapped[str] = mapped_column(sa.Text, server_default="")


class Tag(Base):
    __tablename__ = "tags"
    __table_args__ = (sa.CheckConstraint("poll_period_s > 0", name="poll_period_positive"),)
    id: Mapped[int] = mapped_column(sa.Integer, primary_key=True)
    fishway_id: Mapped[int] = mapped_column(sa.ForeignKey("fishways.id"), index=True)
    name: Mapped[str] = mapped_column(sa.String(200), unique=True)
    quantity: Mapped[str] = mapped_column(sa.String(40))
    unit: Mapped[str] = mapped_column(sa.String(32))
    source: Mapped[str] = mapped_column(sa.String(40), server_default="")
    source_address: Mapped[str] = mapped_column(sa.String(400), server_default="")
    poll_period_s: Mapped[float] = mapped_column(sa.Double)
    role: Mapped[str] = mapped_column(sa.String(40), server_default="")
    pool_id: Mapped[str | None] = mapped_column(sa.String(40))
    setting: Mapped[str | None] = mapped_column(sa.String(100))
    actuator: Mapped[str | None] = mapped_column(sa.String(100))
    fail_low: Mapped[float | None] = mapped_column(sa.Double)
    fail_high: Mapped[float | None] = mapped_column(sa.Double)
    suspect_low: Mapped[float | None] = mapped_column(sa.Double)
    suspect_high: Mapped[float | None] = mapped_column(sa.Double)
    description: Mapped[str] = mapped_column(sa.Text, server_default="")
    enabled: Mapped[bool] = mapped_column(sa.Boolean, server_default=sa.true())


class Reading(Base):
    __tablename__ = "readings"
    __table_args__ = (
        sa.CheckConstraint("flag BETWEEN 1 AND 4 OR flag = 9", name="flag_qartod"),
        {"sqlite_with_rowid": False, "postgresql_partition_by": "RANGE (ts_ms)"},
    )
    tag_id: Mapped[int] = mapped_column(sa.ForeignKey("tags.id"), primary_key=True)
    ts_ms: Mapped[int] = mapped_column(sa.BigInteger, primary_key=True, autoincrement=False)
    value: Mapped[float | None] = mapped_column(sa.Double)
    flag: Mapped[int] = mapped_column(sa.SmallInteger)


class Rollup(Base):
    __tablename__ = "rollups"
    __table_args__ = ({"sqlite_with_rowid": False},)
    tag_id: Mapped[int] = mapped_column(sa.ForeignKey("tags.id"), primary_key=True)
    res_s: Mapped[int] = mapped_column(sa.Integer, primary_key=True, autoincrement=False)
    bucket_ms: Mapped[int] = mapped_column(sa.BigInteger, primary_key=True, autoincrement=False)
    n: Mapped[int] = mapped_column(sa.Integer)
    vsum: Mapped[float] = mapped_column(sa.Double)
    vmin: Mapped[float] = mapped_column(sa.Double)
    vmin_ms: Mapped[int] = mapped_column(sa.BigInteger)
    vmax: Mapped[float] = mapped_column(sa.Double)
    vmax_ms: Mapped[int] = mapped_column(sa.BigInteger)
    vfirst: Mapped[float] = mapped_column(sa.Double)
    vfirst_ms: Mapped[int] = mapped_column(sa.BigInteger)
    vlast: Mapped[float] = mapped_column(sa.Double)
    vlast_ms: Mapped[int] = mapped_column(sa.BigInteger)
    flag_max: Mapped[int] = mapped_column(sa.SmallInteger)


class User(Base):
    __tablename__ = "users"
    __table_args__ = (sa.CheckConstraint(_in("role", USER_ROLES), name="role_known"),)
    id: Mapped[int] = mapped_column(sa.Integer, primary_key=True)
    name: Mapped[str] = mapped_column(sa.String(100), unique=True)
    role: Mapped[str] = mapped_column(sa.String(20))
    password_hash: Mapped[str] = mapped_column(sa.String(255))
    created_at: Mapped[datetime] = mapped_column(UTCDateTime())
    active: Mapped[bool] = mapped_column(sa.Boolean, server_default=sa.true())


class Recommendation(Base):
    __tablename__ = "recommendations"
    __table_args__ = (sa.Index("ix_recommendations_fishway_ts", "fishway_id", "ts"),)
    id: Mapped[int] = mapped_column(sa.Integer, primary_key=True)
    ts: Mapped[datetime] = mapped_column(UTCDateTime())
    fishway_id: Mapped[int] = mapped_column(sa.ForeignKey("fishways.id"))
    inputs: Mapped[dict] = mapped_column(sa.JSON)
    settings: Mapped[dict] = mapped_column(sa.JSON)
    predicted: Mapped[dict] = mapped_column(sa.JSON)
    binding_constraint: Mapped[str | None] = mapped_column(sa.String(200))
    feasible: Mapped[bool] = mapped_column(sa.Boolean)
    reason: Mapped[str] = mapped_column(sa.Text, server_default="")


class ActuatorSetting(Base):
    __tablename__ = "actuator_settings"
    __table_args__ = (sa.Index("ix_actuator_settings_fishway_ts", "fishway_id", "ts"),)
    id: Mapped[int] = mapped_column(sa.Integer, primary_key=True)
    ts: Mapped[datetime] = mapped_column(UTCDateTime())
    fishway_id: Mapped[int] = mapped_column(sa.ForeignKey("fishways.id"))
    actuator: Mapped[str] = mapped_column(sa.String(100))
    value: Mapped[float] = mapped_column(sa.Double)
    unit: Mapped[str] = mapped_column(sa.String(32), server_default="")
    set_by: Mapped[str] = mapped_column(sa.String(100))
    source: Mapped[str] = mapped_column(sa.String(40))
    recommendation_id: Mapped[int | None] = mapped_column(sa.ForeignKey("recommendations.id"))
    note: Mapped[str] = mapped_column(sa.Text, server_default="")


class Alarm(Base):
    __tablename__ = "alarms"
    __table_args__ = (
        sa.CheckConstraint(_in("priority", ALARM_PRIORITIES), name="priority_known"),
        sa.CheckConstraint(_in("state", ALARM_STATES), name="state_known"),
    )
    id: Mapped[int] = mapped_column(sa.Integer, primary_key=True)
    key: Mapped[str] = mapped_column(sa.String(200), unique=True)
    rule: Mapped[str] = mapped_column(sa.String(100))
    fishway_id: Mapped[int | None] = mapped_column(sa.ForeignKey("fishways.id"))
    tag_id: Mapped[int | None] = mapped_column(sa.ForeignKey("tags.id"))
    priority: Mapped[str] = mapped_column(sa.String(16))
    state: Mapped[str] = mapped_column(sa.String(32))
    active_since: Mapped[datetime | None] = mapped_column(UTCDateTime())
    acknowledged_at: Mapped[datetime | None] = mapped_column(UTCDateTime())
    acknowledged_by: Mapped[str | None] = mapped_column(sa.String(100))
    shelved_until: Mapped[datetime | None] = mapped_column(UTCDateTime())
    last_value: Mapped[float | None] = mapped_column(sa.Double)
    message: Mapped[str] = mapped_column(sa.Text, server_default="")
    updated_at: Mapped[datetime] = mapped_column(UTCDateTime())
    parent: Mapped[str | None] = mapped_column(sa.String(200))
    suppressed_by: Mapped[str | None] = mapped_column(sa.String(200))
    record: Mapped[dict | None] = mapped_column(sa.JSON)


class AlarmEvent(Base):
    __tablename__ = "alarm_events"
    __table_args__ = (
        sa.CheckConstraint(_in("kind", ALARM_EVENT_KINDS), name="kind_known"),
        sa.CheckConstraint(_in("state", ALARM_STATES), name="state_known"),
        sa.Index("ix_alarm_events_alarm_ts", "alarm_id", "ts"),
    )
    id: Mapped[int] = mapped_column(sa.Integer, primary_key=True)
    alarm_id: Mapped[int] = mapped_column(sa.ForeignKey("alarms.id"))
    ts: Mapped[datetime] = mapped_column(UTCDateTime(), index=True)
    kind: Mapped[str] = mapped_column(sa.String(32))
    state: Mapped[str] = mapped_column(sa.String(32))
    priority: Mapped[str] = mapped_column(sa.String(16))
    value: Mapped[float | None] = mapped_column(sa.Double)
    who: Mapped[str | None] = mapped_column(sa.String(100))
    why: Mapped[str] = mapped_column(sa.Text, server_default="")
    previous_state: Mapped[str | None] = mapped_column(sa.String(32))
    message: Mapped[str | None] = mapped_column(sa.Text)
    parent: Mapped[str | None] = mapped_column(sa.String(200))
    old_value: Mapped[float | None] = mapped_column(sa.Double)
    shelved_until: Mapped[datetime | None] = mapped_column(UTCDateTime())


class AlarmEngineState(Base):
    __tablename__ = "alarm_engine_state"
    site_id: Mapped[int] = mapped_column(sa.ForeignKey("sites.id"), primary_key=True,
                                         autoincrement=False)
    version: Mapped[int] = mapped_column(sa.BigInteger, server_default="0")
    state: Mapped[dict] = mapped_column(sa.JSON)
    updated_at: Mapped[datetime] = mapped_column(UTCDateTime())


class OperatorLogEntry(Base):
    __tablename__ = "operator_log"
    __table_args__ = (
        sa.CheckConstraint(_in("kind", OPERATOR_LOG_KINDS), name="kind_known"),
        sa.CheckConstraint("kind <> 'correction' OR refers_to IS NOT NULL",
                           name="correction_refers"),
    )
    id: Mapped[int] = mapped_column(sa.Integer, primary_key=True)
    ts: Mapped[datetime] = mapped_column(UTCDateTime(), index=True)
    author: Mapped[str] = mapped_column(sa.String(100))
    kind: Mapped[str] = mapped_column(sa.String(20))
    refers_to: Mapped[int | None] = mapped_column(sa.ForeignKey("operator_log.id"))
    fishway_id: Mapped[int | None] = mapped_column(sa.ForeignKey("fishways.id"))
    actuator: Mapped[str | None] = mapped_column(sa.String(100))
    from_value: Mapped[float | None] = mapped_column(sa.Double)
    to_value: Mapped[float | None] = mapped_column(sa.Double)
    text: Mapped[str] = mapped_column(sa.Text, server_default="")


class SettingChange(Base):
    """One change of a fishway's target, alarm limit or mode made on the dashboard (values SI,
    or text for the mode); the newest row of a (fishway, key) is in force unless it is a
    ``revert``."""

    __tablename__ = "setting_changes"
    __table_args__ = (
        sa.CheckConstraint(_in("action", SETTING_ACTIONS), name="action_known"),
        sa.Index("ix_setting_changes_fishway_key", "fishway_id", "key"),
    )
    id: Mapped[int] = mapped_column(sa.Integer, primary_key=True)
    ts: Mapped[datetime] = mapped_column(UTCDateTime())
    fishway_id: Mapped[int] = mapped_column(sa.ForeignKey("fishways.id"))
    key: Mapped[str] = mapped_column(sa.String(200))
    action: Mapped[str] = mapped_column(sa.String(16))
    old_value: Mapped[float | None] = mapped_column(sa.Double)
    new_value: Mapped[float | None] = mapped_column(sa.Double)
    old_text: Mapped[str | None] = mapped_column(sa.String(100))
    new_text: Mapped[str | None] = mapped_column(sa.String(100))
    set_by: Mapped[str] = mapped_column(sa.String(100))
    note: Mapped[str] = mapped_column(sa.Text, server_default="")


class FeedHealth(Base):
    __tablename__ = "feed_health"
    feed: Mapped[str] = mapped_column(sa.String(100), primary_key=True)
    last_success_at: Mapped[datetime | None] = mapped_column(UTCDateTime())
    readings_per_min: Mapped[float | None] = mapped_column(sa.Double)
    lag_s: Mapped[float | None] = mapped_column(sa.Double)
    last_error: Mapped[str | None] = mapped_column(sa.Text)
    last_error_at: Mapped[datetime | None] = mapped_column(UTCDateTime())
    updated_at: Mapped[datetime] = mapped_column(UTCDateTime())
    consecutive_errors: Mapped[int] = mapped_column(sa.Integer, server_default="0")


#: States of a fishway's overview status (:mod:`db.status`).
STATUS_STATES = ("in_criteria", "out_of_criteria", "out_of_service", "no_data", "model_error")
#: Display statuses of one metric of the status.
METRIC_STATUSES = ("normal", "abnormal", "stale", "bad", "none")


class FishwayStatusRow(Base):
    """The newest overview status of a fishway (one row each, replaced every ingest cycle)."""

    __tablename__ = "fishway_status"
    __table_args__ = (sa.CheckConstraint(_in("state", STATUS_STATES), name="state_known"),)
    fishway_id: Mapped[int] = mapped_column(sa.ForeignKey("fishways.id"), primary_key=True,
                                            autoincrement=False)
    computed_ms: Mapped[int] = mapped_column(sa.BigInteger)
    state: Mapped[str] = mapped_column(sa.String(20))
    reason: Mapped[str] = mapped_column(sa.Text, server_default="")
    worst: Mapped[str] = mapped_column(sa.Text, server_default="")
    mode: Mapped[str] = mapped_column(sa.String(20))
    data_ms: Mapped[int | None] = mapped_column(sa.BigInteger)
    fresh_until_ms: Mapped[int | None] = mapped_column(sa.BigInteger)
    stale: Mapped[bool] = mapped_column(sa.Boolean)
    adjust_status: Mapped[str] = mapped_column(sa.String(20))
    adjust_text: Mapped[str] = mapped_column(sa.Text, server_default="")
    adjust_changes: Mapped[str] = mapped_column(sa.Text, server_default="")
    adjust_stale: Mapped[bool] = mapped_column(sa.Boolean)
    gauges: Mapped[str] = mapped_column(sa.Text, server_default="")
    gauges_ok: Mapped[bool] = mapped_column(sa.Boolean)
    problems: Mapped[str] = mapped_column(sa.Text, server_default="")


class StatusMetric(Base):
    """One displayed quantity of a fishway's newest status (SI values and display texts)."""

    __tablename__ = "fishway_status_metrics"
    __table_args__ = (sa.CheckConstraint(_in("status", METRIC_STATUSES), name="status_known"),)
    fishway_id: Mapped[int] = mapped_column(sa.ForeignKey("fishways.id"), primary_key=True,
                                            autoincrement=False)
    key: Mapped[str] = mapped_column(sa.String(40), primary_key=True)
    position: Mapped[int] = mapped_column(sa.SmallInteger)
    label: Mapped[str] = mapped_column(sa.String(100))
    kind: Mapped[str] = mapped_column(sa.String(20))
    value: Mapped[float | None] = mapped_column(sa.Double)
    lo: Mapped[float | None] = mapped_column(sa.Double)
    hi: Mapped[float | None] = mapped_column(sa.Double)
    target: Mapped[float | None] = mapped_column(sa.Double)
    status: Mapped[str] = mapped_column(sa.String(10))
    note: Mapped[str] = mapped_column(sa.Text, server_default="")
    source: Mapped[str] = mapped_column(sa.String(100), server_default="")
    text: Mapped[str] = mapped_column(sa.String(60), server_default="")
    band_text: Mapped[str] = mapped_column(sa.String(200), server_default="")
    band_left_pct: Mapped[float | None] = mapped_column(sa.Double)
    band_width_pct: Mapped[float | None] = mapped_column(sa.Double)
    target_pct: Mapped[float | None] = mapped_column(sa.Double)
    value_pct: Mapped[float | None] = mapped_column(sa.Double)
    off_scale: Mapped[bool] = mapped_column(sa.Boolean, server_default=sa.false())

"""What was advised, what was set, what was written: recommendations, actuator settings,
and the operator log.

Writing
-------
``record_recommendation(engine, fishway_id, ts, *, inputs, settings, predicted,
binding_constraint, feasible, reason="") -> int`` — one recommender result; ``inputs``,
``settings`` and ``predicted`` are small JSON-able dicts (finite numbers, strings, lists),
e.g. ``settings={"entrance_gate_m": 0.42}``, ``predicted={"drop_m": 0.28}``.
``record_actuator_setting(engine, fishway_id, ts, actuator, value, *, set_by, source,
unit="", recommendation_id=None, note="") -> int`` — a setting as actually made;
``source`` is one of :data:`ACTUATOR_SOURCES`.
``add_log_entry(engine, ts, author, kind, *, text="", fishway_id=None, actuator=None,
from_value=None, to_value=None, refers_to=None) -> int`` — the operator log is
append-only (the database refuses UPDATE and DELETE); a mistake is fixed by a
``correction`` entry whose ``refers_to`` is the id of the entry it corrects. An
``adjustment`` names its actuator and the value it was set to.

Reading (DataFrames indexed by ``ts``, tz-aware UTC, ascending; ``[start, end)``)
-------
``recommendations_frame(engine, fishway_id, start, end)``,
``actuator_settings_frame(engine, fishway_id, start, end, actuator=None)``,
``latest_actuator_settings(engine, fishway_id)`` (index ``actuator``: the newest setting
of each), ``operator_log_frame(engine, start, end, fishway_id=None)``.

Helpers (shared with :mod:`db.dashboard_queries`)
-------
``rows_frame(engine, stmt)`` — the rows of a select as a DataFrame (the select's columns);
``ts_frame(engine, stmt)`` — the same indexed by its ``ts`` column, tz-aware UTC (an empty
result too); ``ts_between(column, start=None, end=None)`` — the conditions
``start <= column < end`` (a bound given as None is left open);
``finite_or_none(name, value)`` — a float, None kept, ValueError for NaN or ±inf;
``insert_row(engine, table, values)`` — insert one row, return its primary key.

>>> from datetime import datetime, timezone
>>> from db.engine import make_engine
>>> from db.migrate import upgrade
>>> from db.catalog import add_site, add_fishway
>>> eng = make_engine("sqlite://"); _ = upgrade(eng)
>>> fw = add_fishway(eng, add_site(eng, "Demo"), "Left bank")
>>> t = datetime(2026, 5, 1, 8, 0, tzinfo=timezone.utc)
>>> rec = record_recommendation(eng, fw, t, inputs={"tailwater_m": 101.2},
...     settings={"gate_m": 0.4}, predicted={"drop_m": 0.27}, binding_constraint="drop_m",
...     feasible=True, reason="drop at its limit")
>>> _ = record_actuator_setting(eng, fw, t, "gate", 0.4, unit="m", set_by="op1",
...                             source="recommendation", recommendation_id=rec)
>>> latest_actuator_settings(eng, fw).loc["gate", "value"]
np.float64(0.4)
>>> eng.dispose()
"""
from __future__ import annotations

import json
import math
from datetime import datetime

import pandas as pd
import sqlalchemy as sa
from sqlalchemy.engine import Engine

from db.models import OPERATOR_LOG_KINDS, ActuatorSetting, OperatorLogEntry, Recommendation
from db.types import to_utc

__all__ = [
    "ACTUATOR_SOURCES",
    "actuator_settings_frame",
    "add_log_entry",
    "finite_or_none",
    "insert_row",
    "latest_actuator_settings",
    "operator_log_frame",
    "recommendations_frame",
    "record_actuator_setting",
    "record_recommendation",
    "rows_frame",
    "ts_between",
    "ts_frame",
]

#: Where an actuator setting came from.
ACTUATOR_SOURCES = ("manual", "recommendation", "plc", "simulator", "import")


def _json_payload(name: str, payload: dict) -> dict:
    if not isinstance(payload, dict):
        raise ValueError(f"{name} must be a dict")
    try:
        json.dumps(payload, allow_nan=False)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"{name} is not plain JSON with finite numbers: {exc}") from None
    return payload


def insert_row(engine: Engine, table: sa.Table, values: dict) -> int:
    """Insert one row of ``values`` into ``table`` (its own transaction); return the new
    row's primary key."""
    with engine.begin() as conn:
        return int(conn.execute(sa.insert(table).values(**values)).inserted_primary_key[0])


def finite_or_none(name: str, value: float | None) -> float | None:
    """``value`` as a float (None stays None); ValueError naming ``name`` for NaN or ±inf.

    >>> finite_or_none("to_value", 2), finite_or_none("to_value", None)
    (2.0, None)
    >>> finite_or_none("to_value", float("nan"))
    Traceback (most recent call last):
    ValueError: to_value must be finite
    """
    if value is None:
        return None
    value = float(value)
    if not math.isfinite(value):
        raise ValueError(f"{name} must be finite")
    return value


def record_recommendation(engine: Engine, fishway_id: int, ts: datetime, *, inputs: dict,
                          settings: dict, predicted: dict, binding_constraint: str | None,
                          feasible: bool, reason: str = "") -> int:
    """Store one recommendation; return its id."""
    return insert_row(engine, Recommendation.__table__, {
        "ts": to_utc(ts), "fishway_id": fishway_id, "inputs": _json_payload("inputs", inputs),
        "settings": _json_payload("settings", settings),
        "predicted": _json_payload("predicted", predicted),
        "binding_constraint": binding_constraint, "feasible": bool(feasible), "reason": reason,
    })


def record_actuator_setting(engine: Engine, fishway_id: int, ts: datetime, actuator: str,
                            value: float, *, set_by: str, source: str, unit: str = "",
                            recommendation_id: int | None = None, note: str = "") -> int:
    """Store a setting as made; return its id."""
    if source not in ACTUATOR_SOURCES:
        raise ValueError(f"unknown source {source!r}; known: {ACTUATOR_SOURCES}")
    if not actuator or not set_by:
        raise ValueError("an actuator setting needs the actuator and who set it")
    return insert_row(engine, ActuatorSetting.__table__, {
        "ts": to_utc(ts), "fishway_id": fishway_id, "actuator": actuator,
        "value": finite_or_none("value", value), "unit": unit, "set_by": set_by, "source": source,
        "recommendation_id": recommendation_id, "note": note,
    })


def add_log_entry(engine: Engine, ts: datetime, author: str, kind: str, *, text: str = "",
                  fishway_id: int | None = None, actuator: str | None = None,
                  from_value: float | None = None, to_value: float | None = None,
                  refers_to: int | None = None) -> int:
    """Append an operator log entry; return its id."""
    if kind not in OPERATOR_LOG_KINDS:
        raise ValueError(f"unknown kind {kind!r}; known: {OPERATOR_LOG_KINDS}")
    if kind == "correction" and refers_to is None:
        raise ValueError("a correction must refer to the entry it corrects")
    if kind == "adjustment" and (not actuator or to_value is None):
        raise ValueError("an adjustment names the actuator and the value it was set to")
    if not author:
        raise ValueError("a log entry needs an author")
    return insert_row(engine, OperatorLogEntry.__table__, {
        "ts": to_utc(ts), "author": author, "kind": kind, "text": text,
        "fishway_id": fishway_id, "actuator": actuator,
        "from_value": finite_or_none("from_value", from_value),
        "to_value": finite_or_none("to_value", to_value),
        "refers_to": refers_to,
    })


def rows_frame(engine: Engine, stmt: sa.Select) -> pd.DataFrame:
    """The rows of ``stmt`` as a DataFrame with the select's column names (default index)."""
    with engine.connect() as conn:
        result = conn.execute(stmt)
        return pd.DataFrame(result.all(), columns=list(result.keys()))


def ts_frame(engine: Engine, stmt: sa.Select) -> pd.DataFrame:
    """The rows of ``stmt`` indexed by its ``ts`` column as tz-aware UTC timestamps, in the
    select's order; an empty result has the same index type."""
    frame = rows_frame(engine, stmt)
    if frame.empty:
        frame = frame.astype({"ts": "datetime64[us, UTC]"})
    frame["ts"] = pd.to_datetime(frame["ts"], utc=True)
    return frame.set_index("ts")


def ts_between(column: sa.ColumnElement, start: datetime | None = None,
               end: datetime | None = None) -> list[sa.ColumnElement[bool]]:
    """The conditions ``start <= column < end`` for ``select.where(*...)``, bounds as UTC; a
    bound given as None is left open (no condition). Nothing checks the order of the bounds
    (an end before the start matches no row)."""
    out = []
    if start is not None:
        out.append(column >= to_utc(start))
    if end is not None:
        out.append(column < to_utc(end))
    return out


def _range(table: sa.Table, start: datetime, end: datetime) -> sa.ColumnElement[bool]:
    if to_utc(end) <= to_utc(start):
        raise ValueError("end must be after start")
    return sa.and_(*ts_between(table.c.ts, start, end))


def recommendations_frame(engine: Engine, fishway_id: int, start: datetime,
                          end: datetime) -> pd.DataFrame:
    """Recommendations of a fishway (columns id, inputs, settings, predicted,
    binding_constraint, feasible, reason)."""
    t = Recommendation.__table__
    stmt = (sa.select(t.c.ts, t.c.id, t.c.inputs, t.c.settings, t.c.predicted,
                      t.c.binding_constraint, t.c.feasible, t.c.reason)
            .where(t.c.fishway_id == fishway_id, _range(t, start, end)).order_by(t.c.ts, t.c.id))
    return ts_frame(engine, stmt)


def actuator_settings_frame(engine: Engine, fishway_id: int, start: datetime, end: datetime,
                            actuator: str | None = None) -> pd.DataFrame:
    """Settings made on a fishway (columns id, actuator, value, unit, set_by, source,
    recommendation_id, note)."""
    t = ActuatorSetting.__table__
    stmt = (sa.select(t.c.ts, t.c.id, t.c.actuator, t.c.value, t.c.unit, t.c.set_by, t.c.source,
                      t.c.recommendation_id, t.c.note)
            .where(t.c.fishway_id == fishway_id, _range(t, start, end)).order_by(t.c.ts, t.c.id))
    if actuator is not None:
        stmt = stmt.where(t.c.actuator == actuator)
    return ts_frame(engine, stmt)


def latest_actuator_settings(engine: Engine, fishway_id: int) -> pd.DataFrame:
    """Newest setting (by time, then by id) of each actuator of a fishway (index
    ``actuator``; columns ts, value, unit, set_by, source)."""
    t = ActuatorSetting.__table__
    t2 = t.alias("newer")
    newest_ts = (sa.select(sa.func.max(t2.c.ts)).where(t2.c.fishway_id == t.c.fishway_id,
                                                      t2.c.actuator == t.c.actuator)
                 .scalar_subquery())
    stmt = (sa.select(t.c.actuator, t.c.id, t.c.ts, t.c.value, t.c.unit, t.c.set_by, t.c.source)
            .where(t.c.fishway_id == fishway_id, t.c.ts == newest_ts)
            .order_by(t.c.actuator, t.c.id))
    frame = rows_frame(engine, stmt).drop_duplicates("actuator", keep="last").drop(columns="id")
    frame["ts"] = pd.to_datetime(frame["ts"], utc=True)
    return frame.set_index("actuator")


def operator_log_frame(engine: Engine, start: datetime, end: datetime,
                       fishway_id: int | None = None) -> pd.DataFrame:
    """Operator log entries (columns id, author, kind, text, fishway_id, actuator,
    from_value, to_value, refers_to)."""
    t = OperatorLogEntry.__table__
    stmt = (sa.select(t.c.ts, t.c.id, t.c.author, t.c.kind, t.c.text, t.c.fishway_id,
                      t.c.actuator, t.c.from_value, t.c.to_value, t.c.refers_to)
            .where(_range(t, start, end)).order_by(t.c.ts, t.c.id))
    if fishway_id is not None:
        stmt = stmt.where(t.c.fishway_id == fishway_id)
    return ts_frame(engine, stmt)

"""Storing and reading the newest status of each fishway (tables of migration 0004).

The ingest judges the status once per cycle (:func:`status_evaluator`, after the alarm
evaluation of each poll and each recommender cycle) and replaces each fishway's rows in one
transaction; the dashboard may recompute it right after a change it made itself (a setting,
a logged adjustment) with :func:`update_status`. Readers see whole statuses only: the status
and its metrics are read in one statement.

:func:`read_status` is the overview's hot path (every viewer, every 10 s): it runs two plain
statements on the pool's DBAPI connection, without SQLAlchemy's statement layer (which costs
three times the statements themselves here) and without pandas; its result is plain tuples.

>>> import tempfile, pathlib
>>> from datetime import datetime, UTC
>>> from db.engine import make_engine
>>> from db.migrate import upgrade
>>> from db.site_sync import sync_site
>>> from ops_logic.site import load_site
>>> site = load_site()
>>> engine = make_engine(sqlite_path=pathlib.Path(tempfile.mkdtemp()) / "s.sqlite")
>>> _ = upgrade(engine), sync_site(engine, site)
>>> stored = update_status(site, engine, datetime(2026, 7, 1, tzinfo=UTC))
>>> read = read_status(engine, site.site.name)
>>> [(s.id, s.state) for s in read.statuses]     # no readings at all yet
[('east', 'no_data'), ('west', 'no_data')]
>>> read.statuses[0].metrics[0].key, read.alarm_rows
('forebay', [])
"""

from __future__ import annotations

import logging
from collections.abc import Sequence
from datetime import datetime
from typing import Any, NamedTuple

from sqlalchemy.engine import Engine

from db.dashboard_queries import fishway_db_ids
from db.models import FishwayStatusRow, StatusMetric
from db.status.judge import compute_status
from db.status.model import Adjustment, FishwayStatus, Metric
from ops_logic.site import Site

__all__ = ["StoredStatus", "read_status", "renew_status", "status_evaluator", "store_status",
           "update_status"]

_log = logging.getLogger(__name__)

_STATUS = FishwayStatusRow.__table__
_METRICS = StatusMetric.__table__
_S_COLS = ("computed_ms", "state", "reason", "worst", "mode", "data_ms", "fresh_until_ms",
           "stale", "adjust_status", "adjust_text", "adjust_changes", "adjust_stale", "gauges",
           "gauges_ok", "problems")
_M_COLS = ("key", "label", "kind", "value", "lo", "hi", "target", "status", "note", "source",
           "text", "band_text", "band_left_pct", "band_width_pct", "target_pct", "value_pct",
           "off_scale")
_READ_SQL = (
    "SELECT st.name, f.name, f.id, " + ", ".join(f"s.{c}" for c in _S_COLS) + ", "
    + ", ".join(f"m.{c}" for c in _M_COLS) + " FROM fishway_status s "
    "JOIN fishways f ON f.id = s.fishway_id JOIN sites st ON st.id = f.site_id "
    "LEFT JOIN fishway_status_metrics m ON m.fishway_id = s.fishway_id "
    "ORDER BY s.fishway_id, m.position")
_ALARM_SQL = ("SELECT fishway_id, priority, state, count(*) FROM alarms "
              "GROUP BY fishway_id, priority, state")


class StoredStatus(NamedTuple):
    """What :func:`read_status` read: the stored statuses of the site's fishways (in the order
    of their database ids; ``profile`` and ``alarms`` None) and the alarm counts
    ``[(fishway db id or None, priority, state, count)]`` (empty: no alarm data at all), with
    the fishways' database ids by site-file id."""

    statuses: tuple[FishwayStatus, ...]
    alarm_rows: list[tuple[int | None, str, str, int]]
    db_ids: dict[str, int]


def _split(text: str) -> tuple[str, ...]:
    return tuple(text.split("\n")) if text else ()


def store_status(engine: Engine, db_ids: dict[str, int],
                 statuses: Sequence[FishwayStatus]) -> None:
    """Replace the stored status of each fishway in ``statuses`` (one transaction)."""
    rows, metrics = [], []
    for s in statuses:
        fw = db_ids[s.id]
        a = s.adjustment
        rows.append({"fishway_id": fw, "computed_ms": s.computed_ms, "state": s.state,
                     "reason": s.reason, "worst": s.worst, "mode": s.mode,
                     "data_ms": s.data_ms, "fresh_until_ms": s.fresh_until_ms,
                     "stale": bool(s.stale), "adjust_status": a.status,
                     "adjust_text": a.text, "adjust_changes": "\n".join(a.changes),
                     "adjust_stale": bool(a.stale), "gauges": s.gauges,
                     "gauges_ok": bool(s.gauges_ok), "problems": "\n".join(s.problems)})
        metrics += [{"fishway_id": fw, "position": i, **{c: getattr(m, c) for c in _M_COLS}}
                    for i, m in enumerate(s.metrics)]
    ids = [r["fishway_id"] for r in rows]
    with engine.begin() as conn:
        conn.execute(_METRICS.delete().where(_METRICS.c.fishway_id.in_(ids)))
        conn.execute(_STATUS.delete().where(_STATUS.c.fishway_id.in_(ids)))
        if rows:
            conn.execute(_STATUS.insert(), rows)
        if metrics:
            conn.execute(_METRICS.insert(), metrics)


def update_status(site: Site, engine: Engine, now: datetime) -> tuple[FishwayStatus, ...]:
    """Judge the status of every fishway of ``site`` at ``now`` and store it; the statuses
    (with their profiles) are returned."""
    statuses = compute_status(site, engine, now)
    store_status(engine, fishway_db_ids(engine, site.site.name), statuses)
    return statuses


def renew_status(site: Site, engine: Engine, now: datetime) -> bool:
    """:func:`update_status` after a change made outside the ingest (a supervisor's setting,
    a logged adjustment), so the overview shows it before the next ingest cycle. A failure
    is logged with its traceback and False returned: the change itself stands, and the
    ingest's next cycle renews the status anyway."""
    try:
        update_status(site, engine, now)
    except Exception:
        _log.exception("renewing the fishway status after a change failed")
        return False
    return True


def _stored(head: tuple, metrics: tuple[Metric, ...]) -> FishwayStatus:
    (fid, computed_ms, state, reason, worst, mode, data_ms, fresh_until_ms, stale,
     adjust_status, adjust_text, adjust_changes, adjust_stale, gauges, gauges_ok,
     problems) = head
    age = None if data_ms is None else (computed_ms - data_ms) / 1000.0
    return FishwayStatus(
        fid, fid, state, reason, worst, age, bool(stale), metrics, None,
        Adjustment(adjust_status, adjust_text, _split(adjust_changes), bool(adjust_stale)),
        gauges, bool(gauges_ok), mode, None, computed_ms=int(computed_ms),
        data_ms=None if data_ms is None else int(data_ms),
        fresh_until_ms=None if fresh_until_ms is None else int(fresh_until_ms),
        problems=_split(problems))


_HEAD = slice(3, 3 + len(_S_COLS))
_METRIC = slice(3 + len(_S_COLS), 3 + len(_S_COLS) + len(_M_COLS))


def read_status(engine: Engine, site_name: str) -> StoredStatus:
    """The stored statuses of site ``site_name``'s fishways and the live alarm counts (two
    statements on one pooled connection). The ``name`` of each status is its site-file id
    (the caller knows the display names); ``age_s`` is the data's age when it was judged."""
    conn = engine.raw_connection()
    try:
        cur = conn.cursor()
        cur.execute(_READ_SQL)
        rows = cur.fetchall()
        cur.execute(_ALARM_SQL)
        alarms = [(None if fw is None else int(fw), str(p), str(st), int(n))
                  for fw, p, st, n in cur.fetchall()]
        cur.close()
    finally:
        conn.close()
    heads: dict[str, tuple] = {}
    metrics: dict[str, list[Metric]] = {}
    db_ids: dict[str, int] = {}
    for row in rows:
        if row[0] != site_name:
            continue
        fid = row[1]
        if fid not in heads:
            heads[fid] = (fid, *row[_HEAD])
            metrics[fid] = []
            db_ids[fid] = int(row[2])
        if row[_METRIC.start] is not None:
            metrics[fid].append(Metric._make(row[_METRIC]))
    return StoredStatus(tuple(_stored(heads[f], tuple(metrics[f])) for f in heads), alarms,
                        db_ids)


class _StatusEvaluator:
    """The ingest hook: recompute and store the status after each cycle."""

    __name__ = "status"

    def __init__(self, site: Site, engine: Engine):
        self.site, self.engine = site, engine

    def __call__(self, now: datetime, _ctx: Any) -> None:
        update_status(self.site, self.engine, now)


def status_evaluator(site: Site, engine: Engine) -> _StatusEvaluator:
    """The evaluator to append to :class:`db.ingest.service.IngestService`'s ``evaluators``
    (after the alarm evaluator, so the statuses follow the same readings). A failure is
    logged and recorded in feed health as ``evaluator:status`` by the service."""
    return _StatusEvaluator(site, engine)

"""The overview and the wall display: the stored status of each fishway, as of now.

The status is judged once per ingest cycle (:mod:`db.status`: solver, readings, positions,
the latest recommendation; see :mod:`db.status.judge` for what it rests on) and stored; a
refresh reads it back in two statements (:func:`db.status.read_status`) and adds only what
changes between cycles:

- the data's age, from the time of the readings the status rests on;
- staleness since: when ``now`` is past the status's ``fresh_until_ms`` (a reading it took as
  current has gone stale) the ingest has not renewed it (it does every poll), so the fishway
  shows ``no_data`` with the reason, every value greyed, and the site line says so;
- the alarm counts (live: they change with every acknowledgement): active alarms
  (unacknowledged, acknowledged, returned to normal but unacknowledged) by priority, from a
  GROUP BY over the alarms table; with no row in that table at all the display says "no
  alarm data".

A fishway without any stored status (a new database before the ingest's first cycle) shows
``no_data`` saying so.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from datetime import UTC, datetime
from typing import Any

from db.status import FishwayStatus, read_status
from db.status.cache import find_tag, tag_catalogue
from db.status.judge import worst_criterion
from db.status.model import (
    STALE_POLLS,
    STATE_LABELS,
    Adjustment,
    Metric,
    age_text,
    metric_keys,
)
from ops_logic.site import Site

__all__ = [
    "ACTIVE_ALARM_STATES",
    "PRIORITIES",
    "SPARK_HOURS",
    "SPARK_KINDS",
    "SPARK_ROLES",
    "STALE_POLLS",
    "STATE_LABELS",
    "FishwayStatus",
    "Metric",
    "Snapshot",
    "age_text",
    "metric_keys",
    "now",
    "snapshot",
    "spark_points",
    "worst_criterion",
]

ACTIVE_ALARM_STATES = ("unacknowledged", "acknowledged", "rtn_unacknowledged")
PRIORITIES = ("critical", "high", "medium", "low")
SPARK_HOURS = 6.0
"""Span of the overview's sparklines [h] (one-minute rollups: at most 360 points each)."""
SPARK_ROLES = {"forebay": "forebay", "tailwater": "tailwater", "water_temp": "water_temp",
               "do": "do"}
"""Metric key → tag role of the metrics drawn with a sparkline."""
SPARK_KINDS = {"forebay": "elevation", "tailwater": "elevation", "water_temp": "temperature",
               "do": "do"}
"""Metric key → display kind of the sparklines."""


def now() -> datetime:
    """The time a refresh is for (UTC); the pages call it, tests may replace it."""
    return datetime.now(UTC)


@dataclass(frozen=True)
class Snapshot:
    now: datetime
    site_name: str
    units: str
    time_zone: str
    fishways: tuple[FishwayStatus, ...]
    site_alarms: dict[str, int] | None
    problems: tuple[str, ...] = ()


def _alarm_counts(alarms: list[tuple[int | None, str, str, int]],
                  db_id: int | None) -> dict[str, int] | None:
    if not alarms:
        return None
    out = dict.fromkeys((*PRIORITIES, "unacknowledged", "shelved"), 0)
    for fw, priority, state, n in alarms:
        if fw != db_id:
            continue
        if state in ACTIVE_ALARM_STATES:
            out[priority] = out.get(priority, 0) + n
            if state != "acknowledged":
                out["unacknowledged"] += n
        elif state == "shelved":
            out["shelved"] += n
    return out


def _local_clock(ms: int, time_zone: str) -> str:
    from zoneinfo import ZoneInfo

    return datetime.fromtimestamp(ms / 1000.0, tz=ZoneInfo(time_zone)).strftime("%H:%M:%S")


def _no_status(site: Site, fid: str) -> FishwayStatus:
    f = site.fishway(fid)
    why = "no status computed yet: the ingest service computes it every poll"
    metrics = tuple(Metric(key, label, "length", None, status="none", text="—",
                           band_text="") for key, label in metric_keys(f))
    return FishwayStatus(fid, f.name, "no_data", why, why, None, True, metrics, None,
                         Adjustment("unknown", "no status yet"), "no status yet", True,
                         "operating")


def _as_of(status: FishwayStatus, name: str, now_ms: int, alarms: dict[str, int] | None,
           time_zone: str) -> tuple[FishwayStatus, bool]:
    """The stored status at ``now_ms``, and whether it has expired unrenewed."""
    age = None if status.data_ms is None else (now_ms - status.data_ms) / 1000.0
    expired = not status.stale and (status.fresh_until_ms is None
                                    or now_ms > status.fresh_until_ms)
    if not expired:
        return status._replace(name=name, age_s=age, alarms=alarms), False
    when = _local_clock(status.computed_ms, time_zone)
    why = f"status of {when} not renewed: is the ingest service running?"  # age: beside it
    state, reason = (status.state, status.reason) if status.state == "out_of_service" else (
        "no_data", why)
    metrics = tuple(m._replace(status="stale", note=f"as of {when}") if m.status in (
        "normal", "abnormal") else m for m in status.metrics)
    adj = status.adjustment  # a judgement on old data: shown greyed, never as due
    adjustment = Adjustment("unknown", f"as of {when}: {adj.text}", adj.changes, stale=True)
    return status._replace(name=name, age_s=age, alarms=alarms, stale=True, state=state,
                           reason=reason, metrics=metrics, adjustment=adjustment), True


def snapshot(site: Site, engine: Any, now: datetime) -> Snapshot:
    """The status of every fishway of ``site`` as of ``now`` (tz-aware); see the module."""
    stored = read_status(engine, site.site.name)
    now_ms = int(now.timestamp() * 1000)
    by_id = {s.id: s for s in stored.statuses}
    statuses, problems, missing, expired = [], [], [], []
    for f in site.fishways:
        s = by_id.get(f.id)
        if s is None:
            statuses.append(_no_status(site, f.id))
            missing.append(f.name)
            continue
        shown, old = _as_of(s, f.name, now_ms,
                            _alarm_counts(stored.alarm_rows, stored.db_ids.get(f.id)),
                            site.site.time_zone)
        statuses.append(shown)
        problems += shown.problems
        if old:
            expired.append(shown)
    if missing:
        problems.append(f"no status computed yet for {', '.join(missing)}: the ingest service "
                        "computes it every poll")
    if expired:
        last = max(s.computed_ms for s in expired)
        problems.append(f"status of {', '.join(s.name for s in expired)} not renewed since "
                        f"{_local_clock(last, site.site.time_zone)}: is the ingest service "
                        "running?")
    return Snapshot(now, site.site.name, site.site.units, site.site.time_zone, tuple(statuses),
                    _alarm_counts(stored.alarm_rows, None), tuple(problems))


def spark_points(site: Site, engine: Any, at: datetime, since_ms: Mapping[str, int] | None = None
                 ) -> dict[str, tuple[list[int], list[float]]]:
    """Sparkline points by ``"<fishway>.<metric>"``: the last value of each complete
    one-minute rollup of the metric's tag over the last :data:`SPARK_HOURS` (epoch ms, SI), or
    only those after ``since_ms[key]`` when given (keys without new points are left out)."""
    from db.rollups import rollups_frame

    tags = tag_catalogue(site, engine)
    end_ms = int(at.timestamp() // 60) * 60_000  # complete minutes only
    out: dict[str, tuple[list[int], list[float]]] = {}
    for f in site.fishways:
        for key, role in SPARK_ROLES.items():
            entry = find_tag(tags, f.id, role)
            if entry is None:
                continue
            name = f"{f.id}.{key}"
            start_ms = end_ms - int(SPARK_HOURS * 3_600_000)
            if since_ms is not None:
                start_ms = max(start_ms, int(since_ms.get(name, start_ms)) + 1)
            if start_ms >= end_ms:
                continue
            frame = rollups_frame(engine, entry[1], 60, start_ms / 1000.0, end_ms / 1000.0)
            if frame.empty and since_ms is not None:
                continue
            ms = frame.index.to_numpy(dtype="datetime64[ms]").astype("int64").tolist()
            out[name] = (ms, frame["last"].tolist())
    return out

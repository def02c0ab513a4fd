"""Service of the Alarms page: the active alarm list, operators' actions, history, performance.

Reading goes through the storage API of the alarm work (:mod:`db.alarm`, :mod:`db.alarms`),
writing only through :class:`db.alarm.service.AlarmService`, with the signed-in user's name
(the page's callbacks call :func:`dashboard.auth.require` first; the service checks the role
in the ``users`` table again).

**Active alarms** (:func:`active_view`): every alarm that is not normal, in its ISA-18.2 state
(ANSI/ISA-18.2-2016, IEC 62682; REFERENCES.md "Alarms and displays"): unacknowledged,
acknowledged, returned to normal unacknowledged, shelved, suppressed by design, out of service.
An alarm grouped under a cause (``parent``: a feed's communications failure, a pump trip) is
listed under that parent, which shows the count. An alarm suppressed by design because its
fishway is in maintenance or out of service is listed only while its condition is present; the
rest are counted per fishway ("37 alarms suppressed by design"). The look of a row follows the
priority only where the operator must act (ISA-101: colour only for abnormal): ``unack`` solid,
``ack`` outlined, ``rtn`` lighter, ``neutral`` for shelved, suppressed and out of service.

**History** (:func:`history_rows`, :func:`history_csv`): the events of a period, filtered as
:func:`db.alarm.history.alarm_history_frame` filters them, plus ``"_site"`` for the site-wide
alarms of feeds (no fishway).

**Performance** (:func:`performance_view`): :func:`db.alarm.history.alarm_performance_report`
(EEMUA 191 / ISA-18.2 figures beside their targets) with the annunciations per 10-minute period
(:func:`rate_bins`: counted as :mod:`ops_logic.alarms.performance` counts them: ``raised``
events into ``unacknowledged``, in fixed periods from the start), the top 10 and the priority
split beside the ~80/15/5 % target.

Values are shown in the site's display units (SI beside US units); alarm messages are the
engine's text, in SI. An alarm's row is stored when its state changes (:mod:`db.alarm.store`),
so its value and message are those of its last change, not of the latest evaluation.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field, replace
from datetime import datetime, timedelta
from zoneinfo import ZoneInfo

import numpy as np
import pandas as pd

from dashboard.context import AppContext
from db.alarm.history import alarm_history_frame, alarm_performance_report
from db.alarm.service import AlarmService
from db.alarm.store import AlarmStore, SiteIds, site_ids
from db.alarms import alarms_frame
from ops_logic.alarms.performance import PERIOD, PRIORITY_TARGET_PCT, AlarmPerformance, to_csv
from ops_logic.report_format import format_value
from ops_logic.tags import site_tags

__all__ = [
    "ACTIONS",
    "EVALUATION_STALE_S",
    "HISTORY_LIMIT",
    "MODE_LABELS",
    "QARTOD_FLAG_NAMES",
    "RULE_LABELS",
    "SHOW_GROUPS",
    "SITE_WIDE",
    "STATE_TEXT",
    "ActionResult",
    "ActiveView",
    "AlarmRow",
    "FloodView",
    "HistoryFilters",
    "PerformanceView",
    "act",
    "active_view",
    "alarm_label",
    "history_csv",
    "history_rows",
    "local_range_text",
    "performance_view",
    "period_bounds",
    "rate_bins",
    "set_mode",
    "shelve_choices",
    "value_text",
    "visible_rows",
]

RULE_LABELS = {
    "head_drop": "Pool head drop", "entrance_head": "Entrance head", "exit_head": "Exit weir head",
    "power_density": "Pool power density", "diffuser_velocity": "Diffuser velocity",
    "attraction_flow_low": "Attraction flow low", "forebay_range": "Forebay out of range",
    "tailwater_range": "Tailwater out of range", "temp_high": "Water temperature high",
    "temp_high_high": "Water temperature high-high", "do_low": "Dissolved oxygen low",
    "do_low_low": "Dissolved oxygen low-low", "do_sat_low": "Oxygen saturation low",
    "do_sat_low_low": "Oxygen saturation low-low", "tdg_high": "Total dissolved gas high",
    "trash_rack_dp_high": "Trash-rack differential high",
    "picket_dp_high": "Picket differential high",
    "actuator_mismatch": "Actuator differs from logged setting", "pump_trip": "Pump station trip",
    "sensor_fail": "Sensor failed QC", "sensor_suspect": "Sensor suspect",
    "stale_tag": "Stale reading", "feed_comms": "Feed communications failure",
    "gauge_disagree": "Redundant gauges disagree", "adjustment_due": "Adjustment due",
}
"""Display names of the alarm rules (:data:`ops_logic.alarms.config.RULE_NAMES`)."""

STATE_TEXT = {"normal": "Normal", "unacknowledged": "Unacknowledged",
              "acknowledged": "Acknowledged",
              "rtn_unacknowledged": "Returned to normal, unacknowledged",
              "shelved": "Shelved", "suppressed_by_design": "Suppressed by design",
              "out_of_service": "Out of service"}
"""ISA-18.2 state names (ANSI/ISA-18.2-2016; REFERENCES.md)."""
SHOW_GROUPS = {"attention": "Needs acknowledging", "acknowledged": "Acknowledged",
               "shelved": "Shelved", "suppressed": "Suppressed", "out_of_service":
               "Out of service"}
_GROUP = {"unacknowledged": "attention", "rtn_unacknowledged": "attention",
          "acknowledged": "acknowledged", "shelved": "shelved",
          "suppressed_by_design": "suppressed", "out_of_service": "out_of_service"}
_RANK = {"unacknowledged": 0, "rtn_unacknowledged": 1, "acknowledged": 2, "shelved": 3,
         "suppressed_by_design": 4, "out_of_service": 5, "normal": 6}
_LOOK = {"unacknowledged": "unack", "acknowledged": "ack", "rtn_unacknowledged": "rtn"}
_LEVEL = {"critical": 1, "high": 1, "medium": 2, "low": 3}
MODE_LABELS = {"operating": "In operation", "maintenance": "Maintenance (dewatered)",
               "out_of_service": "Out of service (watered, closed to fish)"}
SITE_WIDE = "_site"
"""Fishway filter value for the site-wide alarms (a feed's communications)."""
QARTOD_FLAG_NAMES = {1: "pass", 2: "not evaluated", 3: "suspect", 4: "fail", 9: "missing"}
"""QARTOD flags (IOOS flags manual v1.2, 2020; seen in ``ioos_qc.qartod.QartodFlags``)."""
EVALUATION_STALE_S = 300.0
"""The page warns when the alarms were last evaluated longer ago than this [s] (ours: the
ingest evaluates every cycle, seconds apart)."""
HISTORY_LIMIT = 500
"""Most events the history table shows (newest first); the CSV export has them all."""
ACTIONS = {"acknowledge": "Acknowledged", "shelve": "Shelved", "unshelve": "Unshelved",
           "remove_from_service": "Removed from service",
           "return_to_service": "Returned to service"}
_SHELVE_S = (900, 1800, 3600, 7200, 14400, 28800, 43200)

_KIND = {**dict.fromkeys(("head_drop", "entrance_head", "exit_head", "forebay_range",
                          "tailwater_range", "trash_rack_dp_high", "picket_dp_high",
                          "gauge_disagree"), "length"),
         "power_density": "power_density", "diffuser_velocity": "velocity",
         "attraction_flow_low": "flow", "temp_high": "°C", "temp_high_high": "°C",
         "do_low": "mg/L", "do_low_low": "mg/L", "do_sat_low": "%", "do_sat_low_low": "%",
         "tdg_high": "%", "stale_tag": "age", "feed_comms": "age", "sensor_fail": "flag",
         "sensor_suspect": "flag", "pump_trip": "trip", "adjustment_due": "count",
         "actuator_mismatch": "mismatch"}


# -- formatting ----------------------------------------------------------------------------
def alarm_label(key: str, rule: str, fishway_id: str | None) -> str:
    """``"Stale reading · P10.level"``: the rule's name and what the key adds to it.

    >>> alarm_label("stale_tag@east.P10.level", "stale_tag", "east")
    'Stale reading · P10.level'
    >>> alarm_label("do_low@east", "do_low", "east"), alarm_label("feed_comms@plant",
    ...                                                          "feed_comms", None)
    ('Dissolved oxygen low', 'Feed communications failure · plant')
    """
    name = RULE_LABELS.get(rule, rule.replace("_", " "))
    where = key.split("@", 1)[1] if "@" in key else ""
    if fishway_id and (where == fishway_id or where.startswith(f"{fishway_id}.")):
        where = where[len(fishway_id) + 1:]
    return f"{name} · {where}" if where else name


def value_text(value: float | None, rule: str, units: str, tag_unit: str | None = None) -> str:
    """An alarm's value in display units (SI beside US units), by what its rule judges.

    >>> value_text(0.3048, "head_drop", "us"), value_text(4.0, "sensor_fail", "us")
    ('1.00 ft (0.305 m)', 'flag 4 (fail)')
    >>> value_text(400.0, "stale_tag", "si"), value_text(None, "do_low", "si")
    ('6.7 min', '—')
    """
    if value is None or not math.isfinite(value):
        return "—"
    kind = _KIND.get(rule, "")
    if kind == "mismatch":
        kind = {"m": "length", "%": "%"}.get(tag_unit or "", "pumps")
    if kind in ("length", "power_density", "velocity", "flow"):
        return format_value(value, kind, units)  # type: ignore[arg-type]
    if kind == "°C":
        return f"{value:.1f} °C"
    if kind == "mg/L":
        return f"{value:.2f} mg/L"
    if kind == "%":
        return f"{value:.1f} %"
    if kind == "age":
        return f"{value:.0f} s" if value < 120 else f"{value / 60:.1f} min"
    if kind == "flag":
        flag = round(value)
        return f"flag {flag} ({QARTOD_FLAG_NAMES.get(flag, 'unknown')})"
    if kind == "trip":
        return "tripped" if value >= 0.5 else "running"
    if kind == "count":
        return f"{value:.0f} setting" + ("" if round(value) == 1 else "s")
    if kind == "pumps":
        return f"{value:.1f} pumps"
    return f"{value:.4g}"


def _local(when: datetime | None, tz: ZoneInfo, now: datetime, seconds: bool = False) -> str:
    if when is None or pd.isna(when):
        return "—"
    t, today = when.astimezone(tz), now.astimezone(tz).date()
    fmt = "%H:%M:%S" if seconds else "%H:%M"
    return t.strftime(fmt if t.date() == today else f"%b %d {fmt}")


# -- active alarms -------------------------------------------------------------------------
@dataclass(frozen=True)
class AlarmRow:
    """One alarm as the list shows it (text is shown as text, never as markup)."""

    key: str
    rule: str
    label: str
    fishway_id: str | None
    fishway: str
    priority: int
    priority_name: str
    state: str
    state_text: str
    look: str
    message: str
    value_si: float | None
    value_text: str
    since: datetime | None
    since_text: str
    acknowledged: str
    parent: str | None = None
    children: tuple[str, ...] = ()


@dataclass(frozen=True)
class FloodView:
    started_text: str
    first_out: str
    count: int
    window_count: int


@dataclass(frozen=True)
class ActiveView:
    """The active alarms now: ``rows`` top level (children by ``by_key``), counts, flood."""

    rows: tuple[AlarmRow, ...]
    by_key: Mapping[str, AlarmRow]
    counts: Mapping[str, int]
    attention: Mapping[int, int]
    flood: FloodView | None
    modes: Mapping[str, str]
    quiet_suppressed: Mapping[str, int]
    evaluated_text: str
    problem: str | None


_IDS: dict[int, tuple[object, object, SiteIds]] = {}
_TAG_UNITS: dict[int, tuple[object, dict[str, str]]] = {}


def _ids(ctx: AppContext) -> SiteIds:
    """The site's database ids, cached per engine and site (the cache keeps both, so an
    ``id`` is never reused for another database)."""
    hit = _IDS.get(id(ctx.engine))
    if hit is None or hit[0] is not ctx.engine or hit[1] is not ctx.site:
        hit = (ctx.engine, ctx.site, site_ids(ctx.engine, ctx.site))
        _IDS[id(ctx.engine)] = hit
    return hit[2]


def _service(ctx: AppContext) -> AlarmService:
    """A fresh service per use (its state cache is not shared between request threads)."""
    return AlarmService(ctx.engine, ctx.site, ids=_ids(ctx))


def _tag_units(ctx: AppContext) -> dict[str, str]:
    hit = _TAG_UNITS.get(id(ctx.site))
    if hit is None or hit[0] is not ctx.site:
        hit = (ctx.site, {t.name: t.unit for t in site_tags(ctx.site)})
        _TAG_UNITS[id(ctx.site)] = hit
    return hit[1]


def _num(x: object) -> float | None:
    return None if x is None or pd.isna(x) else float(x)  # type: ignore[arg-type]


def _str(x: object) -> str:
    """A text cell of a frame as ``str`` (missing: ``""``; pandas 3 gives NaN for it)."""
    return x if isinstance(x, str) else ""


def active_view(ctx: AppContext, now: datetime) -> ActiveView:
    """Every alarm that is not normal, grouped, with the flood and modes; see the module."""
    ids = _ids(ctx)
    tz = ZoneInfo(ctx.site.site.time_zone)
    store = AlarmStore(ctx.engine, ctx.site, ids=ids)
    state = store.load()
    frame = alarms_frame(ctx.engine)
    frame = frame[frame["state"] != "normal"]
    site_id = {v: k for k, v in ids.fishways.items()}
    names = {f.id: f.name for f in ctx.site.fishways}
    units, tag_units = ctx.units, _tag_units(ctx)
    rows: dict[str, AlarmRow] = {}
    quiet: dict[str, int] = {}
    for key, r in frame.iterrows():
        rec = r["record"] if isinstance(r["record"], dict) else {}
        fid = site_id.get(int(r["fishway_id"])) if pd.notna(r["fishway_id"]) else None
        parent, ack_by = _str(r["parent"]), _str(r["acknowledged_by"])
        if (r["state"] == "suppressed_by_design" and not parent
                and not rec.get("active", True)):
            quiet[fid or SITE_WIDE] = quiet.get(fid or SITE_WIDE, 0) + 1
            continue
        state_text = STATE_TEXT.get(r["state"], r["state"])
        if r["state"] == "shelved":
            state_text += f" until {_local(r['shelved_until'], tz, now)}"
        elif r["state"] == "suppressed_by_design":
            why = _str(r["suppressed_by"])
            state_text += (": grouped" if why.startswith("group:") else
                           f": fishway in {why.replace('_', ' ')}" if why else "")
        ack = "—"
        if ack_by:
            ack = f"{ack_by} {_local(r['acknowledged_at'], tz, now)}"
        priority = _LEVEL.get(r["priority"], 3)
        rows[str(key)] = AlarmRow(
            str(key), r["rule"], alarm_label(str(key), r["rule"], fid), fid,
            names.get(fid, fid) if fid else "Site (feeds)", priority, r["priority"],
            r["state"], state_text, _LOOK.get(r["state"], "neutral"), _str(r["message"]),
            _num(r["last_value"]),
            value_text(_num(r["last_value"]), r["rule"], units, tag_units.get(rec.get("tag"))),
            None if pd.isna(r["active_since"]) else r["active_since"].to_pydatetime(),
            _local(r["active_since"], tz, now), ack,
            parent if parent and r["state"] == "suppressed_by_design" else None)
    children: dict[str, list[str]] = {}
    for k, row in rows.items():
        if row.parent in rows:
            children.setdefault(row.parent, []).append(k)
    for p, kids in children.items():
        rows[p] = replace(rows[p], children=tuple(sorted(kids)))
    top = tuple(r for r in rows.values() if r.parent not in rows)
    counts = {g: sum(1 for r in top if _GROUP.get(r.state) == g) for g in SHOW_GROUPS}
    counts["grouped"] = len(rows) - len(top)
    attention = {p: sum(1 for r in top if r.look in ("unack", "rtn") and r.priority == p)
                 for p in (1, 2, 3)}
    flood = None
    if state.flood_started is not None:
        first = state.flood_first_out or ""
        frow = rows.get(first)
        first_text = (f"{frow.label} ({frow.fishway})" if frow else
                      alarm_label(first, first.split("@", 1)[0], None) if first else "—")
        flood = FloodView(_local(state.flood_started, tz, now), first_text, state.flood_count,
                          len(state.annunciations))
    problem = None
    if state.last_evaluated is None:
        evaluated = "never"
        problem = "The alarm engine has not evaluated yet: the list may be empty for that reason."
    else:
        evaluated = _local(state.last_evaluated, tz, now, seconds=True)
        age = (now - state.last_evaluated).total_seconds()
        if age > EVALUATION_STALE_S:
            problem = (f"Alarms last evaluated {age / 60:.0f} min ago ({evaluated}): the "
                       "ingest or its alarm evaluation is not running; alarms may be out of date.")
    modes = {f.id: state.modes.get(f.id, "operating") for f in ctx.site.fishways}
    return ActiveView(top, rows, counts, attention, flood, modes, quiet, evaluated, problem)


def _sort_key(col: str):
    def key(r: AlarmRow) -> tuple:
        since = -(r.since.timestamp() if r.since else 0.0)
        base = {"priority": (r.priority,), "state": (_RANK.get(r.state, 9),),
                "fishway": (r.fishway,), "alarm": (r.label,),
                "value": (r.value_si if r.value_si is not None else math.inf,),
                "since": (since,), "acknowledged": (r.acknowledged,)}.get(col, ())
        return (*base, _RANK.get(r.state, 9), r.priority, since, r.key)
    return key


def visible_rows(view: ActiveView, *, fishway: str = "", priorities: Iterable[int] = (1, 2, 3),
                 shows: Iterable[str] = tuple(SHOW_GROUPS), text: str = "",
                 sort: Mapping[str, object] | None = None,
                 expanded: Iterable[str] = ()) -> list[tuple[AlarmRow, int]]:
    """The rows to draw, ``(row, depth)``: filtered, sorted (default: the ones needing
    acknowledgement first, then by priority, newest first) and with the children of the
    ``expanded`` parents right under them (depth 1, by name)."""
    pri, show, needle = set(priorities), set(shows), text.strip().lower()
    col = str((sort or {}).get("col") or "")
    out = []
    for r in view.rows:
        if fishway and (r.fishway_id or SITE_WIDE) != fishway:
            continue
        if r.priority not in pri or _GROUP.get(r.state) not in show:
            continue
        if needle and needle not in f"{r.label} {r.message} {r.key} {r.fishway}".lower():
            continue
        out.append(r)
    out.sort(key=_sort_key(col), reverse=bool((sort or {}).get("desc")))
    flat: list[tuple[AlarmRow, int]] = []
    for r in out:
        flat.append((r, 0))
        if r.key in set(expanded):
            flat += [(view.by_key[k], 1) for k in r.children]
    return flat


# -- actions -------------------------------------------------------------------------------
@dataclass(frozen=True)
class ActionResult:
    ok: bool
    message: str
    done: tuple[str, ...] = field(default=())


def shelve_choices(ctx: AppContext) -> list[tuple[int, str]]:
    """Shelving durations ``(seconds, label)`` up to the longest ``max_shelve_s`` of the site's
    fishways (each alarm is held to its own fishway's maximum when shelved)."""
    longest = max(f.alarms.max_shelve_s for f in ctx.site.fishways)
    out = [(s, f"{s // 60} min" if s < 3600 else f"{s // 3600} h") for s in _SHELVE_S
           if s <= longest]
    return out or [(int(longest), f"{longest / 60:.0f} min")]


def _refusal(exc: Exception) -> str:
    return f"Refused: {exc}" if isinstance(exc, PermissionError) else f"Not done: {exc}"


def act(ctx: AppContext, who: str, action: str, keys: Sequence[str], *, reason: str = "",
        duration_s: float | None = None, now: datetime | None = None) -> ActionResult:
    """Run an operator action on the selected alarms as ``who`` (acknowledge: all or none;
    the others one alarm at a time, each reported)."""
    if action not in ACTIONS:
        raise ValueError(f"unknown alarm action {action!r}")
    keys = [k for k in dict.fromkeys(keys) if k]
    if not keys:
        return ActionResult(False, "Select one or more alarms first.")
    reason = (reason or "").strip()
    svc = _service(ctx)
    if action == "acknowledge":
        try:
            svc.acknowledge(keys, who, reason, now=now)
        except (PermissionError, ValueError) as exc:
            return ActionResult(False, _refusal(exc))
        return ActionResult(True, f"Acknowledged {len(keys)} alarm"
                            + ("" if len(keys) == 1 else "s") + f" as {who}.", tuple(keys))
    if action in ("shelve", "remove_from_service") and not reason:
        return ActionResult(False, f"Not done: {ACTIONS[action].lower()} needs a reason.")
    if action == "shelve" and not duration_s:
        return ActionResult(False, "Not done: choose how long to shelve for.")
    done, failed = [], []
    for key in keys:
        try:
            if action == "shelve":
                svc.shelve(key, who, reason, float(duration_s or 0), now=now)
            else:
                getattr(svc, action)(key, who, reason, now=now)
            done.append(key)
        except (PermissionError, ValueError) as exc:
            failed.append(f"{key}: {_refusal(exc)}")
            if isinstance(exc, PermissionError):
                break
    text = f"{ACTIONS[action]} {len(done)} of {len(keys)} as {who}." if done else ""
    return ActionResult(not failed, " ".join([text, *failed]).strip(), tuple(done))


def set_mode(ctx: AppContext, who: str, fishway_id: str, mode: str, why: str = "", *,
             now: datetime | None = None) -> ActionResult:
    """Put a fishway into maintenance or out of service (suppression by design of the rules
    that name the mode), or back into operation; logged under ``who``."""
    if not mode:
        return ActionResult(False, "Not done: choose the mode first.")
    if mode not in MODE_LABELS:
        return ActionResult(False, f"Not done: unknown mode {mode!r}.")
    try:
        name = ctx.site.fishway(fishway_id).name
        events = _service(ctx).set_fishway_mode(fishway_id, mode, who, (why or "").strip(),
                                                now=now)
    except (PermissionError, ValueError, KeyError) as exc:
        return ActionResult(False, _refusal(exc))
    return ActionResult(True, f"{name}: {MODE_LABELS[mode].lower()} (set by {who}; "
                        f"{len(events)} alarm state change" + ("" if len(events) == 1 else "s")
                        + ").", (fishway_id,))


# -- history -------------------------------------------------------------------------------
@dataclass(frozen=True)
class HistoryFilters:
    fishway: str = ""
    priority: str = ""
    rule: str = ""
    state: str = ""


def period_bounds(choice: str, start_text: str | None, end_text: str | None, now: datetime,
                  time_zone: str) -> tuple[datetime, datetime]:
    """``[start, end)`` of a period choice (hours back from ``now``, e.g. ``"24"``) or of
    ``"custom"`` site times (``YYYY-MM-DD HH:MM``; ``ValueError`` naming the field).

    >>> from datetime import UTC
    >>> now = datetime(2026, 7, 15, 12, 0, tzinfo=UTC)
    >>> [t.isoformat() for t in period_bounds("8", None, None, now, "UTC")]
    ['2026-07-15T04:00:00+00:00', '2026-07-15T12:00:00+00:00']
    """
    from dashboard.services.log import parse_when

    if choice != "custom":
        return now - timedelta(hours=float(choice)), now
    try:
        start = parse_when(start_text or "", now, time_zone) if start_text else None
    except ValueError as exc:
        raise ValueError(f"From: {exc}") from None
    if start is None:
        raise ValueError("From: give the start of the period (YYYY-MM-DD HH:MM, site time)")
    try:
        end = parse_when(end_text, now, time_zone) if end_text and end_text.strip() else now
    except ValueError as exc:
        raise ValueError(f"To: {exc}") from None
    if not start < end:
        raise ValueError("To: the end must be after the start")
    return start, end


def local_range_text(start: datetime, end: datetime, time_zone: str) -> str:
    """``"2026-07-15 04:00 – 2026-07-15 12:00 site time"``.

    >>> from datetime import UTC
    >>> local_range_text(datetime(2026, 7, 15, 12, tzinfo=UTC),
    ...                  datetime(2026, 7, 15, 20, tzinfo=UTC), "Etc/GMT+8")
    '2026-07-15 04:00 – 2026-07-15 12:00 site time'
    """
    tz = ZoneInfo(time_zone)
    fmt = "%Y-%m-%d %H:%M"
    return f"{start.astimezone(tz).strftime(fmt)} – {end.astimezone(tz).strftime(fmt)} site time"


def _history_frame(ctx: AppContext, start: datetime, end: datetime,
                   f: HistoryFilters) -> pd.DataFrame:
    fishway = f.fishway if f.fishway and f.fishway != SITE_WIDE else None
    frame = alarm_history_frame(ctx.engine, start, end, fishway=fishway,
                                priority=f.priority or None, rule=f.rule or None,
                                state=f.state or None)
    if f.fishway == SITE_WIDE:
        frame = frame[frame["fishway_id"].isna()]
    return frame


def history_rows(ctx: AppContext, start: datetime, end: datetime, filters: HistoryFilters,
                 now: datetime) -> tuple[list[dict[str, str]], int]:
    """The newest :data:`HISTORY_LIMIT` events of the period as text cells, and the total."""
    frame = _history_frame(ctx, start, end, filters)
    tz = ZoneInfo(ctx.site.site.time_zone)
    names = {f.id: f.name for f in ctx.site.fishways}
    units, tag_units = ctx.units, _tag_units(ctx)
    out = []
    for ts, r in frame.iloc[::-1].head(HISTORY_LIMIT).iterrows():
        fid = r["fishway_id"] if isinstance(r["fishway_id"], str) else None
        value = _num(r["value"])
        kind = str(r["kind"])
        if kind in ("limit_changed", "priority_changed"):
            shown = f"{_num(r['old_value'])} → {value}"
        else:
            shown = value_text(value, r["rule"], units, tag_units.get(_str(r["tag"])))
        out.append({"time": _local(ts, tz, now, seconds=True),
                    "alarm": alarm_label(r["key"], r["rule"], fid),
                    "fishway": names.get(fid, fid) if fid else "Site (feeds)",
                    "event": kind.replace("_", " "),
                    "state": STATE_TEXT.get(r["state"], r["state"]),
                    "priority": str(r["priority"]), "value": shown,
                    "who": _str(r["who"]) or "—",
                    "why": " — ".join(dict.fromkeys(x for x in (_str(r["why"]),
                                                                _str(r["message"])) if x))})
    return out, len(frame)


def history_csv(ctx: AppContext, start: datetime, end: datetime,
                filters: HistoryFilters) -> tuple[str, str]:
    """``(file name, CSV text)`` of the filtered history (times ISO 8601 UTC, SI values)."""
    frame = _history_frame(ctx, start, end, filters)
    stamp = "%Y%m%dT%H%MZ"
    name = (f"alarm-history_{start.astimezone(ZoneInfo('UTC')).strftime(stamp)}_"
            f"{end.astimezone(ZoneInfo('UTC')).strftime(stamp)}.csv")
    return name, to_csv(frame)


# -- performance ---------------------------------------------------------------------------
@dataclass(frozen=True)
class PerformanceView:
    perf: AlarmPerformance
    table: list[tuple[str, str, str, bool | None]]
    period_starts: list[datetime]
    counts: list[int]
    top10: list[tuple[str, int]]
    priority: list[tuple[str, float, float]]


def rate_bins(events: pd.DataFrame, start: datetime, end: datetime
              ) -> tuple[list[datetime], list[int]]:
    """Annunciations (``raised`` into ``unacknowledged``) per 10-minute period from ``start``:
    ``(period starts, counts)``; the last period may be short."""
    lo, hi = pd.Timestamp(start).tz_convert("UTC"), pd.Timestamp(end).tz_convert("UTC")
    n = math.ceil((hi - lo) / PERIOD)
    ann = events[(events["kind"] == "raised") & (events["state"] == "unacknowledged")]
    ann = ann[(ann.index >= lo) & (ann.index < hi)]
    idx = ((ann.index - lo) // PERIOD).to_numpy(dtype=np.int64)
    counts = np.bincount(idx, minlength=n) if len(idx) else np.zeros(n, dtype=np.int64)
    return [(lo + i * PERIOD).to_pydatetime() for i in range(n)], [int(c) for c in counts]


def performance_view(ctx: AppContext, start: datetime, end: datetime,
                     fishway: str | None = None) -> PerformanceView:
    """The EEMUA 191 / ISA-18.2 figures of ``[start, end)`` with what the plots need."""
    perf, table = alarm_performance_report(ctx.engine, start, end, fishway=fishway or None)
    events = alarm_history_frame(ctx.engine, start, end, fishway=fishway or None)
    starts, counts = rate_bins(events, start, end)
    fw = dict(zip(events["key"], events["fishway_id"], strict=False))
    rules = dict(zip(events["key"], events["rule"], strict=False))
    names = {f.id: f.name for f in ctx.site.fishways}
    top = []
    for key, n in perf.top10:
        fid = fw.get(key) if isinstance(fw.get(key), str) else None
        label = alarm_label(key, rules.get(key, key.split("@", 1)[0]), fid)
        top.append((f"{label} ({names.get(fid, fid) if fid else 'site'})", n))
    rows = [(str(r.figure), f"{r.value:g}", str(r.target),
             None if r.meets is None or pd.isna(r.meets) else bool(r.meets))
            for r in table.itertuples()]
    pri = [(name, pct, PRIORITY_TARGET_PCT.get(name, 0.0)) for name, pct in perf.priority_pct]
    return PerformanceView(perf, rows, starts, counts, top, pri)

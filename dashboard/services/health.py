"""Data health: the feeds, the newest reading of every tag, its age, and the QARTOD flags of the
last hour and the last day.

A feed is ``failing`` when its newest error is later than its newest success, ``stale`` when
its last success is older than the ``feed_comms`` rule's maximum age (of the first fishway's
alarm settings), ``ok`` otherwise; a feed that never reported is absent from
``feed_health`` (the ingest service writes it), which the page says. A tag's newest reading is
``stale`` when older than :data:`~dashboard.services.overview.STALE_POLLS` poll periods. The
flag counts are the readings per QARTOD flag (IOOS flags manual v1.2, 2020: 1 pass, 2 not
evaluated, 3 suspect, 4 fail, 9 missing) in ``[now − 1 h, now)`` and ``[now − 1 d, now)``;
*received* is the share of the expected readings (window / poll period) that arrived; less
than :data:`MIN_RECEIVED` of them in the last hour counts as a problem (gaps).

>>> tag_kind("m", "water_level"), tag_kind("m", "head_differential"), tag_kind("m3/s", "flow")
('elevation', 'length', 'flow')
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Any
from zoneinfo import ZoneInfo

import pandas as pd

from dashboard.services.overview import STALE_POLLS, age_text
from dashboard.services.site import format_value
from db.catalog import tags_frame
from db.dashboard_queries import QARTOD_FLAG_NAMES, flag_counts
from db.feed_health import feed_health_frame
from db.readings import latest_values
from ops_logic.site import Site

__all__ = ["FLAGS", "MIN_RECEIVED", "FeedRow", "TagRow", "feed_rows", "tag_kind", "tag_rows"]

FLAGS = tuple(QARTOD_FLAG_NAMES)
"""QARTOD flags in column order: 1, 2, 3, 4, 9."""
MIN_RECEIVED = 0.9
"""Share of the expected readings of the last hour below which a tag has gaps (an operating
choice of ours, not a published value)."""

_UNIT_KINDS = {"m3/s": "flow", "degC": "temperature", "mg/L": "do", "%": "pct",
               "count": "count", "flag": "count"}


def tag_kind(unit: str, quantity: str) -> str:
    """The display kind of a tag's values from its SI unit and quantity."""
    if unit == "m":
        return "elevation" if quantity in ("water_level", "position") else "length"
    return _UNIT_KINDS.get(unit, "count")


@dataclass(frozen=True)
class FeedRow:
    feed: str
    status: str  # ok, stale, failing
    last_success: str
    age: str
    rate: str
    lag: str
    last_error: str
    last_error_at: str
    errors_in_a_row: int = 0
    """Failed polls since the last success (0 for a feed that is working)."""


@dataclass(frozen=True)
class TagRow:
    tag_id: int
    name: str
    quantity: str
    poll: str
    last: str
    age: str
    value: str
    flag: str
    status: str  # ok, stale, suspect, fail, missing, none
    hour: tuple[int, ...]
    hour_received: str
    day: tuple[int, ...]
    day_received: str
    gaps: bool
    problem: bool


def _local(ts: pd.Timestamp | None, zone: ZoneInfo) -> str:
    if ts is None or pd.isna(ts):
        return "—"
    return ts.tz_convert(zone).strftime("%m-%d %H:%M:%S")


def feed_rows(site: Site, engine: Any, now: datetime) -> list[FeedRow]:
    """One display row per feed that has reported to ``feed_health``."""
    zone = ZoneInfo(site.site.time_zone)
    max_age = site.fishways[0].alarms.feed_comms.max_age_s
    out = []
    for feed, r in feed_health_frame(engine).iterrows():
        ok_at, err_at = r["last_success_at"], r["last_error_at"]
        age_s = (pd.Timestamp(now) - ok_at).total_seconds() if not pd.isna(ok_at) else None
        if not pd.isna(err_at) and (pd.isna(ok_at) or err_at > ok_at):
            status = "failing"
        elif age_s is None or age_s > max_age:
            status = "stale"
        else:
            status = "ok"
        rate = r["readings_per_min"]
        lag = r["lag_s"]
        out.append(FeedRow(
            str(feed), status, _local(ok_at, zone), age_text(age_s),
            "—" if pd.isna(rate) else f"{rate:.0f} /min",
            "—" if pd.isna(lag) else f"{lag:.1f} s",
            "" if r["last_error"] is None or pd.isna(r["last_error"]) else str(r["last_error"]),
            _local(err_at, zone) if not pd.isna(err_at) else "",
            int(r["consecutive_errors"])))
    return out


def _share(counts: tuple[int, ...], window_s: float, poll_s: float) -> float | None:
    expected = window_s / poll_s
    got = sum(counts[:4])  # readings with a value (flag 9 is a missing one)
    return min(1.0, got / expected) if expected >= 1 else None


def _received(share: float | None) -> str:
    return "—" if share is None else f"{100.0 * share:.0f} %"


def tag_rows(site: Site, engine: Any, now: datetime) -> list[TagRow]:
    """One display row per tag of the catalogue, in catalogue order."""
    zone = ZoneInfo(site.site.time_zone)
    units = site.site.units
    tags = tags_frame(engine)
    latest = latest_values(engine, tags.index.tolist())
    hour = flag_counts(engine, now - timedelta(hours=1), now)
    day = flag_counts(engine, now - timedelta(days=1), now)
    zero = (0,) * len(FLAGS)
    out = []
    for tag_id, t in tags.iterrows():
        poll = float(t["poll_period_s"])
        h = tuple(int(x) for x in hour.loc[tag_id]) if tag_id in hour.index else zero
        d = tuple(int(x) for x in day.loc[tag_id]) if tag_id in day.index else zero
        if tag_id in latest.index:
            row = latest.loc[tag_id]
            age_s = (pd.Timestamp(now) - row["ts"]).total_seconds()
            flag = int(row["flag"])
            value = float(row["value"])
            status = ("missing" if flag == 9 or not math.isfinite(value) else
                      {3: "suspect", 4: "fail"}.get(flag, "ok"))
            if status == "ok" and age_s > STALE_POLLS * poll:
                status = "stale"
            value_text = format_value(value, tag_kind(t["unit"], t["quantity"]), units)
            last, age, flag_text = _local(row["ts"], zone), age_text(age_s), \
                f"{flag} {QARTOD_FLAG_NAMES[flag]}"
        else:
            status, value_text, last, age, flag_text = "none", "—", "never", "—", "—"
        hour_share = _share(h, 3600.0, poll)
        gaps = hour_share is not None and hour_share < MIN_RECEIVED
        problem = status != "ok" or gaps or any(h[i] for i in (2, 3, 4))
        out.append(TagRow(int(tag_id), str(t["name"]), str(t["quantity"]).replace("_", " "),
                          f"{poll:g} s", last, age, value_text, flag_text, status, h,
                          _received(hour_share), d, _received(_share(d, 86400.0, poll)), gaps,
                          problem))
    return out

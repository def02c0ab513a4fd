"""Alarm history and alarm-system performance figures (EEMUA 191, ISA-18.2) on event tables.

An event table is a ``pandas.DataFrame`` indexed by the event time ``ts`` (tz-aware, UTC) with
columns ``key, rule, fishway_id, kind, state, priority`` (and optionally ``value, who, why,
message, parent``): the shape of ``db.alarms.alarm_events_frame`` and of :func:`events_frame`.
``priority`` is a name (``"high"``, ``"medium"``, ``"low"``) or a level (1, 2, 3).

An *annunciation* is an alarm put in front of the operator: a ``raised`` event whose state is
``unacknowledged`` (a raise while shelved, suppressed or out of service is recorded, not
annunciated). The figures count annunciations in fixed 10-minute periods from ``start``.

Figures and targets (REFERENCES.md, "Alarms and displays"):

- average annunciations per 10 minutes: about 1 acceptable, 2 the most manageable (EEMUA 191;
  ISA-18.2; seen in a published alarm-KPI package's documentation);
- peak 10-minute count, and % of 10-minute periods in flood (more than 10): under 1 % (seen);
- the 10 most frequent alarms and their share of the load: a small share (seen); ISA-18.2
  suggests at most about 5 % (from memory);
- chattering alarms, 3 or more annunciations within 60 s: none (from memory);
- stale alarms, active for more than 24 h: none (ISA-18.2 allows fewer than 5 on any day, from
  memory);
- priority distribution of annunciations: about 80 % low, 15 % medium, 5 % high (from memory).

References: EEMUA Publication 191, Alarm Systems; ANSI/ISA-18.2-2016, alarm system performance
monitoring.
"""
from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from dataclasses import asdict, dataclass
from datetime import datetime, timedelta
from pathlib import Path

import numpy as np
import pandas as pd

from ops_logic.alarms.states import PRIORITY_NAMES, AlarmEvent

__all__ = [
    "CHATTER_COUNT",
    "CHATTER_WINDOW",
    "PERIOD",
    "PRIORITY_TARGET_PCT",
    "STALE_AFTER",
    "AlarmPerformance",
    "alarm_history",
    "alarm_performance",
    "events_frame",
    "to_csv",
]

PERIOD = timedelta(minutes=10)
FLOOD_COUNT = 10
"""More than this many annunciations in a 10-minute period is a flood (EEMUA 191; seen)."""
AVERAGE_ACCEPTABLE = 1.0
AVERAGE_MANAGEABLE = 2.0
FLOOD_TARGET_PCT = 1.0
TOP10_TARGET_PCT = 5.0  # ISA-18.2, from memory
CHATTER_COUNT = 3
CHATTER_WINDOW = timedelta(seconds=60)  # from memory
STALE_AFTER = timedelta(hours=24)  # from memory
PRIORITY_TARGET_PCT = {"low": 80.0, "medium": 15.0, "high": 5.0}  # from memory

_COLUMNS = ["key", "rule", "fishway_id", "kind", "state", "previous_state", "priority", "value",
            "who", "why", "message", "tag", "parent"]


def events_frame(events: Iterable[AlarmEvent]) -> pd.DataFrame:
    """Events from the engine as an event table (index ``ts`` UTC, priority names).

    >>> events_frame([]).columns[:6].tolist()
    ['key', 'rule', 'fishway_id', 'kind', 'state', 'previous_state']
    """
    rows = [{**{k: v for k, v in asdict(e).items() if k in _COLUMNS or k == "ts"},
             "priority": PRIORITY_NAMES[e.priority]} for e in events]
    frame = pd.DataFrame(rows, columns=["ts", *_COLUMNS])
    frame["ts"] = pd.to_datetime(frame["ts"], utc=True)
    return frame.set_index("ts")


def _table(events: pd.DataFrame) -> pd.DataFrame:
    """Check and normalise an event table: UTC index ``ts``, priority names."""
    frame = events
    if "ts" in frame.columns:
        frame = frame.set_index("ts")
    missing = {"key", "kind", "state", "priority"} - set(frame.columns)
    if missing:
        raise ValueError(f"event table lacks column(s): {', '.join(sorted(missing))}")
    idx = pd.DatetimeIndex(frame.index)
    if idx.tz is None:
        raise ValueError("event times must be time-zone aware (index or column 'ts')")
    frame = frame.copy()
    frame.index = idx.tz_convert("UTC").rename("ts")
    frame["priority"] = [_priority_name(p) for p in frame["priority"]]
    return frame.sort_index(kind="stable")


def _priority_name(p: object) -> str:
    if isinstance(p, str) and p in (*PRIORITY_NAMES.values(), "critical"):
        return p
    try:
        return PRIORITY_NAMES[int(p)]  # type: ignore[call-overload]
    except (KeyError, ValueError, TypeError):
        raise ValueError(f"unknown priority {p!r}: use 1, 2, 3 or high, medium, low") from None


def _utc(t: datetime | pd.Timestamp, name: str) -> pd.Timestamp:
    ts = pd.Timestamp(t)
    if ts.tzinfo is None:
        raise ValueError(f"{name} must be time-zone aware")
    return ts.tz_convert("UTC")


def alarm_history(events: pd.DataFrame, start: datetime, end: datetime, fishway: str | None = None,
                  priority: int | str | None = None, rule: str | None = None,
                  state: str | None = None) -> pd.DataFrame:
    """Events in ``[start, end)``, optionally of one fishway, priority, rule or resulting
    state, oldest first.

    >>> from datetime import datetime, timezone
    >>> t = datetime(2026, 7, 1, tzinfo=timezone.utc)
    >>> ev = pd.DataFrame({"ts": [t, t], "key": ["a@e", "b@w"], "rule": ["a", "b"],
    ...                    "fishway_id": ["e", "w"], "kind": ["raised"] * 2,
    ...                    "state": ["unacknowledged"] * 2, "priority": [1, 3]})
    >>> alarm_history(ev, t, t + PERIOD, priority="low")["key"].tolist()
    ['b@w']
    """
    frame = _table(events)
    lo, hi = _utc(start, "start"), _utc(end, "end")
    if not lo < hi:
        raise ValueError("end must be after start")
    keep = (frame.index >= lo) & (frame.index < hi)
    if fishway is not None:
        keep &= (frame["fishway_id"] == fishway).to_numpy()
    if priority is not None:
        keep &= (frame["priority"] == _priority_name(priority)).to_numpy()
    if rule is not None:
        keep &= (frame["rule"] == rule).to_numpy()
    if state is not None:
        keep &= (frame["state"] == state).to_numpy()
    return frame[keep]


def to_csv(frame: pd.DataFrame, path: str | Path | None = None) -> str:
    """An event table as CSV text (times ISO 8601 UTC); also written to ``path`` if given."""
    out = frame.copy()
    out.index = pd.DatetimeIndex(out.index).strftime("%Y-%m-%dT%H:%M:%S.%fZ")
    text = out.to_csv(index_label="ts", lineterminator="\n")
    if path is not None:
        Path(path).write_text(text, encoding="utf-8")
    return text


@dataclass(frozen=True)
class AlarmPerformance:
    """Performance figures of an alarm system over a period; see the module docstring."""

    start: pd.Timestamp
    end: pd.Timestamp
    periods: int
    annunciations: int
    average_per_10min: float
    peak_per_10min: int
    flood_periods_pct: float
    top10: tuple[tuple[str, int], ...]
    top10_share_pct: float
    chattering: tuple[str, ...]
    stale: tuple[str, ...]
    priority_pct: tuple[tuple[str, float], ...]


def _chattering(times: Sequence[pd.Timestamp]) -> bool:
    t = np.sort(np.asarray([x.value for x in times], dtype=np.int64))
    n = CHATTER_COUNT - 1
    window_ns = int(CHATTER_WINDOW / timedelta(microseconds=1)) * 1000
    return bool(t.size > n and np.any(t[n:] - t[:-n] <= window_ns))


def _stale(frame: pd.DataFrame, lo: pd.Timestamp, hi: pd.Timestamp) -> list[str]:
    out = []
    for key, g in frame[frame.index < hi].groupby("key", sort=True):
        since = None
        for ts, kind in zip(g.index, g["kind"], strict=True):
            if kind == "raised" and since is None:
                since = ts
            elif kind == "cleared" and since is not None:
                if ts > lo and ts - since > STALE_AFTER:
                    out.append(str(key))
                    break
                since = None
        else:
            if since is not None and hi - since > STALE_AFTER:
                out.append(str(key))
    return out


def alarm_performance(events: pd.DataFrame, start: datetime, end: datetime,
                      fishway: str | None = None) -> tuple[AlarmPerformance, pd.DataFrame]:
    """Performance figures for ``[start, end)``, and a display table beside the targets.

    Rates count annunciations in fixed 10-minute periods from ``start`` (the last period may be
    short; it counts as one). Stale alarms use every event given before ``end``, so pass the
    events from before ``start`` too to see alarms raised earlier.

    Returns ``(figures, table)``; the table has columns ``figure, value, target, meets``.

    >>> from datetime import datetime, timezone
    >>> t = datetime(2026, 7, 1, tzinfo=timezone.utc)
    >>> ev = pd.DataFrame({"ts": [t + timedelta(minutes=m) for m in (1, 2, 25)],
    ...                    "key": ["a@e", "b@e", "a@e"], "rule": ["a", "b", "a"],
    ...                    "fishway_id": "e", "kind": "raised", "state": "unacknowledged",
    ...                    "priority": 3})
    >>> p, table = alarm_performance(ev, t, t + timedelta(hours=1))
    >>> p.periods, p.average_per_10min, p.peak_per_10min, p.top10[0]
    (6, 0.5, 2, ('a@e', 2))
    """
    frame = _table(events)
    if fishway is not None:
        frame = frame[frame["fishway_id"] == fishway]
    lo, hi = _utc(start, "start"), _utc(end, "end")
    if not lo < hi:
        raise ValueError("end must be after start")
    periods = math.ceil((hi - lo) / PERIOD)
    inside = frame[(frame.index >= lo) & (frame.index < hi)]
    ann = inside[(inside["kind"] == "raised") & (inside["state"] == "unacknowledged")]
    n = len(ann)
    bins = np.bincount(((ann.index - lo) // PERIOD).to_numpy(dtype=np.int64),
                       minlength=periods) if n else np.zeros(periods, dtype=np.int64)
    counts = ann["key"].value_counts(sort=True)
    counts = counts.sort_index(kind="stable").sort_values(ascending=False, kind="stable")
    top = tuple((str(k), int(v)) for k, v in counts.head(10).items())
    share = 100.0 * sum(v for _, v in top) / n if n else 0.0
    chatter = tuple(sorted(str(k) for k, g in ann.groupby("key") if _chattering(list(g.index))))
    pri = ann["priority"].value_counts()
    names = [*PRIORITY_TARGET_PCT] + (["critical"] if "critical" in pri.index else [])
    pct = tuple((p, 100.0 * float(pri.get(p, 0)) / n if n else 0.0) for p in names)
    perf = AlarmPerformance(lo, hi, periods, n, n / periods, int(bins.max(initial=0)),
                            100.0 * float(np.mean(bins > FLOOD_COUNT)), top, share, chatter,
                            tuple(_stale(frame, lo, hi)), pct)
    return perf, _display(perf)


def _display(p: AlarmPerformance) -> pd.DataFrame:
    rows = [
        ("average alarms per 10 min", round(p.average_per_10min, 3),
         f"≤ {AVERAGE_ACCEPTABLE:g} acceptable, ≤ {AVERAGE_MANAGEABLE:g} manageable",
         p.average_per_10min <= AVERAGE_MANAGEABLE),
        ("peak alarms in 10 min", p.peak_per_10min, f"≤ {FLOOD_COUNT} (no flood)",
         p.peak_per_10min <= FLOOD_COUNT),
        ("% of 10-min periods in flood", round(p.flood_periods_pct, 3),
         f"< {FLOOD_TARGET_PCT:g} %", p.flood_periods_pct < FLOOD_TARGET_PCT),
        ("top 10 alarms, % of load", round(p.top10_share_pct, 1),
         f"small (≤ {TOP10_TARGET_PCT:g} %)", p.top10_share_pct <= TOP10_TARGET_PCT),
        ("chattering alarms", len(p.chattering), "0", not p.chattering),
        ("stale alarms (active > 24 h)", len(p.stale), "0", not p.stale),
    ]
    rows += [(f"{name} priority, % of alarms", round(v, 1),
              f"≈ {PRIORITY_TARGET_PCT.get(name, 0.0):g} %", None) for name, v in p.priority_pct]
    return pd.DataFrame(rows, columns=["figure", "value", "target", "meets"])

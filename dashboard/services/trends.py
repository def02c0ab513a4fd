"""Service of the trends page: which series can be drawn, their data over a range, the target
bands and alarm limits that go with them, and the CSV export.

Series: every catalogue tag, plus two derived series per fishway, the **entrance head**
(entrance-pool gauge − tailwater gauge) and, for an adjustable exit, the **exit head**
(forebay gauge − exit crest position). A tag's data come from :func:`db.trends.trend` (M4
over the rollups, or raw readings for short ranges: every extreme is kept, at most four points
per column of ``width_px``). A derived series is the difference of its two tags, aligned in
time: raw readings matched to the nearest earlier reading within two poll periods for ranges
the raw data serve, otherwise the difference of the rollup bucket means (so within one bucket
its extremes are those of the means, not of the readings; the series says so), then reduced
with M4 like the rest.

Guides drawn with a series (values SI): the operating range of forebay and tailwater levels
and the target bands of the derived heads (shaded); alarm limits of the fishway's alarm rules
(dissolved oxygen, water temperature, trash-rack and picket differentials), the actuator range
of a position, the diffuser limit of an auxiliary flow (dashed); the tag's QC limits from the
catalogue, or for temperature and dissolved oxygen the project's default QC spans
(:func:`ops_logic.qc.default_thresholds`; the default water-level span is a gauge's measuring
range, not an elevation, so it is not drawn) (dotted).
"""

from __future__ import annotations

import csv
import io
import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from zoneinfo import ZoneInfo

import numpy as np
import pandas as pd

from dashboard.context import AppContext
from db.catalog import tags_frame
from db.dashboard_queries import fishway_db_ids
from db.readings import latest_values, readings_frame
from db.rollups import rollups_frame
from db.trends import choose_resolution_s, m4_indices, trend
from ops_logic.qc import default_thresholds
from ops_logic.site import GravityAux
from ops_logic.units import UnitSystem, display_unit, from_si

__all__ = [
    "RANGES",
    "Guide",
    "Series",
    "SeriesOption",
    "csv_text",
    "latest_reading_time",
    "local_text",
    "parse_local",
    "range_bounds",
    "resolve_range",
    "series_data",
    "series_options",
    "to_display",
    "unit_label",
]

RANGES: dict[str, timedelta | None] = {
    "8h": timedelta(hours=8), "24h": timedelta(hours=24), "7d": timedelta(days=7),
    "30d": timedelta(days=30), "1y": timedelta(days=365), "custom": None}
"""Range choices (the custom range is typed in)."""

_KIND = {"water_level": "elevation", "head_differential": "head", "position": "elevation",
         "flow": "flow", "temperature": "temperature", "dissolved_oxygen": "do",
         "opening": "opening", "count": "count", "status": "status"}
_SI_KINDS = {"temperature": "°C", "do": "mg/L", "opening": "%", "count": "count",
             "status": "flag", "other": ""}


@dataclass(frozen=True)
class Guide:
    """A band (``low`` and ``high``) or a line (one of them) to draw with a series [SI]."""

    label: str
    style: str  # "band", "alarm", "range" or "qc"
    low: float | None = None
    high: float | None = None


@dataclass(frozen=True)
class SeriesOption:
    key: str  # tag name, or "<fishway>:entrance_head" / "<fishway>:exit_head"
    label: str
    kind: str  # elevation, head, flow, temperature, do, opening, count, status, other
    tag_ids: tuple[int, ...]  # one tag, or (minuend, subtrahend) of a derived series
    poll_s: float
    guides: tuple[Guide, ...] = ()


@dataclass(frozen=True)
class Series:
    option: SeriesOption
    ts: pd.DatetimeIndex  # UTC
    value_si: np.ndarray
    flag: np.ndarray
    source: str  # "raw", "rollup" or "rollup means"
    note: str = ""
    unit: str = field(default="")


_QUANTITY = {"elevation": "length", "head": "length", "length": "length", "flow": "flow"}
"""Series kinds with a unit-system conversion (elevations and heads get separate axes)."""


def unit_label(kind: str, units: UnitSystem) -> str:
    """The display unit of a series kind (``ft``, ``cfs``, ``°C``…)."""
    if kind in _QUANTITY:
        return display_unit(_QUANTITY[kind], units)
    return _SI_KINDS.get(kind, "")


def to_display(kind: str, values: np.ndarray | float, units: UnitSystem) -> np.ndarray | float:
    """SI values of a series kind in display units (temperatures stay °C).

    >>> round(to_display("head", 0.3048, "us"), 6), to_display("do", 8.0, "us")
    (1.0, 8.0)
    """
    if kind in _QUANTITY:
        return from_si(values, _QUANTITY[kind], units)  # type: ignore[arg-type]
    return values


def _guides(ctx: AppContext, t: dict) -> list[Guide]:
    f = ctx.site.fishway(t["fishway"]) if t["fishway"] in ctx.ladders else None
    out: list[Guide] = []
    role = t["role"]
    if f is not None:
        a = f.alarms
        if role == "forebay":
            out.append(Guide("operating range", "band", *f.forebay_range))
        elif role == "tailwater":
            out.append(Guide("operating range", "band", *f.tailwater_range))
        elif role == "do":
            out += [Guide(f"DO low alarm {a.do_low.limit_mg_l:g} mg/L", "alarm",
                          low=a.do_low.limit_mg_l),
                    Guide(f"DO low-low alarm {a.do_low_low.limit_mg_l:g} mg/L", "alarm",
                          low=a.do_low_low.limit_mg_l)]
        elif role == "water_temp":
            out += [Guide(f"thermal stress (7DADM criterion) {a.temp_high_limit_c:g} °C", "alarm",
                          high=a.temp_high_limit_c),
                    Guide(f"migration blocked {a.temp_high_high.limit_c:g} °C", "alarm",
                          high=a.temp_high_high.limit_c)]
        elif role == "trash_rack_dp":
            out.append(Guide("trash-rack alarm", "alarm", high=a.trash_rack_dp_high.limit_m))
        elif role == "picket_dp":
            out.append(Guide("picket alarm", "alarm", high=a.picket_dp_high.limit_m))
        elif role == "setting" and t["setting"] in ctx.ladder(f.id).settings:
            spec = ctx.ladder(f.id).settings[t["setting"]]
            out.append(Guide("actuator range", "range", spec.low, spec.high))
        elif role == "aux_flow":
            for src in f.aux:
                if src.id == t["actuator"]:
                    vmax = getattr(f.targets.max_diffuser_velocity, src.diffuser)
                    what = "gravity" if isinstance(src, GravityAux) else "pumps"
                    out.append(Guide(f"diffuser limit ({what})", "alarm",
                                     high=vmax * src.diffuser_area))
    limits = [(t[c], c) for c in ("fail_low", "fail_high", "suspect_low", "suspect_high")]
    if any(pd.notna(v) for v, _ in limits):
        for v, c in limits:
            if pd.notna(v):
                kind, side = c.split("_")
                out.append(Guide(f"QC {kind}", "qc", **{"low" if side == "low" else "high":
                                                        float(v)}))
    elif t["quantity"] in ("temperature", "dissolved_oxygen"):
        th = default_thresholds(t["quantity"])
        spans = [("fail", th.fail_span)] + ([("suspect", th.suspect_span)]
                                            if th.suspect_span else [])
        for kind, (lo, hi) in spans:
            out += [Guide(f"QC {kind} (default)", "qc", low=lo),
                    Guide(f"QC {kind} (default)", "qc", high=hi)]
    return out


def series_options(ctx: AppContext) -> list[SeriesOption]:
    """Every series the page offers, fishway by fishway (catalogue order, derived last)."""
    frame = tags_frame(ctx.engine)
    names = {v: k for k, v in fishway_db_ids(ctx.engine, ctx.site.site.name).items()}
    # plain dicts, not DataFrame rows: this runs on every draw, zoom and export
    tags: list[tuple[int, dict]] = []
    for i, row in zip(frame.index.tolist(), frame.to_dict("records"), strict=True):
        fid = row["fishway_id"]
        if pd.notna(fid) and int(fid) in names:
            tags.append((int(i), {**row, "fishway": names[int(fid)]}))
    by_name = {row["name"]: (i, row) for i, row in tags}
    out: list[SeriesOption] = []
    for f in ctx.site.fishways:
        for i, t in tags:
            if t["fishway"] != f.id:
                continue
            kind = _KIND.get(t["quantity"], "other")
            label = f"{f.name} · {t['name'].split('.', 1)[1].replace('_', ' ')}"
            if t["source"] == "manual":
                label += " (manual)"
            out.append(SeriesOption(t["name"], label, kind, (i,),
                                    float(t["poll_period_s"]), tuple(_guides(ctx, t))))
        ladder = ctx.ladder(f.id)
        entrance = f"{f.id}.{ladder.pool_ids[-1]}.level"
        tail, fore = f"{f.id}.tailwater_level", f"{f.id}.forebay_level"
        eh = f.targets.entrance_head
        if entrance in by_name and tail in by_name:
            a, b = by_name[entrance], by_name[tail]
            out.append(SeriesOption(
                f"{f.id}:entrance_head", f"{f.name} · entrance head (entrance pool − tailwater)",
                "head", (a[0], b[0]), max(a[1]["poll_period_s"], b[1]["poll_period_s"]),
                (Guide("entrance head band", "band", eh.min, eh.max),)))
        exit_tag = f"{f.id}.exit.crest"
        if f.targets.exit_head is not None and exit_tag in by_name and fore in by_name:
            a, b = by_name[fore], by_name[exit_tag]
            xh = f.targets.exit_head
            out.append(SeriesOption(
                f"{f.id}:exit_head", f"{f.name} · exit head (forebay − exit crest)", "head",
                (a[0], b[0]), max(a[1]["poll_period_s"], b[1]["poll_period_s"]),
                (Guide("exit head band", "band", xh.min, xh.max),)))
    return out


def parse_local(text: str | None, time_zone: str) -> datetime:
    """``YYYY-MM-DD HH:MM`` (or ``YYYY-MM-DD``) in site time → aware UTC datetime.

    >>> parse_local("2026-07-15 04:00", "Etc/GMT+8").isoformat()
    '2026-07-15T12:00:00+00:00'
    """
    raw = (text or "").strip().replace("T", " ")
    for fmt in ("%Y-%m-%d %H:%M", "%Y-%m-%d %H:%M:%S", "%Y-%m-%d"):
        try:
            local = datetime.strptime(raw, fmt).replace(tzinfo=ZoneInfo(time_zone))
        except ValueError:
            continue
        return local.astimezone(ZoneInfo("UTC"))
    raise ValueError(f"{text!r}: give YYYY-MM-DD HH:MM (site time)")


def range_bounds(choice: str, now: datetime, *, start_text: str | None = None,
                 end_text: str | None = None, time_zone: str = "UTC"
                 ) -> tuple[datetime, datetime]:
    """``[start, end)`` of a range choice ending at ``now``, or of the typed custom range."""
    if choice not in RANGES:
        raise ValueError(f"unknown range {choice!r}")
    span = RANGES[choice]
    if span is not None:
        return now - span, now
    start, end = parse_local(start_text, time_zone), parse_local(end_text, time_zone)
    if end <= start:
        raise ValueError("the end of the range must be after its start")
    if end - start > timedelta(days=3660):
        raise ValueError("at most ten years at once")
    return start, end


def _tag_series(ctx: AppContext, opt: SeriesOption, start: datetime, end: datetime,
                width_px: int) -> Series:
    frame = trend(ctx.engine, opt.tag_ids[0], start, end, width_px=width_px)
    return Series(opt, frame.index, frame["value"].to_numpy(dtype="float64"),
                  frame["flag"].to_numpy(dtype="int64"), frame.attrs.get("source", "raw"))


def _derived_series(ctx: AppContext, opt: SeriesOption, start: datetime, end: datetime,
                    width_px: int) -> Series:
    span_ms = (end - start).total_seconds() * 1000.0
    res_s = choose_resolution_s(int(span_ms), width_px)
    a_id, b_id = opt.tag_ids
    if res_s == 0:
        a, b = (readings_frame(ctx.engine, t, start, end) for t in (a_id, b_id))
        a, b = a[a["value"].notna()], b[b["value"].notna()]
        merged = pd.merge_asof(a, b, left_index=True, right_index=True, suffixes=("_a", "_b"),
                               direction="backward",
                               tolerance=pd.Timedelta(seconds=2.0 * opt.poll_s))
        source, note = "raw", ""
    else:
        a, b = (rollups_frame(ctx.engine, t, res_s, start, end) for t in (a_id, b_id))
        cols = {"mean": "value", "flag_max": "flag"}
        merged = a[list(cols)].rename(columns=cols).add_suffix("_a").join(
            b[list(cols)].rename(columns=cols).add_suffix("_b"), how="inner")
        source = "rollup means"
        note = f"difference of {res_s // 60} min bucket means"
    merged = merged.dropna(subset=["value_a", "value_b"])
    value = (merged["value_a"] - merged["value_b"]).to_numpy(dtype="float64")
    flag = np.maximum(merged["flag_a"].to_numpy(dtype="int64"),
                      merged["flag_b"].to_numpy(dtype="int64"))
    ts_ms = merged.index.as_unit("ms").asi8
    column = ((ts_ms - int(start.timestamp() * 1000)) * width_px // max(int(span_ms), 1))
    pick = m4_indices(np.minimum(column, width_px - 1), value)
    return Series(opt, merged.index[pick], value[pick], flag[pick], source, note)


def series_data(ctx: AppContext, options: Sequence[SeriesOption], start: datetime,
                end: datetime, width_px: int) -> list[Series]:
    """The data of each series over ``[start, end)`` for a chart ``width_px`` columns wide."""
    if width_px < 1:
        raise ValueError("width_px must be at least 1")
    out = []
    for opt in options:
        fetch = _derived_series if len(opt.tag_ids) == 2 else _tag_series
        s = fetch(ctx, opt, start, end, int(width_px))
        out.append(Series(s.option, s.ts, s.value_si, s.flag, s.source, s.note,
                          unit_label(opt.kind, ctx.units)))
    return out


def latest_reading_time(ctx: AppContext, options: Sequence[SeriesOption]) -> datetime | None:
    """The newest reading among the series' tags (to place a range when ``now`` has none)."""
    ids = sorted({t for o in options for t in o.tag_ids})
    if not ids:
        return None
    latest = latest_values(ctx.engine, ids)
    if latest.empty:
        return None
    return latest["ts"].max().to_pydatetime()


def csv_text(series: Sequence[Series], units: UnitSystem, time_zone: str) -> str:
    """The shown data as CSV, one row per point: site time, UTC time, series, value in display
    units, unit, SI value, QARTOD flag.

    >>> opt = SeriesOption("east.forebay_level", "forebay", "elevation", (1,), 10.0)
    >>> s = Series(opt, pd.DatetimeIndex(["2026-07-15 12:00"], tz="UTC"), np.array([77.4192]),
    ...            np.array([1]), "raw")
    >>> print(csv_text([s], "us", "UTC").splitlines()[1])
    2026-07-15T12:00:00+00:00,2026-07-15T12:00:00Z,east.forebay_level,254.0000,ft,77.419200,1
    """
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["time_site", "time_utc", "series", "value", "unit", "value_si", "flag"])
    tz = ZoneInfo(time_zone)
    for s in series:
        unit = unit_label(s.option.kind, units)
        shown = to_display(s.option.kind, s.value_si, units)
        for ts, v, si, fl in zip(s.ts, np.atleast_1d(shown), s.value_si, s.flag, strict=True):
            if not math.isfinite(si):
                continue
            w.writerow([ts.tz_convert(tz).isoformat(), ts.tz_convert("UTC").strftime(
                "%Y-%m-%dT%H:%M:%SZ"), s.option.key, f"{v:.4f}", unit, f"{si:.6f}", int(fl)])
    return buf.getvalue()


def resolve_range(ctx: AppContext, options: Sequence[SeriesOption], choice: str,
                  now: datetime, *, start_text: str | None = None,
                  end_text: str | None = None) -> tuple[datetime, datetime, str]:
    """The range to draw and a note. A preset range ends now; when none of the series has a
    reading in it (a stopped feed, an old database), the same span ending at the newest
    reading is drawn instead, and the note says so."""
    start, end = range_bounds(choice, now, start_text=start_text, end_text=end_text,
                              time_zone=ctx.site.site.time_zone)
    if RANGES[choice] is None:
        return start, end, ""
    latest = latest_reading_time(ctx, options)
    if latest is None:
        return start, end, "no readings of these series at all"
    if latest < start:
        end = latest.replace(second=0, microsecond=0) + timedelta(minutes=1)
        start = end - (now - start)
        return start, end, (f"no readings in the chosen period: showing the same span up to "
                            f"the newest reading ({local_text(latest, ctx.site.site.time_zone)})")
    return start, end, ""


def local_text(when: datetime, time_zone: str) -> str:
    """``YYYY-MM-DD HH:MM`` in site time."""
    return when.astimezone(ZoneInfo(time_zone)).strftime("%Y-%m-%d %H:%M")

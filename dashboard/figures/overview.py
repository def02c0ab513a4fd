"""What the overview and the wall display show: bullet indicators, texts, classes, sparklines.

Each metric comes with its bullet indicator's geometry, worked out when the status was judged
(:func:`ops_logic.display.bullet_geometry`: the band on a track whose scale depends on the band
only, a tick at the target, a marker at the value; a value off the scale sits at the end of the
track, outlined). Colour is for abnormal states only: the CSS classes of ``assets/style.css``
(section "Overview and wall display") give grey for normal, amber for a value out of its band
or a fishway out of criteria, grey italics for stale data, and the alarm colours by priority.

The page's components carry pattern ids ``{"type": ..., "key": "<fishway>.<item>"}``;
:func:`panel_values`, :func:`summary_values` and :func:`wall_values` give, per key, the text
and CSS class (every text item has both) and the bullet styles (a few properties each) of one
refresh, so a refresh sends only those small properties:

>>> from db.status.model import Metric
>>> m = Metric("head_drop", "Worst pool head drop", "length", 0.40, 0.30, 0.366, None,
...            band_left_pct=25.0, band_width_pct=50.0, value_pct=60.0)
>>> _styles(m)[2]
{'display': 'block', 'left': '60.00%', 'outline': 'none'}
"""

from __future__ import annotations

import threading
from collections import OrderedDict
from datetime import datetime
from typing import Any, NamedTuple

import plotly.graph_objects as go

from dashboard.services.overview import (
    PRIORITIES,
    FishwayStatus,
    Metric,
    Snapshot,
    age_text,
)
from ops_logic.display import display_number, unit_label

__all__ = [
    "SPARK_POINTS",
    "clear_outputs",
    "panel_values",
    "refresh_outputs",
    "spark_extension",
    "sparkline_figure",
    "state_class",
    "summary_values",
    "wall_values",
]

SPARK_POINTS = 360
"""Points kept in a sparkline trace: six hours of one-minute rollups."""


def state_class(status: FishwayStatus) -> str:
    """CSS class of a fishway's state badge."""
    return {"in_criteria": "ov-state state-ok", "out_of_criteria": "ov-state state-bad",
            "out_of_service": "ov-state state-oos", "no_data": "ov-state state-nodata",
            "model_error": "ov-state state-bad"}[status.state] + (
        " is-stale" if status.stale and status.state != "out_of_service" else "")


def _row_class(m: Metric) -> str:
    return f"ov-metric is-{m.status}" + (" no-band" if m.lo is None and m.hi is None else "")


_HIDDEN = {"display": "none"}


def _styles(m: Metric) -> tuple[dict, dict, dict]:
    """The styles of a metric's bullet band, target tick and marker (its geometry was worked
    out when the status was judged: :func:`ops_logic.display.bullet_geometry`): small dicts of
    the few properties a bullet sets (the rest is the CSS classes'), hidden when not drawn."""
    if m.band_left_pct is None:
        return _HIDDEN, _HIDDEN, _HIDDEN
    band = {"display": "block", "left": f"{m.band_left_pct:.2f}%",
            "width": f"{m.band_width_pct:.2f}%"}
    target = _HIDDEN if m.target_pct is None else {"display": "block",
                                                    "left": f"{m.target_pct:.2f}%"}
    marker = _HIDDEN if m.value_pct is None else {
        "display": "block", "left": f"{m.value_pct:.2f}%",
        "outline": "3px solid var(--abnormal)" if m.off_scale else "none"}
    return band, target, marker


def _alarm_items(counts: dict[str, int] | None, prefix: str, texts: dict, classes: dict,
                 none_text: str = "no alarm data") -> None:
    if counts is None:
        texts[f"{prefix}.alarms"] = none_text
        classes[f"{prefix}.alarms"] = "ov-alarms-note"
        for p in PRIORITIES:
            texts[f"{prefix}.alarm.{p}"] = "–"
            classes[f"{prefix}.alarm.{p}"] = "ov-alarm is-zero"
        return
    active = sum(counts[p] for p in PRIORITIES)
    texts[f"{prefix}.alarms"] = (
        "no active alarms" if not active else
        f"{active} active, {counts['unacknowledged']} unacknowledged") + (
        f"; {counts['shelved']} shelved" if counts.get("shelved") else "")
    classes[f"{prefix}.alarms"] = "ov-alarms-note"
    level = {"critical": 1, "high": 1, "medium": 2, "low": 3}
    for p in PRIORITIES:
        n = counts[p]
        texts[f"{prefix}.alarm.{p}"] = str(n)
        classes[f"{prefix}.alarm.{p}"] = f"ov-alarm alarm-{level[p]}" if n else \
            "ov-alarm is-zero"


_ids: dict[tuple[str, str], tuple[str, ...]] = {}


def _metric_ids(fid: str, key: str) -> tuple[str, ...]:
    """The item, row and style keys of one metric of a panel (made once)."""
    hit = _ids.get((fid, key))
    if hit is None:
        k = f"{fid}.{key}"
        hit = _ids[(fid, key)] = (f"{k}.value", f"{k}.band", f"{k}.note", f"{k}.row",
                                  f"{k}.band", f"{k}.target", f"{k}.marker")
    return hit


def panel_values(status: FishwayStatus) -> tuple[dict, dict, dict]:
    """Texts, classes and bullet styles by key for one fishway's overview panel."""
    fid = status.id
    texts: dict[str, Any] = {}
    classes: dict[str, str] = {}
    styles: dict[str, dict] = {}
    texts[f"{fid}.state"] = status.state_label
    classes[f"{fid}.state"] = state_class(status)
    texts[f"{fid}.reason"] = status.reason
    classes[f"{fid}.reason"] = "ov-reason"
    texts[f"{fid}.age"] = _age_text(status)
    classes[f"{fid}.age"] = "ov-age is-stale" if status.stale else "ov-age"
    for m in status.metrics:
        value, band, note_key, row, band_style, target, marker = _metric_ids(fid, m.key)
        texts[value] = m.text  # formatted when the status was judged
        texts[band] = m.band_text
        note = m.note
        if m.source and m.source != "gauge":
            note = f"{note} · {m.source}" if note else m.source
        texts[note_key] = note
        classes[value] = "ov-value"
        classes[band] = "ov-bandtext"
        classes[note_key] = "ov-note"
        classes[row] = _row_class(m)
        styles[band_style], styles[target], styles[marker] = _styles(m)
    _alarm_items(status.alarms, fid, texts, classes)
    adj = status.adjustment
    texts[f"{fid}.adjust"] = adj.text
    texts[f"{fid}.changes"] = "; ".join(adj.changes)
    classes[f"{fid}.changes"] = "ov-changes"
    classes[f"{fid}.adjust"] = "ov-adjust is-due" if adj.status == "due" else (
        "ov-adjust is-stale" if adj.stale or adj.status == "unknown" else "ov-adjust")
    texts[f"{fid}.gauges"] = status.gauges
    classes[f"{fid}.gauges"] = "ov-gauges" if status.gauges_ok else "ov-gauges is-abnormal"
    return texts, classes, styles


def summary_values(snap: Snapshot) -> tuple[dict, dict]:
    """Texts and classes of the site summary line above the panels."""
    texts: dict[str, Any] = {}
    classes: dict[str, str] = {}
    texts["site.time"] = _time_text(snap)
    classes["site.time"] = "ov-time"
    _alarm_items(snap.site_alarms, "site", texts, classes)
    texts["site.problems"] = "; ".join(snap.problems)
    classes["site.problems"] = "ov-problems" if snap.problems else "ov-problems is-empty"
    return texts, classes


def _age_text(status: FishwayStatus) -> str:
    age = age_text(status.age_s)
    return (f"STALE: data {age} old" if status.stale and status.age_s is not None
            else "no current readings" if status.age_s is None else f"data {age} old")


def _time_text(snap: Snapshot) -> str:
    local = snap.now.astimezone(_zone(snap.time_zone))
    return f"as of {local:%Y-%m-%d %H:%M:%S} ({snap.time_zone})"


def _counts_key(counts: dict[str, int] | None) -> tuple | None:
    return None if counts is None else tuple(counts.items())


class _Outputs(NamedTuple):
    texts: list
    classes: list
    rows: list
    styles: list
    live: tuple[tuple[int, str | None], ...]  # (index in texts, fishway id or None: site time)


_outputs: OrderedDict[tuple, _Outputs] = OrderedDict()
_outputs_lock = threading.Lock()
_OUTPUTS_KEPT = 16


def refresh_outputs(snap: Snapshot, item_keys: tuple[str, ...], row_keys: list[str],
                    style_keys: list[str], missing_style: Any = None
                    ) -> tuple[list, list, list, list]:
    """The overview refresh's four output lists (texts and classes of the items, classes of
    the metric rows, bullet styles; ``missing_style`` for a style key without a value) in the
    order of the given keys.

    A stored status is read by every viewer until the ingest's next cycle, so the lists are
    kept per content (the statuses' judging times and states, alarm counts, problems, the
    layout's keys) and only the texts that change with the clock alone (the data's age, the
    time of the page) are renewed on the copies."""
    key = (item_keys, snap.units, snap.problems, _counts_key(snap.site_alarms),
           tuple((s.id, s.computed_ms, s.state, s.stale, s.age_s is None,
                  _counts_key(s.alarms)) for s in snap.fishways))
    with _outputs_lock:
        hit = _outputs.get(key)
    if hit is None:
        texts, classes = summary_values(snap)
        styles: dict = {}
        for status in snap.fishways:
            t, c, st = panel_values(status)
            texts.update(t)
            classes.update(c)
            styles.update(st)
        index = {k: n for n, k in enumerate(item_keys)}
        live = tuple((index[k], fid) for k, fid in [("site.time", None)] + [
            (f"{s.id}.age", s.id) for s in snap.fishways] if k in index)
        hit = _Outputs([texts.get(k, "") for k in item_keys],
                       [classes.get(k, "") for k in item_keys],
                       [classes.get(k, "ov-metric") for k in row_keys],
                       [styles.get(k, missing_style) for k in style_keys], live)
        with _outputs_lock:
            _outputs[key] = hit
            while len(_outputs) > _OUTPUTS_KEPT:
                _outputs.popitem(last=False)
        return hit.texts, hit.classes, hit.rows, hit.styles
    texts = list(hit.texts)
    by_id = {s.id: s for s in snap.fishways}
    for n, fid in hit.live:
        texts[n] = _time_text(snap) if fid is None else _age_text(by_id[fid])
    return texts, hit.classes, hit.rows, hit.styles


def clear_outputs() -> None:
    """Forget the kept output lists (tests, benchmarks)."""
    with _outputs_lock:
        _outputs.clear()


def _zone(name: str) -> Any:
    from zoneinfo import ZoneInfo

    return ZoneInfo(name)


def wall_values(snap: Snapshot) -> tuple[dict, dict]:
    """Texts and classes of the wall display: state, worst criterion, alarms, data age."""
    texts: dict[str, Any] = {}
    classes: dict[str, str] = {}
    local = snap.now.astimezone(_zone(snap.time_zone))
    texts["site.time"] = f"{local:%H:%M}"
    classes["site.time"] = "wall-time"
    for s in snap.fishways:
        fid = s.id
        texts[f"{fid}.state"] = s.state_label
        classes[f"{fid}.state"] = state_class(s).replace("ov-state", "wall-state")
        texts[f"{fid}.worst"] = s.worst if s.state in ("in_criteria", "out_of_criteria") \
            else s.reason
        classes[f"{fid}.worst"] = "wall-worst"
        age = age_text(s.age_s)
        texts[f"{fid}.age"] = ("no current readings" if s.age_s is None else
                               f"STALE {age}" if s.stale else f"data {age} old")
        classes[f"{fid}.age"] = "wall-age is-stale" if s.stale else "wall-age"
        _alarm_items(s.alarms, fid, texts, classes)
        texts[f"{fid}.adjust"] = "ADJUSTMENT DUE" if s.adjustment.status == "due" else ""
        classes[f"{fid}.adjust"] = "wall-adjust is-due" if s.adjustment.status == "due" \
            else "wall-adjust"
    return texts, classes


def _local_times(ms: list[int], time_zone: str) -> list[str]:
    """Epoch milliseconds as local wall-clock text plotly reads as dates."""
    zone = _zone(time_zone)
    return [datetime.fromtimestamp(t / 1000.0, tz=zone).strftime("%Y-%m-%d %H:%M:%S")
            for t in ms]


def sparkline_figure(points: tuple[list[int], list[float]] | None, kind: str, units: str,
                     time_zone: str) -> go.Figure:
    """A small trend without axes: a grey line of (epoch ms, SI values) in display units and
    site time; the hover shows time and value."""
    ms, values = points if points else ([], [])
    fig = go.Figure(go.Scatter(
        x=_local_times(ms, time_zone), y=[display_number(v, kind, units) for v in values],
        mode="lines", line={"color": "#4a4f54", "width": 1.5}, showlegend=False,
        hovertemplate=f"%{{x|%H:%M}}  %{{y:.2f}} {unit_label(kind, units)}<extra></extra>"))
    fig.update_layout(
        margin={"l": 0, "r": 0, "t": 0, "b": 0}, height=36, paper_bgcolor="rgba(0,0,0,0)",
        plot_bgcolor="rgba(0,0,0,0)", xaxis={"visible": False, "fixedrange": True},
        yaxis={"visible": False, "fixedrange": True}, hovermode="x", uirevision="keep")
    return fig


def spark_extension(points: tuple[list[int], list[float]], kind: str, units: str,
                    time_zone: str) -> tuple[dict, list[int], int]:
    """``extendData`` for a sparkline: the new points, trace 0, at most :data:`SPARK_POINTS`
    kept (the oldest fall off)."""
    ms, values = points
    return ({"x": [_local_times(ms, time_zone)],
             "y": [[display_number(v, kind, units) for v in values]]}, [0], SPARK_POINTS)

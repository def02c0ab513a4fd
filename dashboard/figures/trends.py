"""Trend chart: several series, one y axis per kind of quantity, with their target bands
(shaded) and alarm, actuator and QC limits (dashed, dash-dot and dotted lines).

Times are drawn in the site's time zone (plotly has no time zones: the x values are the site's
wall-clock times); bands and limit lines span the whole plot width (``xref="paper"``), so a
zoom only needs new trace data (:func:`trend_patch`). Pens are muted, distinct hues; colour
that signals an abnormal state stays reserved for alarms elsewhere (ANSI/ISA-101).
"""

from __future__ import annotations

from collections.abc import Sequence
from datetime import datetime
from zoneinfo import ZoneInfo

import numpy as np
import pandas as pd
import plotly.graph_objects as go
from dash import Patch

from dashboard.services.trends import Series, to_display, unit_label
from ops_logic.units import UnitSystem

__all__ = ["PENS", "axis_kinds", "local_x", "trend_figure", "trend_patch"]

PENS = ("#2f4858", "#8a5a44", "#55683a", "#6b4f7a", "#3f6e73", "#7a6a3a", "#4b5563",
        "#7b4b5a")
"""Pen colours, muted and told apart by hue and lightness."""

_AXIS_TITLE = {"elevation": "Elevation", "head": "Head", "length": "Length", "flow": "Flow",
               "temperature": "Temperature", "do": "Dissolved oxygen", "opening": "Opening",
               "count": "Pumps", "status": "Status", "other": "Value"}
_LINE = {"alarm": ("dash", "#3b4045", 1.5), "range": ("dashdot", "#6b6f73", 1.2),
         "qc": ("dot", "#6b6f73", 1.2)}


def axis_kinds(series: Sequence[Series]) -> list[str]:
    """Kinds of quantity in order of first appearance: one y axis each."""
    out: list[str] = []
    for s in series:
        if s.option.kind not in out:
            out.append(s.option.kind)
    return out


def local_x(ts: Sequence[datetime] | object, time_zone: str) -> list[str]:
    """Aware times as the site's wall-clock strings (what the chart's x axis shows).

    Converted as whole arrays (pandas for the time zone, numpy for the text), not one
    ``datetime`` at a time: a year-long trend has thousands of points.

    >>> import pandas as pd
    >>> local_x(pd.DatetimeIndex(["2026-07-15 12:00"], tz="UTC"), "Etc/GMT+8")
    ['2026-07-15 04:00:00']
    """
    idx = ts if isinstance(ts, pd.DatetimeIndex) else pd.to_datetime(list(ts), utc=True)  # type: ignore[call-overload]
    if len(idx) == 0:
        return []
    wall = idx.tz_convert(ZoneInfo(time_zone)).tz_localize(None).to_numpy()
    text = np.datetime_as_string(wall.astype("datetime64[s]"), unit="s").astype("S19")
    chars = text.view(np.uint8).reshape(-1, 19).copy()
    chars[:, 10] = ord(" ")  # "YYYY-MM-DDTHH:MM:SS" -> "YYYY-MM-DD HH:MM:SS"
    return chars.view("S19").ravel().astype(str).tolist()


def _axis_name(k: int) -> str:
    return "y" if k == 0 else f"y{k + 1}"


def trend_figure(series: Sequence[Series], units: UnitSystem, time_zone: str, *,
                 start: datetime, end: datetime, revision: str = "") -> go.Figure:
    """The trend chart of ``series`` over ``[start, end)``.

    >>> import pandas as pd
    >>> from dashboard.services.trends import Guide, SeriesOption
    >>> opt = SeriesOption("east:entrance_head", "entrance head", "head", (1, 2), 10.0,
    ...                    (Guide("entrance head band", "band", 0.30, 0.46),))
    >>> ts = pd.DatetimeIndex(["2026-07-15 11:00", "2026-07-15 12:00"], tz="UTC")
    >>> s = Series(opt, ts, np.array([0.35, 0.50]), np.array([1, 1]), "raw")
    >>> fig = trend_figure([s], "us", "UTC", start=ts[0], end=ts[1])
    >>> [round(v, 2) for v in fig.data[0].y], fig.layout.shapes[0].type
    ([1.15, 1.64], 'rect')
    """
    kinds = axis_kinds(series)
    traces: list[dict] = []
    shapes: list[dict] = []
    for i, s in enumerate(series):
        k = kinds.index(s.option.kind)
        unit = unit_label(s.option.kind, units)
        y = np.asarray(to_display(s.option.kind, s.value_si, units), dtype="float64")
        name = s.option.label + (f" — {s.note}" if s.note else "")
        traces.append({
            "type": "scatter", "x": local_x(s.ts, time_zone), "y": y.tolist(), "name": name,
            "mode": "lines", "yaxis": _axis_name(k),
            "line": {"color": PENS[i % len(PENS)], "width": 2},
            "hovertemplate": f"%{{y:.3f}} {unit}<extra>{s.option.key}</extra>"})
        short = s.option.key.split(".", 1)[-1].split(":", 1)[-1].replace("_", " ")
        for g in s.option.guides:
            text = g.label if len(series) == 1 else f"{short}: {g.label}"
            yref = _axis_name(k)
            lo = None if g.low is None else float(to_display(s.option.kind, g.low, units))
            hi = None if g.high is None else float(to_display(s.option.kind, g.high, units))
            if g.style == "band" and lo is not None and hi is not None:
                shapes.append({"type": "rect", "xref": "paper", "x0": 0, "x1": 1,
                               "yref": yref, "y0": lo, "y1": hi, "fillcolor": "#c9ccc6",
                               "opacity": 0.45, "line": {"width": 0}, "layer": "below",
                               "label": {"text": text, "textposition": "top left",
                                         "font": {"size": 12, "color": "#5b6166"}}})
                continue
            dash, colour, width = _LINE.get(g.style, _LINE["qc"])
            for v in (lo, hi):
                if v is None:
                    continue
                shapes.append({"type": "line", "xref": "paper", "x0": 0, "x1": 1,
                               "yref": yref, "y0": v, "y1": v,
                               "line": {"dash": dash, "color": colour, "width": width},
                               "label": {"text": text, "textposition": "end",
                                         "yanchor": "bottom",
                                         "font": {"size": 12, "color": colour}}})
    tz_label = time_zone
    extra_left = len([k for k in range(2, len(kinds)) if k % 2 == 0])
    extra_right = len([k for k in range(3, len(kinds)) if k % 2 == 1])
    layout: dict = {
        "height": 560,
        "margin": {"l": 80 + 90 * extra_left, "r": 80 + 90 * extra_right, "t": 40, "b": 50},
        "paper_bgcolor": "#ececea", "plot_bgcolor": "#e6e6e3",
        "font": {"family": "DejaVu Sans, Arial, sans-serif", "size": 15, "color": "#1f2326"},
        "legend": {"orientation": "h", "y": 1.02, "yanchor": "bottom", "x": 0},
        "hovermode": "x unified", "uirevision": revision,
        "xaxis": {"type": "date", "gridcolor": "#cfd0cc",
                  "title": {"text": f"Site time ({tz_label})"},
                  "range": local_x([start, end], time_zone)},
    }
    if shapes:
        layout["shapes"] = shapes
    for k, kind in enumerate(kinds):
        unit = unit_label(kind, units)
        axis: dict = {"title": {"text": f"{_AXIS_TITLE.get(kind, kind)}"
                                         + (f" ({unit})" if unit else "")},
                      "showgrid": k == 0, "zeroline": False}
        if k == 0:
            axis["gridcolor"] = "#cfd0cc"
        else:
            right = bool(k % 2)
            axis.update(overlaying="y", side="right" if right else "left", anchor="free",
                        autoshift=True, tickmode="auto")
            if k > 1:  # clear of the neighbouring axis' title too (autoshift pads the ticks)
                axis["shift"] = 60 if right else -60
        layout["yaxis" if k == 0 else f"yaxis{k + 1}"] = axis
    # Built as plain dicts and lists and wrapped without plotly's per-value validation (it
    # walks every point of every trace, the larger part of this callback's time); the keys
    # and values are those the validated figure had (None values left out, as plotly does).
    return go.Figure({"data": traces, "layout": layout}, _validate=False)


def trend_patch(series: Sequence[Series], units: UnitSystem, time_zone: str) -> Patch:
    """New trace data for a chart of the same series (after a zoom): x and y only, so the
    axes, bands and the zoom itself stay as they are."""
    patch = Patch()
    for i, s in enumerate(series):
        patch["data"][i]["x"] = local_x(s.ts, time_zone)
        patch["data"][i]["y"] = np.asarray(to_display(s.option.kind, s.value_si, units),
                                           dtype="float64").tolist()
    return patch

"""Overview (``/``): one panel per fishway with its state, levels, flows, heads and water
quality against their bands, active alarms by priority, the data's age and whether an
adjustment is due.

The layout is a fixed skeleton built from the site (no readings are loaded by ``layout``);
:func:`refresh` fills it at load and every :data:`REFRESH_MS` with small properties only
(texts, class names, the few style properties of the bullet markers), and :func:`refresh_sparklines`
extends the sparklines with the minutes that completed since the last call (``extendData``),
so nothing is redrawn whole. The state comes from :mod:`dashboard.services.overview`.
"""

from __future__ import annotations

from typing import Any

import dash
from dash import ALL, Input, Output, State, callback, dcc, html, no_update

from dashboard import auth
from dashboard.context import current
from dashboard.figures.overview import refresh_outputs, spark_extension, sparkline_figure
from dashboard.services import overview as service
from ops_logic.site import Fishway

dash.register_page(__name__, path="/", name="Overview", title="Overview")

OVERVIEW_REFRESH = "overview-refresh"
OVERVIEW_SPARK_REFRESH = "overview-spark-refresh"
OVERVIEW_SPARK_STATE = "overview-spark-state"
OVERVIEW_ITEM = "overview-item"
OVERVIEW_ROW = "overview-row"
OVERVIEW_STYLE = "overview-style"
OVERVIEW_SPARK = "overview-spark"

REFRESH_MS = 10_000
"""Refresh period of the values: far longer than the refresh callback (milliseconds)."""
SPARK_REFRESH_MS = 60_000
"""Refresh period of the sparklines (one-minute points)."""

_PRIORITY_LABELS = (("critical", "critical"), ("high", "high"), ("medium", "medium"),
                    ("low", "low"))


def _item(key: str, tag: str = "span", text: str = "…") -> Any:
    return getattr(html, tag.capitalize())(text, id={"type": OVERVIEW_ITEM, "key": key})


def _bullet(key: str) -> html.Div:
    return html.Div(className="ov-bullet", children=[
        html.Div(className="ov-band", id={"type": OVERVIEW_STYLE, "key": f"{key}.band"},
                 style={"display": "none"}),
        html.Div(className="ov-target", id={"type": OVERVIEW_STYLE, "key": f"{key}.target"},
                 style={"display": "none"}),
        html.Div(className="ov-marker", id={"type": OVERVIEW_STYLE, "key": f"{key}.marker"},
                 style={"display": "none"}),
    ])


def _metric_row(fid: str, key: str, label: str) -> html.Div:
    k = f"{fid}.{key}"
    spark = (dcc.Graph(id={"type": OVERVIEW_SPARK, "key": k}, className="ov-spark",
                       config={"displayModeBar": False, "responsive": True},
                       style={"width": "6rem", "height": "36px"},
                       figure=sparkline_figure(None, "length", "si", "UTC"))
             if key in service.SPARK_ROLES else html.Div(className="ov-spark"))
    return html.Div(id={"type": OVERVIEW_ROW, "key": f"{k}.row"}, className="ov-metric",
                    children=[html.Span(label, className="ov-label"), _item(f"{k}.value"),
                              _bullet(k), _item(f"{k}.band", text=""),
                              _item(f"{k}.note", text=""), spark])


def _alarm_chips(prefix: str, label: str = "Alarms") -> html.Div:
    return html.Div(className="ov-alarm-row", children=[
        html.Span(label, className="ov-label"),
        *[html.Div(className="ov-chip", children=[_item(f"{prefix}.alarm.{p}", text="–"),
                                                  html.Span(label, className="ov-chip-label")])
          for p, label in _PRIORITY_LABELS],
        _item(f"{prefix}.alarms", text="")])


def _panel(f: Fishway) -> html.Section:
    fid = f.id
    return html.Section(className="ov-panel", id=f"overview-panel-{fid}", children=[
        html.Div(className="ov-head", children=[
            html.H2(f.name), _item(f"{fid}.state"), _item(f"{fid}.age", text="")]),
        _item(f"{fid}.reason", "p", ""),
        html.Div(className="ov-metrics", children=[
            _metric_row(fid, key, label) for key, label in service.metric_keys(f)]),
        html.Div(className="ov-foot", children=[
            _alarm_chips(fid),
            html.Div(className="ov-adjust-row", children=[
                html.Span("Settings", className="ov-label"), _item(f"{fid}.adjust", text=""),
                _item(f"{fid}.changes", text="")]),
            html.Div(className="ov-adjust-row", children=[
                html.Span("Gauges", className="ov-label"), _item(f"{fid}.gauges", text="")]),
        ]),
    ])


def layout(**_: Any) -> Any:
    denied = auth.guard()
    if denied is not None:
        return denied
    site = current().site
    return html.Div(className="overview", children=[
        dcc.Interval(id=OVERVIEW_REFRESH, interval=REFRESH_MS),
        dcc.Interval(id=OVERVIEW_SPARK_REFRESH, interval=SPARK_REFRESH_MS),
        dcc.Store(id=OVERVIEW_SPARK_STATE),
        html.Div(className="ov-summary", children=[
            html.H1(site.site.name), _item("site.time", text=""),
            html.Div(className="ov-site-alarms", children=[_alarm_chips("site", "Site-wide")]),
            _item("site.problems", "div", ""),
        ]),
        html.Div(className="ov-grid", children=[_panel(f) for f in site.fishways]),
        # the advisory caution is the shell's footer, right below the panels
    ])


@callback(
    Output({"type": OVERVIEW_ITEM, "key": ALL}, "children"),
    Output({"type": OVERVIEW_ITEM, "key": ALL}, "className"),
    Output({"type": OVERVIEW_ROW, "key": ALL}, "className"),
    Output({"type": OVERVIEW_STYLE, "key": ALL}, "style"),
    Input(OVERVIEW_REFRESH, "n_intervals"),
    State({"type": OVERVIEW_ITEM, "key": ALL}, "id"),
    State({"type": OVERVIEW_ROW, "key": ALL}, "id"),
    State({"type": OVERVIEW_STYLE, "key": ALL}, "id"),
)
def refresh(_n: int | None, item_ids: list[dict], row_ids: list[dict],
            style_ids: list[dict]) -> tuple[list, list, list, list]:
    """Every text, class and marker of the page for the current status (see
    :func:`dashboard.figures.overview.refresh_outputs`)."""
    auth.require("viewer")
    app = current()
    snap = service.snapshot(app.site, app.engine, service.now())
    return refresh_outputs(snap, tuple(i["key"] for i in item_ids),
                           [i["key"] for i in row_ids], [i["key"] for i in style_ids],
                           no_update)


@callback(
    Output({"type": OVERVIEW_SPARK, "key": ALL}, "figure"),
    Output({"type": OVERVIEW_SPARK, "key": ALL}, "extendData"),
    Output(OVERVIEW_SPARK_STATE, "data"),
    Input(OVERVIEW_SPARK_REFRESH, "n_intervals"),
    State(OVERVIEW_SPARK_STATE, "data"),
    State({"type": OVERVIEW_SPARK, "key": ALL}, "id"),
)
def refresh_sparklines(_n: int | None, last: dict | None, spark_ids: list[dict]
                       ) -> tuple[list, list, dict]:
    """The whole sparklines at load; afterwards only the minutes completed since."""
    auth.require("viewer")
    app = current()
    site = app.site
    points = service.spark_points(site, app.engine, service.now(), last)
    state = dict(last or {})
    figures, extends = [], []
    for sid in spark_ids:
        key = sid["key"]
        kind = service.SPARK_KINDS[key.split(".", 1)[1]]
        got = points.get(key)
        if got is not None and got[0]:
            state[key] = got[0][-1]
        if last is None:
            figures.append(sparkline_figure(got, kind, site.site.units, site.site.time_zone))
            extends.append(no_update)
        else:
            figures.append(no_update)
            extends.append(spark_extension(got, kind, site.site.units, site.site.time_zone)
                           if got and got[0] else no_update)
    return figures, extends, state

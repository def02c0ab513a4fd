"""Trends: chosen series over a chosen range, drawn from the rollups with every extreme kept
(M4), with their target bands and alarm limits; a zoom fetches finer data for the new range;
the shown data export as CSV.

The chart asks for half as many M4 columns as it has pixel columns, so it never receives more
than about two points per pixel column (M4 returns at most four per column).
URL: ``/trends?series=<key>,<key>&range=24h``.
"""

from __future__ import annotations

from datetime import datetime
from typing import Any

import dash
from dash import Input, Output, State, callback, clientside_callback, dcc, html, no_update

from dashboard import auth
from dashboard.context import current
from dashboard.figures.trends import trend_figure, trend_patch
from dashboard.services.profile import now_utc
from dashboard.services.trends import (
    RANGES,
    csv_text,
    local_text,
    parse_local,
    resolve_range,
    series_data,
    series_options,
)

dash.register_page(__name__, path="/trends", name="Trends", title="Trends")

TRENDS_SERIES = "trends-series"
TRENDS_RANGE = "trends-range"
TRENDS_CUSTOM = "trends-custom"
TRENDS_START = "trends-start"
TRENDS_END = "trends-end"
TRENDS_GRAPH = "trends-graph"
TRENDS_STATUS = "trends-status"
TRENDS_EXPORT = "trends-export"
TRENDS_DOWNLOAD = "trends-download"
TRENDS_SHOWN = "trends-shown"
TRENDS_WIDTH = "trends-width"

RANGE_LABELS = {"8h": "8 h", "24h": "24 h", "7d": "7 days", "30d": "30 days", "1y": "a year",
                "custom": "custom"}
PLOT_MARGIN_PX = 160
"""Left and right margins of the chart (axes titles): not part of the data columns."""
DEFAULT_WIDTH_PX = 1400


def _field(label: Any, control: Any) -> Any:
    return html.Label([label, control], className="field")


def _default_keys(options: list[Any]) -> list[str]:
    keys = [o.key for o in options]
    first = keys[0].split(".", 1)[0].split(":", 1)[0] if keys else ""
    wanted = [f"{first}:entrance_head", f"{first}.forebay_level"]
    return [k for k in wanted if k in keys] or keys[:1]


def layout(series: str | None = None, range: str | None = None, **_: Any) -> Any:
    denied = auth.guard()
    if denied is not None:
        return denied
    app = current()
    options = series_options(app)
    keys = {o.key for o in options}
    chosen = [k for k in (series or "").split(",") if k in keys] or _default_keys(options)
    return html.Div(className="trends-page", children=[
        html.Div(className="page-head", children=[html.H1("Trends")]),
        html.Div(className="panel trends-controls", children=[
            _field("Series", dcc.Dropdown(id=TRENDS_SERIES, multi=True, value=chosen,
                                          options=[{"label": o.label, "value": o.key}
                                                   for o in options])),
            _field("Range", dcc.RadioItems(id=TRENDS_RANGE, inline=True,
                                           value=range if range in RANGES else "24h",
                                           options=[{"label": v, "value": k}
                                                    for k, v in RANGE_LABELS.items()])),
            html.Div(id=TRENDS_CUSTOM, className="log-row", children=[
                _field("From (site time)", dcc.Input(id=TRENDS_START, type="text",
                                                     debounce=True,
                                                     placeholder="YYYY-MM-DD HH:MM")),
                _field("To (site time)", dcc.Input(id=TRENDS_END, type="text", debounce=True,
                                                   placeholder="YYYY-MM-DD HH:MM")),
            ]),
            html.Button("Export shown data (CSV)", id=TRENDS_EXPORT, className="button"),
        ]),
        html.Div(id=TRENDS_STATUS, className="status-line"),
        dcc.Graph(id=TRENDS_GRAPH, config={"displaylogo": False, "responsive": True},
                  className="trends-graph"),
        dcc.Store(id=TRENDS_SHOWN), dcc.Store(id=TRENDS_WIDTH),
        dcc.Download(id=TRENDS_DOWNLOAD),
    ])


clientside_callback(
    f"""function(series, range, start, end) {{
        const el = document.getElementById("{TRENDS_GRAPH}");
        const px = el ? el.offsetWidth : 0;
        return px > 0 ? px : {DEFAULT_WIDTH_PX};
    }}""",
    Output(TRENDS_WIDTH, "data"), Input(TRENDS_SERIES, "value"), Input(TRENDS_RANGE, "value"),
    Input(TRENDS_START, "value"), Input(TRENDS_END, "value"))


def columns_for(width_px: int | None) -> int:
    """M4 columns for a chart ``width_px`` wide: half its plot-area pixel columns."""
    plot = max(int(width_px or DEFAULT_WIDTH_PX) - PLOT_MARGIN_PX, 200)
    return max(plot // 2, 100)


@callback(Output(TRENDS_CUSTOM, "style"), Input(TRENDS_RANGE, "value"))
def show_custom(choice: str) -> dict:
    return {"display": "flex"} if choice == "custom" else {"display": "none"}


def _status(series: list[Any], note: str, start: datetime, end: datetime, tz: str) -> list[Any]:
    parts: list[Any] = [html.Span(f"{local_text(start, tz)} – {local_text(end, tz)} ({tz})")]
    if note:
        parts.append(html.Span(note, className="note"))
    total = sum(len(s.ts) for s in series)
    sources = sorted({s.source for s in series})
    parts.append(html.Span(f"{total} points from {', '.join(sources) or 'no data'}",
                           className="note"))
    return parts


@callback(Output(TRENDS_GRAPH, "figure"), Output(TRENDS_STATUS, "children"),
          Output(TRENDS_SHOWN, "data"),
          Input(TRENDS_WIDTH, "data"), State(TRENDS_SERIES, "value"),
          State(TRENDS_RANGE, "value"), State(TRENDS_START, "value"),
          State(TRENDS_END, "value"))
def draw(width: int | None, keys: list[str] | None, choice: str, start_text: str | None,
         end_text: str | None) -> tuple[Any, Any, Any]:
    """Draw the chosen series over the chosen range."""
    app = current()
    tz = app.site.site.time_zone
    by_key = {o.key: o for o in series_options(app)}
    options = [by_key[k] for k in (keys or []) if k in by_key]
    if not options:
        return {}, html.Span("Choose one or more series.", className="muted"), None
    try:
        start, end, note = resolve_range(app, options, choice, now_utc(),
                                         start_text=start_text, end_text=end_text)
    except ValueError as exc:
        return no_update, html.Span(f"Range: {exc}", className="form-error"), no_update
    cols = columns_for(width)
    series = series_data(app, options, start, end, cols)
    fig = trend_figure(series, app.units, tz, start=start, end=end,
                       revision=f"{','.join(o.key for o in options)}|{start.isoformat()}")
    shown = {"keys": [o.key for o in options], "start": start.isoformat(),
             "end": end.isoformat(), "base_start": start.isoformat(),
             "base_end": end.isoformat(), "columns": cols}
    return fig, _status(series, note, start, end, tz), shown


@callback(Output(TRENDS_GRAPH, "figure", allow_duplicate=True),
          Output(TRENDS_SHOWN, "data", allow_duplicate=True),
          Output(TRENDS_STATUS, "children", allow_duplicate=True),
          Input(TRENDS_GRAPH, "relayoutData"), State(TRENDS_SHOWN, "data"),
          prevent_initial_call=True)
def zoom(relayout: dict | None, shown: dict | None) -> tuple[Any, Any, Any]:
    """Fetch finer (or the original) data for the zoomed x range; patch the traces only."""
    if not relayout or not shown:
        return no_update, no_update, no_update
    app = current()
    tz = app.site.site.time_zone
    if relayout.get("xaxis.autorange"):
        start = datetime.fromisoformat(shown["base_start"])
        end = datetime.fromisoformat(shown["base_end"])
    elif "xaxis.range[0]" in relayout and "xaxis.range[1]" in relayout:
        try:
            start = parse_local(str(relayout["xaxis.range[0]"])[:19], tz)
            end = parse_local(str(relayout["xaxis.range[1]"])[:19], tz)
        except ValueError:
            return no_update, no_update, no_update
    else:
        return no_update, no_update, no_update
    if end <= start:
        return no_update, no_update, no_update
    by_key = {o.key: o for o in series_options(app)}
    options = [by_key[k] for k in shown["keys"] if k in by_key]
    series = series_data(app, options, start, end, int(shown["columns"]))
    new = {**shown, "start": start.isoformat(), "end": end.isoformat()}
    return (trend_patch(series, app.units, tz), new,
            _status(series, "zoomed: finer data for this range", start, end, tz))


@callback(Output(TRENDS_DOWNLOAD, "data"), Input(TRENDS_EXPORT, "n_clicks"),
          State(TRENDS_SHOWN, "data"), prevent_initial_call=True)
def export(_clicks: int | None, shown: dict | None) -> Any:
    """The shown data (same range and reduction as the chart) as a CSV download."""
    if not shown:
        return no_update
    app = current()
    by_key = {o.key: o for o in series_options(app)}
    options = [by_key[k] for k in shown["keys"] if k in by_key]
    start = datetime.fromisoformat(shown["start"])
    end = datetime.fromisoformat(shown["end"])
    series = series_data(app, options, start, end, int(shown["columns"]))
    name = f"trend_{start.strftime('%Y%m%dT%H%M')}_{end.strftime('%Y%m%dT%H%M')}Z.csv"
    return dcc.send_string(csv_text(series, app.units, app.site.site.time_zone), name)

"""Wall display (``/wall``): the control-room wall, readable from several metres.

Few numbers in large type: per fishway its state, the worst criterion (or why the state
cannot be judged), active alarms by priority and the data's age; an "adjustment due" flag.
It needs no sign-in and changes nothing: no input writes, and its callback reads only (the
app's ``wall_only`` mode, ``fishway dashboard --wall``, serves this page alone). The page
hides the navigation bar (``body:has(.wall)`` in ``assets/style.css``) so a browser in kiosk
mode shows it full screen. It refreshes every :data:`REFRESH_MS` with texts and classes only.
"""

from __future__ import annotations

from typing import Any

import dash
from dash import ALL, Input, Output, State, callback, dcc, html

from dashboard.context import current
from dashboard.figures.overview import wall_values
from dashboard.services import overview as service
from ops_logic.site import Fishway

dash.register_page(__name__, path="/wall", name="Wall display", title="Wall display")

WALL_REFRESH = "wall-refresh"
WALL_ITEM = "wall-item"

REFRESH_MS = 10_000
"""Refresh period (the callback takes milliseconds)."""

_PRIORITIES = (("critical", "CRIT"), ("high", "HIGH"), ("medium", "MED"), ("low", "LOW"))


def _item(key: str, tag: str = "div", text: str = "") -> Any:
    return getattr(html, tag.capitalize())(text, id={"type": WALL_ITEM, "key": key})


def _tile(f: Fishway) -> html.Section:
    fid = f.id
    return html.Section(className="wall-tile", id=f"wall-tile-{fid}", children=[
        html.Div(className="wall-tile-head", children=[
            html.H2(f.name, className="wall-name"), _item(f"{fid}.age", "span")]),
        _item(f"{fid}.state", text="…"),
        _item(f"{fid}.worst"),
        html.Div(className="wall-alarms", children=[
            html.Div(className="wall-chip", children=[
                _item(f"{fid}.alarm.{p}", "span", "–"),
                html.Span(label, className="wall-chip-label")])
            for p, label in _PRIORITIES]),
        _item(f"{fid}.alarms", "div"),
        _item(f"{fid}.adjust", "div"),
    ])


def layout(**_: Any) -> Any:
    site = current().site
    return html.Div(className="wall", children=[
        dcc.Interval(id=WALL_REFRESH, interval=REFRESH_MS),
        html.Div(className="wall-head", children=[
            html.H1(site.site.name, className="wall-site"), _item("site.time", "span")]),
        html.Div(className="wall-grid", children=[_tile(f) for f in site.fishways]),
    ])


@callback(
    Output({"type": WALL_ITEM, "key": ALL}, "children"),
    Output({"type": WALL_ITEM, "key": ALL}, "className"),
    Input(WALL_REFRESH, "n_intervals"),
    State({"type": WALL_ITEM, "key": ALL}, "id"),
)
def refresh(_n: int | None, item_ids: list[dict]) -> tuple[list, list]:
    """Every text and class of the wall for the current readings (reads only)."""
    app = current()
    texts, classes = wall_values(service.snapshot(app.site, app.engine, service.now()))
    return ([texts.get(i["key"], "") for i in item_ids],
            [classes.get(i["key"], "") for i in item_ids])

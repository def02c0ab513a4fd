"""Data health (``/health``): the feeds, the newest reading of every tag and its age, and the
QARTOD flags of each tag over the last hour and day (:mod:`dashboard.services.health`).

Refreshes every :data:`REFRESH_MS`; "only problems" keeps the tags that are stale, missing,
failing or suspect, had suspect, failed or missing readings in the last hour, or received
fewer than 90 % of the readings their poll period promises in the last hour.
"""

from __future__ import annotations

from typing import Any

import dash
from dash import Input, Output, callback, dcc, html

from dashboard import auth
from dashboard.context import current
from dashboard.services import health as service
from dashboard.services import overview as overview_service
from db.dashboard_queries import QARTOD_FLAG_NAMES

dash.register_page(__name__, path="/health", name="Data health", title="Data health")

HEALTH_REFRESH = "health-refresh"
HEALTH_FEEDS = "health-feeds"
HEALTH_TAGS = "health-tags"
HEALTH_ONLY_PROBLEMS = "health-only-problems"
HEALTH_SUMMARY = "health-summary"

REFRESH_MS = 30_000
"""Refresh period (the callback takes tens of milliseconds on a day of readings)."""

_FLAG_HEADS = {1: "1 pass", 2: "2 n.e.", 3: "3 susp.", 4: "4 fail", 9: "9 miss."}
"""Short column heads; the legend above the table names the flags in full."""


def layout(**_: Any) -> Any:
    denied = auth.guard()
    if denied is not None:
        return denied
    return html.Div(className="health-page", children=[
        dcc.Interval(id=HEALTH_REFRESH, interval=REFRESH_MS),
        html.Div(className="page-head", children=[
            html.H1("Data health"), html.Div(id=HEALTH_SUMMARY, className="health-summary")]),
        html.Section(className="panel health-section", children=[
            html.H2("Feeds"), html.Div(id=HEALTH_FEEDS)]),
        html.Section(className="panel health-section", children=[
            html.Div(className="health-tags-head", children=[
                html.H2("Tags"),
                dcc.Checklist(id=HEALTH_ONLY_PROBLEMS, options=[
                    {"label": " only tags with problems", "value": "only"}], value=[],
                    className="health-filter")]),
            html.P("QARTOD flags (IOOS): 1 pass · 2 not evaluated (n.e.) · 3 suspect · "
                   "4 fail · 9 missing. recv. = readings received of those expected from the "
                   "poll period.", className="muted small"),
            html.Div(id=HEALTH_TAGS, className="health-table-wrap")]),
    ])


def _feeds_table(rows: list[service.FeedRow]) -> Any:
    if not rows:
        return html.P("No feed has reported yet (the ingest service records each poll "
                      "cycle here).", className="health-none")
    head = ["Feed", "Status", "Last success", "Age", "Rate", "Lag", "Errors in a row",
            "Last error", "At"]
    return html.Table(className="grid-table health-table", children=[
        html.Thead(html.Tr([html.Th(h) for h in head])),
        html.Tbody([html.Tr(className=f"feed-{r.status}", children=[
            html.Td(r.feed), html.Td(r.status, className="health-status"),
            html.Td(r.last_success), html.Td(r.age, className="num"),
            html.Td(r.rate, className="num"), html.Td(r.lag, className="num"),
            html.Td(str(r.errors_in_a_row), className="num"),
            html.Td(r.last_error, className="health-error"), html.Td(r.last_error_at)])
            for r in rows])])


def _tags_table(rows: list[service.TagRow]) -> Any:
    if not rows:
        return html.P("No tag to show.", className="health-none")
    top = html.Tr([html.Th("", colSpan=7),
                   html.Th("last hour", colSpan=6, className="health-group"),
                   html.Th("last day", colSpan=6, className="health-group")])
    window = [html.Th(_FLAG_HEADS[f], className="num", title=QARTOD_FLAG_NAMES[f])
              for f in service.FLAGS] + [html.Th("recv.", className="num",
                                                 title="received of expected")]
    head = html.Tr([html.Th(h) for h in ("Tag", "Quantity", "Poll", "Last reading", "Age",
                                         "Value", "Flag")] + window + window)

    def counts(c: tuple[int, ...], received: str, gaps: bool = False) -> list:
        return [html.Td(str(n), className="num" + (" flag-bad" if n and i >= 2 else ""))
                for i, n in enumerate(c)] + [html.Td(received, className="num" + (
                    " flag-bad" if gaps else ""))]

    body = [html.Tr(className=f"tag-{r.status}", children=[
        html.Td(r.name), html.Td(r.quantity), html.Td(r.poll, className="num"),
        html.Td(r.last), html.Td(r.age, className="num"), html.Td(r.value, className="num"),
        html.Td(r.flag, className="health-status"),
        *counts(r.hour, r.hour_received, r.gaps), *counts(r.day, r.day_received)])
        for r in rows]
    return html.Table(className="grid-table health-table", children=[
        html.Thead([top, head]), html.Tbody(body)])


@callback(
    Output(HEALTH_FEEDS, "children"),
    Output(HEALTH_TAGS, "children"),
    Output(HEALTH_SUMMARY, "children"),
    Input(HEALTH_REFRESH, "n_intervals"),
    Input(HEALTH_ONLY_PROBLEMS, "value"),
)
def refresh(_n: int | None, only: list[str] | None) -> tuple[Any, Any, str]:
    """The feeds and tags tables for now."""
    auth.require("viewer")
    app = current()
    now = overview_service.now()
    feeds = service.feed_rows(app.site, app.engine, now)
    tags = service.tag_rows(app.site, app.engine, now)
    problems = [r for r in tags if r.problem]
    shown = problems if only and "only" in only else tags
    bad_feeds = [f for f in feeds if f.status != "ok"]
    summary = (f"{len(tags)} tags, {len(problems)} with problems; {len(feeds)} feeds, "
               f"{len(bad_feeds)} not ok")
    return _feeds_table(feeds), _tags_table(shown), summary

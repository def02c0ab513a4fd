"""Fishway profile: a to-scale side view with the measured and computed water surface, the
drops and power density against their limits, the auxiliary water, and pool details on click.

The computed surface is :meth:`ops_logic.ladder.Ladder.solve` at the newest usable forebay
and tailwater readings and the actuator positions (:mod:`dashboard.services.profile`). The
page refreshes every :data:`REFRESH_MS`; a refresh patches the trace data only.
"""

from __future__ import annotations

from typing import Any

import dash
from dash import Input, Output, State, callback, ctx, dcc, html, no_update

from dashboard import auth
from dashboard.context import current
from dashboard.controls import chosen_fishway, fishway_head, picker_inputs, refresh_timer
from dashboard.figures.profile import figure_patch, headline, profile_figure
from dashboard.services.profile import (
    ladder_in_force,
    live_state,
    local_time_text,
    now_utc,
    pool_details,
    solve_live,
)

dash.register_page(__name__, path="/profile", name="Profile", title="Fishway profile")

PROFILE_FISHWAY = "profile-fishway"
PROFILE_GRAPH = "profile-graph"
PROFILE_STATUS = "profile-status"
PROFILE_HEADLINE = "profile-headline"
PROFILE_DETAILS = "profile-details"
PROFILE_SELECTED = "profile-selected"
PROFILE_DRAWN = "profile-drawn"  # the fishway whose full figure the graph holds
PROFILE_REFRESH = "profile-refresh"

REFRESH_MS = 30_000
"""Refresh period: far longer than the callback (tens of milliseconds)."""

_HINT = "Click a pool in the side view (or a bar below it) for its details."


def layout(fishway: str | None = None, **_: Any) -> Any:
    denied = auth.guard()
    if denied is not None:
        return denied
    app = current()
    return html.Div(className="profile-page", children=[
        fishway_head(app, "Fishway profile", picker_id=PROFILE_FISHWAY,
                     status_id=PROFILE_STATUS, chosen=chosen_fishway(app, fishway)),
        html.Div(id=PROFILE_HEADLINE, className="bullets"),
        html.Div(className="profile-body", children=[
            dcc.Graph(id=PROFILE_GRAPH, className="profile-graph",
                      config={"displaylogo": False, "responsive": True}),
            html.Aside(id=PROFILE_DETAILS, className="panel profile-details",
                       children=html.P(_HINT)),
        ]),
        dcc.Store(id=PROFILE_SELECTED), dcc.Store(id=PROFILE_DRAWN),
        refresh_timer(PROFILE_REFRESH, REFRESH_MS),
    ])


def _status(state: Any, why: str | None) -> Any:
    app = current()
    parts: list[Any] = [html.Span(f"Levels as of {local_time_text(state.as_of, app)} "
                                  f"({app.site.site.time_zone})",
                                  className="stale" if state.stale else "")]
    parts += [html.Span(note, className="note") for note in state.notes]
    if why:
        parts.append(html.Span(f"No profile: {why}", className="abnormal"))
    return parts


@callback(Output(PROFILE_GRAPH, "figure"), Output(PROFILE_STATUS, "children"),
          Output(PROFILE_HEADLINE, "children"), Output(PROFILE_DRAWN, "data"),
          *picker_inputs(PROFILE_FISHWAY, PROFILE_REFRESH),
          State(PROFILE_SELECTED, "data"), State(PROFILE_DRAWN, "data"))
def render(fishway: str, _n: int | None, selected: dict | None,
           drawn: str | None = None) -> tuple[Any, Any, Any, Any]:
    """Draw the profile (a fishway change, or nothing drawn yet) or patch its data (a
    refresh of the fishway already drawn)."""
    app = current()
    ladder = ladder_in_force(app, fishway)  # the site file with supervisors' overrides
    state = live_state(app, fishway, now_utc())
    profile, why = solve_live(ladder, state)
    if profile is None:
        return {}, _status(state, why), [], None
    pick = selected.get("pool") if selected and selected.get("fishway") == fishway else None
    fig = profile_figure(ladder, profile, state.measured, app.units, selected=pick,
                         tolerance_m=ladder.fishway.alarms.gauge_disagree.limit_m)
    patch = ctx.triggered_id == PROFILE_REFRESH and drawn == fishway
    return ((figure_patch(fig) if patch else fig), _status(state, None),
            headline(ladder, profile, app.units), fishway)


@callback(Output(PROFILE_DETAILS, "children"), Output(PROFILE_SELECTED, "data"),
          Output(PROFILE_GRAPH, "figure", allow_duplicate=True),
          Input(PROFILE_GRAPH, "clickData"), State(PROFILE_FISHWAY, "value"),
          prevent_initial_call=True)
def select_pool(click: dict | None, fishway: str) -> tuple[Any, Any, Any]:
    """Show the clicked pool's details and outline it in the side view."""
    app = current()
    ladder = ladder_in_force(app, fishway)  # the site file with supervisors' overrides
    points = (click or {}).get("points") or []
    index = points[0].get("customdata") if points else None
    if isinstance(index, list):
        index = index[0] if index else None
    if not isinstance(index, int) or not 0 <= index < ladder.n_pools:
        return html.P(_HINT), no_update, no_update
    state = live_state(app, fishway, now_utc())
    profile, why = solve_live(ladder, state)
    if profile is None:
        return html.P(f"No profile: {why}", className="abnormal"), no_update, no_update
    rows = pool_details(ladder, profile, index, state, app.units)
    fig = profile_figure(ladder, profile, state.measured, app.units, selected=index,
                         tolerance_m=ladder.fishway.alarms.gauge_disagree.limit_m)
    details = [html.H2(f"Pool {profile.pools[index].id}"),
               html.Table(className="details", children=[html.Tbody([
                   html.Tr([html.Th(label), html.Td(value)]) for label, value in rows])])]
    return details, {"fishway": fishway, "pool": index}, figure_patch(fig)

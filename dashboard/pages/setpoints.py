"""Setpoints: current against recommended settings, their predicted effect on every criterion,
the binding constraint, one step to log the change, a what-if solve, and the printable
setpoint table (``/setpoint-table/<fishway>``, a sign-in-gated Flask route opened in a new tab).

Every setting shown carries the advisory caution beside it.
"""

from __future__ import annotations

from typing import Any

import dash
import flask
from dash import ALL, Input, Output, State, callback, dcc, html

from dashboard import auth
from dashboard.context import current
from dashboard.controls import chosen_fishway, fishway_head, picker_inputs, refresh_timer
from dashboard.figures.profile import profile_figure
from dashboard.services.profile import ladder_in_force, live_state, local_time_text, now_utc
from dashboard.services.setpoints import (
    CriterionRow,
    SetpointView,
    criteria_rows,
    criterion_label,
    log_link,
    setpoint_table_html,
    setpoint_view,
    setting_input_value,
    what_if,
)
from ops_logic.advisory import ADVISORY_CAUTION
from ops_logic.report_format import format_setting, format_value, setting_range_text
from ops_logic.units import UnitSystem, display_unit, from_si

dash.register_page(__name__, path="/setpoints", name="Setpoints", title="Setpoints")

SETPOINTS_FISHWAY = "setpoints-fishway"
SETPOINTS_STATUS = "setpoints-status"
SETPOINTS_SETTINGS = "setpoints-settings"
SETPOINTS_BINDING = "setpoints-binding"
SETPOINTS_CRITERIA = "setpoints-criteria"
SETPOINTS_LOG_LINK = "setpoints-log-link"
SETPOINTS_TABLE_LINK = "setpoints-table-link"
SETPOINTS_REFRESH = "setpoints-refresh"
SETPOINTS_WHATIF_FORM = "setpoints-whatif-form"
SETPOINTS_WHATIF_FOREBAY = "setpoints-whatif-forebay"
SETPOINTS_WHATIF_TAILWATER = "setpoints-whatif-tailwater"
SETPOINTS_WHATIF_SETTING = "setpoints-whatif-setting"  # pattern id type, with "name"
SETPOINTS_WHATIF_RUN = "setpoints-whatif-run"
SETPOINTS_WHATIF_RESULT = "setpoints-whatif-result"
SETPOINTS_WHATIF_GRAPH = "setpoints-whatif-graph"

REFRESH_MS = 60_000
TABLE_ROUTE = "/setpoint-table/<fishway>"


def _field(label: Any, control: Any) -> Any:
    return html.Label([label, control], className="field")


def layout(fishway: str | None = None, **_: Any) -> Any:
    denied = auth.guard()
    if denied is not None:
        return denied
    app = current()
    chosen = chosen_fishway(app, fishway)
    return html.Div(className="setpoints-page", children=[
        fishway_head(app, "Setpoints", picker_id=SETPOINTS_FISHWAY,
                     status_id=SETPOINTS_STATUS, chosen=chosen),
        html.Div(className="setpoints-top", children=[
            html.Section(className="panel", children=[
                html.H2("Settings: current and recommended"),
                html.Div(id=SETPOINTS_SETTINGS),
                html.Div(id=SETPOINTS_BINDING, className="binding"),
                html.Div(className="actions", children=[
                    dcc.Link("Log this change…", id=SETPOINTS_LOG_LINK, href="/log",
                             className="button primary"),
                    html.A("Setpoint table (print) ↗", id=SETPOINTS_TABLE_LINK,
                           href=f"/setpoint-table/{chosen}", target="_blank", rel="noopener",
                           className="button"),
                ]),
            ]),
            html.Aside(ADVISORY_CAUTION, className="caution-box setpoints-caution"),
        ]),
        html.Section(className="panel", children=[
            html.H2("Predicted effect on the criteria (at the newest levels)"),
            html.Div(id=SETPOINTS_CRITERIA),
        ]),
        html.Section(className="panel whatif", children=[
            html.H2("What if…"),
            html.P("Enter levels and settings in the site's units (or with a unit, such as "
                   "“77.3 m”) and predict the profile.", className="muted"),
            html.Div(id=SETPOINTS_WHATIF_FORM),
            html.Div(className="caution-box", children=ADVISORY_CAUTION),
            html.Div(id=SETPOINTS_WHATIF_RESULT),
            dcc.Graph(id=SETPOINTS_WHATIF_GRAPH, config={"displaylogo": False},
                      style={"display": "none"}),
        ]),
        refresh_timer(SETPOINTS_REFRESH, REFRESH_MS),
    ])


# -- tables ------------------------------------------------------------------------------------
def _value(value: float | None, kind: str, units: UnitSystem, ok: bool | None) -> Any:
    if value is None:
        return html.Td("—", className="num")
    return html.Td(format_value(value, kind, units, with_si=False),
                   className="num" + ("" if ok in (True, None) else " abnormal"))


def _band(r: CriterionRow, units: UnitSystem) -> str:
    def f(v: float) -> str:
        return format_value(v, r.kind, units, with_si=False)

    if r.min is not None and r.max is not None:
        return f"{f(r.min)} – {f(r.max)}"
    return f"≤ {f(r.max)}" if r.max is not None else f"≥ {f(r.min)}"  # type: ignore[arg-type]


def _verdict(r: CriterionRow) -> str:
    word = {True: "in", False: "OUT", None: "—"}
    if r.ok_before == r.ok_after:
        return word[r.ok_after]
    return f"{word[r.ok_before]} → {word[r.ok_after]}"


def criteria_table(rows: list[CriterionRow] | tuple[CriterionRow, ...], units: UnitSystem, *,
                   single: bool = False) -> Any:
    """The criteria as a table: band, now, after (``single``: one value column)."""
    head = ["Criterion", "Band", "Predicted"] if single else [
        "Criterion", "Band", "Now", "After the recommendation", "In band"]
    body = []
    for r in rows:
        cells = [html.Td(r.label), html.Td(_band(r, units), className="num")]
        if single:
            cells.append(_value(r.after, r.kind, units, r.ok_after))
        else:
            cells += [_value(r.before, r.kind, units, r.ok_before),
                      _value(r.after, r.kind, units, r.ok_after), html.Td(_verdict(r))]
        body.append(html.Tr(cells))
    return html.Table(className="grid-table criteria", children=[
        html.Thead(html.Tr([html.Th(h, className="num" if i in (1, 2, 3) else "")
                            for i, h in enumerate(head)])), html.Tbody(body)])


def _settings_table(view: SetpointView, units: UnitSystem) -> Any:
    body = []
    for r in view.settings:
        body.append(html.Tr(className="changed" if r.changed else "", children=[
            html.Td([r.label, html.Div(setting_range_text(r.spec, units),
                                       className="muted small")]),
            html.Td([format_setting(r.spec, r.current, units, with_si=False),
                     html.Div(r.current_source, className="muted small")], className="num"),
            html.Td(format_setting(r.spec, r.recommended, units, with_si=False),
                    className="num"),
            html.Td(_change_text(r, units) if r.changed else "no change", className="num"),
            html.Td(r.limited_by or ""),
        ]))
    return html.Table(className="grid-table settings", children=[
        html.Thead(html.Tr([html.Th("Setting"), html.Th("Current", className="num"),
                            html.Th("Recommended", className="num"),
                            html.Th("Change", className="num"), html.Th("Held by")])),
        html.Tbody(body)])


def _change_text(r: Any, units: UnitSystem) -> str:
    delta = r.recommended - r.current
    if r.spec.kind == "level":
        text = format_value(abs(delta), "length", units, with_si=False)
        return ("raise " if delta > 0 else "lower ") + text
    if r.spec.kind == "opening":
        return ("open " if delta > 0 else "close ") + f"{abs(delta):.1f} %"
    n = round(abs(delta))
    return ("start " if delta > 0 else "stop ") + f"{n} pump" + ("" if n == 1 else "s")


def _status(view: SetpointView) -> list[Any]:
    app = current()
    state = view.state
    if view.source == "stored":
        what = (f"Recommendation #{view.recommendation_id} stored "
                f"{local_time_text(view.made_at, app)}")
    elif view.source == "computed":
        what = "No stored recommendation: computed now by the dashboard from the newest levels"
    else:
        what = "No recommendation available"
    parts: list[Any] = [html.Span(what),
                        html.Span(f"levels as of {local_time_text(state.as_of, app)}",
                                  className="stale" if state.stale else "")]
    parts += [html.Span(n, className="note") for n in (*state.notes, *view.notes)]
    return parts


def _binding(view: SetpointView) -> Any:
    if view.binding is None and not view.reason:
        return ""
    verdict = {True: "All criteria can be met.", False: "No setting within reach meets every "
               "criterion.", None: ""}[view.feasible]
    return [html.P([html.Strong("Binding: "), criterion_label(view.binding or "—"), ". ",
                    html.Span(verdict, className="" if view.feasible is not False else
                              "abnormal")]),
            html.P(view.reason, className="muted")]


@callback(Output(SETPOINTS_STATUS, "children"), Output(SETPOINTS_SETTINGS, "children"),
          Output(SETPOINTS_BINDING, "children"), Output(SETPOINTS_CRITERIA, "children"),
          Output(SETPOINTS_LOG_LINK, "href"), Output(SETPOINTS_LOG_LINK, "children"),
          Output(SETPOINTS_TABLE_LINK, "href"),
          *picker_inputs(SETPOINTS_FISHWAY, SETPOINTS_REFRESH))
def render(fishway: str, _n: int | None) -> tuple[Any, ...]:
    """The settings, binding constraint, predicted criteria and the log link."""
    app = current()
    view = setpoint_view(app, fishway, now_utc())
    label = "Log this change…" if view.changes else "Log an adjustment…"
    return (_status(view), _settings_table(view, app.units), _binding(view),
            criteria_table(view.criteria, app.units), log_link(view), label,
            f"/setpoint-table/{fishway}")


# -- what-if -----------------------------------------------------------------------------------
@callback(Output(SETPOINTS_WHATIF_FORM, "children"), Input(SETPOINTS_FISHWAY, "value"))
def what_if_form(fishway: str) -> Any:
    """The what-if inputs, filled with the live levels and settings."""
    app = current()
    view = setpoint_view(app, fishway, now_utc())
    lu = display_unit("length", app.units)

    def level(v: float | None) -> str:
        return "" if v is None else f"{from_si(v, 'length', app.units):.2f}"

    fields = [_field(f"Forebay ({lu})", dcc.Input(id=SETPOINTS_WHATIF_FOREBAY,
                                                  value=level(view.state.forebay_m),
                                                  type="text", debounce=True)),
              _field(f"Tailwater ({lu})", dcc.Input(id=SETPOINTS_WHATIF_TAILWATER,
                                                    value=level(view.state.tailwater_m),
                                                    type="text", debounce=True))]
    for r in view.settings:
        unit = {"level": lu, "opening": "% open", "count": "pumps"}[r.spec.kind]
        fields.append(_field(f"{r.label} ({unit})", dcc.Input(
            id={"type": SETPOINTS_WHATIF_SETTING, "name": r.name}, type="text",
            value=setting_input_value(r.spec, r.current, app.units))))
    fields.append(html.Button("Predict", id=SETPOINTS_WHATIF_RUN, className="primary"))
    return html.Div(fields, className="whatif-form")


@callback(Output(SETPOINTS_WHATIF_RESULT, "children"), Output(SETPOINTS_WHATIF_GRAPH, "figure"),
          Output(SETPOINTS_WHATIF_GRAPH, "style"),
          Input(SETPOINTS_WHATIF_RUN, "n_clicks"), State(SETPOINTS_FISHWAY, "value"),
          State(SETPOINTS_WHATIF_FOREBAY, "value"), State(SETPOINTS_WHATIF_TAILWATER, "value"),
          State({"type": SETPOINTS_WHATIF_SETTING, "name": ALL}, "value"),
          State({"type": SETPOINTS_WHATIF_SETTING, "name": ALL}, "id"),
          prevent_initial_call=True)
def predict(_clicks: int | None, fishway: str, forebay: str | None, tailwater: str | None,
            values: list[str | None], ids: list[dict]) -> tuple[Any, Any, Any]:
    """Solve the what-if profile: criteria table and a small side view."""
    app = current()
    ladder = ladder_in_force(app, fishway)  # the site file with supervisors' overrides
    settings = {i["name"]: v for i, v in zip(ids, values, strict=True)}
    loss = live_state(app, fishway, now_utc()).trash_rack_loss_m  # the rack as it is now
    profile, problems = what_if(ladder, app.units, forebay, tailwater, settings,
                                trash_rack_loss_m=loss)
    if profile is None:
        return (html.Ul([html.Li(p) for p in problems], className="form-error"), {},
                {"display": "none"})
    rows = criteria_rows(None, profile)
    fig = profile_figure(ladder, profile, (), app.units, compact=True)
    summary = html.P(f"Predicted: {profile.reason}.",
                     className="" if profile.in_criteria else "abnormal")
    return [summary, criteria_table(rows, app.units, single=True)], fig, {"display": "block"}


# -- the printable setpoint table (Flask route) ------------------------------------------------
def _setpoint_table_route(fishway: str) -> flask.Response:
    if auth.current_user() is None:  # the sign-in gate already redirects; checked again here
        return flask.redirect(f"/login?next=/setpoint-table/{fishway}")
    app = current()
    if fishway not in app.ladders:
        flask.abort(404)
    return flask.Response(setpoint_table_html(app, fishway, now_utc()),
                          mimetype="text/html")


def _install_route() -> None:
    try:
        server = dash.get_app().server
    except Exception:  # imported outside an app (no server to serve the table from)
        return
    if "setpoint_table" not in server.view_functions:
        server.add_url_rule(TABLE_ROUTE, "setpoint_table", _setpoint_table_route)


_install_route()

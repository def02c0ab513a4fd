"""Operator log: record an adjustment, an observation (staff gauge, debris, fish at the
entrance), a shift note or a correction; list and filter the entries.

The log is append-only: a mistaken entry is corrected by a new entry that refers to it.
Writing needs the operator role, checked in the callback on the server
(:func:`dashboard.auth.require`): a viewer's request is refused with a message whatever the
browser sends. User text is shown as text (React escapes it), never as markup. The URL query
can fill the form (``/log?kind=adjustment&fishway=east&rec=7&set=<setting>:<from>:<to>``, SI
values), which is how the setpoints page hands over a recommended change.
"""

from __future__ import annotations

from typing import Any

import dash
from dash import ALL, Input, Output, State, callback, dcc, html, no_update

from dashboard import auth
from dashboard.context import current
from dashboard.services.log import (
    DEBRIS_PLACES,
    KINDS,
    TOPICS,
    LogForm,
    gauge_locations,
    list_entries,
    prefill,
    submit,
)
from dashboard.services.profile import fishway_options, now_utc
from ops_logic.advisory import ADVISORY_CAUTION
from ops_logic.report_format import setting_range_text
from ops_logic.units import display_unit

dash.register_page(__name__, path="/log", name="Operator log", title="Operator log")

LOG_KIND = "log-kind"
LOG_FISHWAY = "log-fishway"
LOG_WHEN = "log-when"
LOG_ADJ_SECTION = "log-adj-section"
LOG_ADJ_ROWS = "log-adj-rows"
LOG_ADJ_FROM = "log-adj-from"  # pattern id type, with "name" = setting name
LOG_ADJ_TO = "log-adj-to"
LOG_OBS_SECTION = "log-obs-section"
LOG_TOPIC = "log-topic"
LOG_GAUGE_SECTION = "log-gauge-section"
LOG_GAUGE_WHERE = "log-gauge-where"
LOG_GAUGE_READING = "log-gauge-reading"
LOG_DEBRIS_SECTION = "log-debris-section"
LOG_DEBRIS_PLACE = "log-debris-place"
LOG_CORR_SECTION = "log-corr-section"
LOG_REFERS_TO = "log-refers-to"
LOG_TEXT_LABEL = "log-text-label"
LOG_TEXT = "log-text"
LOG_SUBMIT = "log-submit"
LOG_FEEDBACK = "log-feedback"
LOG_REC = "log-rec"
LOG_VERSION = "log-version"
LOG_FILTER_FISHWAY = "log-filter-fishway"
LOG_FILTER_KINDS = "log-filter-kinds"
LOG_FILTER_AUTHOR = "log-filter-author"
LOG_FILTER_TEXT = "log-filter-text"
LOG_FILTER_PERIOD = "log-filter-period"
LOG_LIST = "log-list"
LOG_REFRESH = "log-refresh"

PERIODS = {"24": "24 h", "168": "7 days", "720": "30 days", "all": "all"}
_TEXT_LABELS = {"adjustment": "Why", "observation": "What was seen or done",
                "shift_note": "Note", "correction": "What is corrected, and the right facts"}


def _field(label: Any, control: Any) -> Any:
    return html.Label([label, control], className="field")


def _adjustment_rows(fishway: str, values: dict[str, tuple[str, str]]) -> Any:
    app = current()
    ladder = app.ladder(fishway)
    lu = display_unit("length", app.units)
    rows = []
    for name, spec in ladder.settings.items():
        unit = {"level": lu, "opening": "% open", "count": "pumps"}[spec.kind]
        a, b = values.get(name, ("", ""))
        rows.append(html.Tr([
            html.Td([spec.label, html.Div(setting_range_text(spec, app.units),
                                          className="muted small")]),
            html.Td(dcc.Input(id={"type": LOG_ADJ_FROM, "name": name}, value=a, type="text",
                              placeholder=unit, className="num-input")),
            html.Td(dcc.Input(id={"type": LOG_ADJ_TO, "name": name}, value=b, type="text",
                              placeholder=unit, className="num-input")),
            html.Td(unit, className="muted")]))
    return html.Table(className="grid-table adj", children=[
        html.Thead(html.Tr([html.Th("Actuator"), html.Th("From"), html.Th("To"), html.Th("")])),
        html.Tbody(rows)])


def layout(**query: Any) -> Any:
    denied = auth.guard()
    if denied is not None:
        return denied
    app = current()
    user = auth.current_user() or {}
    can_write = auth.has_role("operator", user)
    pre = prefill(app, query)
    fishway = str(pre["fishway"])
    ladder = app.ladder(fishway)
    places = gauge_locations(ladder)
    lu = display_unit("length", app.units)
    form = html.Section(className="panel log-form", children=[
        html.H2("New entry"),
        dcc.RadioItems(id=LOG_KIND, options=[{"label": v, "value": k} for k, v in KINDS.items()],
                       value=pre["kind"], inline=True, className="kind-choice"),
        html.Div(className="log-row", children=[
            _field("Fishway", dcc.Dropdown(id=LOG_FISHWAY, options=fishway_options(app),
                                           value=fishway, clearable=False)),
            _field("Time (site time; empty = now)",
                   dcc.Input(id=LOG_WHEN, type="text", value="",
                             placeholder="HH:MM or YYYY-MM-DD HH:MM")),
        ]),
        html.Div(id=LOG_ADJ_SECTION, children=[
            html.P("Enter the value each actuator was moved to (and from); leave the rest "
                   "empty.", className="muted"),
            html.Div(id=LOG_ADJ_ROWS, children=_adjustment_rows(
                fishway, pre["adjustments"])),  # type: ignore[arg-type]
            html.Div(ADVISORY_CAUTION, className="caution-box"),
        ]),
        html.Div(id=LOG_OBS_SECTION, children=[
            dcc.RadioItems(id=LOG_TOPIC, options=[{"label": v, "value": k}
                                                  for k, v in TOPICS.items()],
                           value="staff_gauge", inline=True),
            html.Div(id=LOG_GAUGE_SECTION, className="log-row", children=[
                _field("Staff gauge at", dcc.Dropdown(
                    id=LOG_GAUGE_WHERE, options=[{"label": b, "value": a} for a, b in places],
                    value=places[-1][0], clearable=False)),
                _field(f"Reading ({lu})", dcc.Input(id=LOG_GAUGE_READING, type="text",
                                                    value="", placeholder=lu)),
            ]),
            html.Div(id=LOG_DEBRIS_SECTION, className="log-row", children=[
                _field("Cleaned at", dcc.Dropdown(
                    id=LOG_DEBRIS_PLACE, options=list(DEBRIS_PLACES), value=DEBRIS_PLACES[0],
                    clearable=False)),
            ]),
        ]),
        html.Div(id=LOG_CORR_SECTION, className="log-row", children=[
            _field("Corrects entry #", dcc.Input(id=LOG_REFERS_TO, type="text",
                                                 value=pre["refers_to"])),
        ]),
        _field(html.Span(id=LOG_TEXT_LABEL), dcc.Textarea(
            id=LOG_TEXT, value=str(pre.get("text", "")), rows=3, maxLength=4000,
            className="log-text")),
        html.Div(className="actions", children=[
            html.Button("Save entry", id=LOG_SUBMIT, className="primary",
                        disabled=not can_write),
            html.Span(f"Signed in as {user.get('name')} ({user.get('role')}): "
                      + ("entries are recorded under your name." if can_write else
                         "read-only; writing needs the operator role."), className="muted"),
        ]),
        html.Div(id=LOG_FEEDBACK, className="feedback", role="status"),
        dcc.Store(id=LOG_REC, data=pre["rec"]),
        dcc.Store(id=LOG_VERSION, data=0),
    ])
    listing = html.Section(className="panel", children=[
        html.H2("Entries"),
        html.Div(className="log-row filters", children=[
            _field("Fishway", dcc.Dropdown(
                id=LOG_FILTER_FISHWAY, options=[{"label": "All", "value": ""},
                                                *fishway_options(app)], value="",
                clearable=False)),
            _field("Kinds", dcc.Checklist(
                id=LOG_FILTER_KINDS, options=[{"label": v, "value": k}
                                              for k, v in KINDS.items()],
                value=list(KINDS), inline=True)),
            _field("Author", dcc.Input(id=LOG_FILTER_AUTHOR, type="text", value="",
                                       debounce=True)),
            _field("Text contains", dcc.Input(id=LOG_FILTER_TEXT, type="text", value="",
                                              debounce=True)),
            _field("Period", dcc.RadioItems(
                id=LOG_FILTER_PERIOD, options=[{"label": v, "value": k}
                                               for k, v in PERIODS.items()],
                value="168", inline=True)),
        ]),
        html.Div(id=LOG_LIST),
        dcc.Interval(id=LOG_REFRESH, interval=60_000),
    ])
    return html.Div(className="log-page", children=[
        html.Div(className="page-head", children=[html.H1("Operator log")]), form, listing])


_SHOW, _HIDE = {"display": "block"}, {"display": "none"}


@callback(Output(LOG_ADJ_SECTION, "style"), Output(LOG_OBS_SECTION, "style"),
          Output(LOG_CORR_SECTION, "style"), Output(LOG_GAUGE_SECTION, "style"),
          Output(LOG_DEBRIS_SECTION, "style"), Output(LOG_TEXT_LABEL, "children"),
          Input(LOG_KIND, "value"), Input(LOG_TOPIC, "value"))
def show_fields(kind: str, topic: str) -> tuple[Any, ...]:
    """Show the fields of the chosen kind (and observation topic)."""
    flex = {"display": "flex"}
    label = _TEXT_LABELS.get(kind, "Text")
    if kind == "observation" and topic == "staff_gauge":
        label = "Remarks (optional)"
    return (_SHOW if kind == "adjustment" else _HIDE, _SHOW if kind == "observation" else _HIDE,
            flex if kind == "correction" else _HIDE,
            flex if topic == "staff_gauge" else _HIDE, flex if topic == "debris" else _HIDE,
            label)


@callback(Output(LOG_ADJ_ROWS, "children"), Output(LOG_GAUGE_WHERE, "options"),
          Output(LOG_GAUGE_WHERE, "value"), Input(LOG_FISHWAY, "value"),
          prevent_initial_call=True)
def fishway_fields(fishway: str) -> tuple[Any, Any, Any]:
    """The actuators and staff gauges of another fishway."""
    places = gauge_locations(current().ladder(fishway))
    return (_adjustment_rows(fishway, {}), [{"label": b, "value": a} for a, b in places],
            places[-1][0])


@callback(Output(LOG_FEEDBACK, "children"), Output(LOG_FEEDBACK, "className"),
          Output(LOG_VERSION, "data"), Output(LOG_TEXT, "value"),
          Output(LOG_GAUGE_READING, "value"), Output(LOG_REC, "data"),
          Output({"type": LOG_ADJ_TO, "name": ALL}, "value"),
          Output({"type": LOG_ADJ_FROM, "name": ALL}, "value"),
          Input(LOG_SUBMIT, "n_clicks"),
          State(LOG_KIND, "value"), State(LOG_FISHWAY, "value"), State(LOG_WHEN, "value"),
          State(LOG_TEXT, "value"), State(LOG_TOPIC, "value"), State(LOG_GAUGE_WHERE, "value"),
          State(LOG_GAUGE_READING, "value"), State(LOG_DEBRIS_PLACE, "value"),
          State(LOG_REFERS_TO, "value"), State(LOG_REC, "data"),
          State({"type": LOG_ADJ_FROM, "name": ALL}, "value"),
          State({"type": LOG_ADJ_TO, "name": ALL}, "value"),
          State({"type": LOG_ADJ_TO, "name": ALL}, "id"), State(LOG_VERSION, "data"),
          prevent_initial_call=True)
def save(_clicks: int | None, kind: str, fishway: str, when: str | None, text: str | None,
         topic: str, where: str | None, reading: str | None, place: str | None,
         refers_to: str | None, rec: int | None, froms: list[str | None],
         tos: list[str | None], to_ids: list[dict], version: int | None) -> tuple[Any, ...]:
    """Store the entry as the signed-in operator (refused, with the reason, for any other
    role or without a session)."""
    keep = [no_update] * len(tos)
    try:
        user = auth.require("operator")
    except auth.PermissionDenied as exc:
        return (f"Not saved: {exc}.", "feedback error", no_update, no_update, no_update,
                no_update, keep, keep)
    adjustments = {i["name"]: (a or "", b or "")
                   for i, a, b in zip(to_ids, froms, tos, strict=True)}
    form = LogForm(kind=kind, fishway_id=fishway, when=when or "", text=text or "",
                   topic=topic, gauge_where=where, gauge_reading=reading or "",
                   debris_place=place, adjustments=adjustments, refers_to=refers_to or "",
                   recommendation_id=rec if isinstance(rec, int) else None)
    result = submit(current(), user["name"], form, now_utc())
    if not result.ok:
        return (html.Ul([html.Li(p) for p in result.problems]), "feedback error", no_update,
                no_update, no_update, no_update, keep, keep)
    if kind == "adjustment":  # the actuators now stand where they were moved to
        cleared = [""] * len(tos)
        moved = [b if (b or "").strip() else (a or "") for a, b in zip(froms, tos, strict=True)]
    else:
        cleared = moved = keep
    return (" ".join(result.messages), "feedback ok", (version or 0) + 1, "", "",
            None if kind == "adjustment" else no_update, cleared, moved)


def _entry_row(e: Any, can_write: bool = True) -> Any:
    details: list[Any] = [e.details] if e.details else []
    if e.flagged:
        details += [" ", html.Span("FLAGGED: differs from the sensor", className="flag-badge")]
    if e.corrected_by:
        details += [html.Div("corrected by " + ", ".join(f"#{i}" for i in e.corrected_by),
                             className="muted small")]
    return html.Tr(className="corrected" if e.corrected_by else "", children=[
        html.Td(f"#{e.id}", className="num"), html.Td(e.when), html.Td(e.author),
        html.Td(e.kind), html.Td(e.fishway), html.Td(details),
        html.Td(e.text, className="log-entry-text"),
        html.Td(dcc.Link("correct…", href=f"/log?kind=correction&refers_to={e.id}")
                if can_write else "")])


@callback(Output(LOG_LIST, "children"), Input(LOG_FILTER_FISHWAY, "value"),
          Input(LOG_FILTER_KINDS, "value"), Input(LOG_FILTER_AUTHOR, "value"),
          Input(LOG_FILTER_TEXT, "value"), Input(LOG_FILTER_PERIOD, "value"),
          Input(LOG_VERSION, "data"), Input(LOG_REFRESH, "n_intervals"))
def show_entries(fishway: str, kinds: list[str], author: str | None, text: str | None,
                 period: str, _version: int | None, _n: int | None) -> Any:
    """The filtered entries, newest first."""
    if not kinds:
        return html.P("Choose at least one kind.", className="muted")
    entries = list_entries(current(), now_utc(), fishway_id=fishway or None, kinds=kinds,
                           author=author, text=text,
                           period_h=None if period == "all" else float(period))
    if not entries:
        return html.P("No entries match.", className="muted")
    head = html.Thead(html.Tr([html.Th(h) for h in ("#", "Time", "Author", "Kind", "Fishway",
                                                    "Details", "Text", "")]))
    can_write = auth.has_role("operator")
    return html.Table(className="grid-table log-list", children=[
        head, html.Tbody([_entry_row(e, can_write) for e in entries])])

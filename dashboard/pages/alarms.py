"""Alarms (``/alarms``): the active alarms with acknowledge, shelve and service actions and
the fishway modes; the alarm history with CSV export; the alarm-system performance figures.

Every write callback checks the role on the server first (``auth.require("operator")``) and
hands the signed-in user's name to :class:`db.alarm.service.AlarmService` (through
:mod:`dashboard.services.alarms`), which checks it again; a viewer sees everything, and a
click on an action is refused with the reason. Read callbacks need a session too (Dash's
routes are open; each callback checks). Colour is used for alarms needing attention only
(ANSI/ISA-101); the palette is in ``assets/style.css`` ("Alarms page"). Text that users or
the engine wrote is shown as text, never as markup.
"""

from __future__ import annotations

import hashlib
from typing import Any

import dash
from dash import ALL, Input, Output, Patch, State, callback, ctx, dcc, html, no_update

from dashboard import auth
from dashboard.context import current
from dashboard.figures.alarms import priority_figure, rate_figure, top10_figure
from dashboard.services import alarms as service
from dashboard.services.profile import now_utc
from ops_logic.advisory import ADVISORY_CAUTION
from ops_logic.alarms.config import RULE_NAMES
from ops_logic.alarms.performance import TOP10_TARGET_PCT

dash.register_page(__name__, path="/alarms", name="Alarms", title="Alarms")

ALARMS_TABS = "alarms-tabs"
ALARMS_REFRESH = "alarms-refresh"
ALARMS_VERSION = "alarms-version"
ALARMS_SELECTED = "alarms-selected"
ALARMS_EXPANDED = "alarms-expanded"
ALARMS_SORT = "alarms-sort"
ALARMS_SIG = "alarms-sig"
ALARMS_SORT_BY = "alarms-sort-by"  # pattern id type, with "col"
ALARMS_PICK = "alarms-pick"  # pattern id type, with "key"
ALARMS_EXPAND = "alarms-expand"  # pattern id type, with "key"
ALARMS_TABLE = "alarms-table"
ALARMS_SUMMARY = "alarms-summary"
ALARMS_FLOOD = "alarms-flood"
ALARMS_PROBLEM = "alarms-problem"
ALARMS_FILTER_FISHWAY = "alarms-filter-fishway"
ALARMS_FILTER_PRIORITY = "alarms-filter-priority"
ALARMS_FILTER_SHOW = "alarms-filter-show"
ALARMS_FILTER_TEXT = "alarms-filter-text"
ALARMS_SELECT_ALL = "alarms-select-all"
ALARMS_SELECT_NONE = "alarms-select-none"
ALARMS_SELECTED_TEXT = "alarms-selected-text"
ALARMS_ACK = "alarms-ack"
ALARMS_SHELVE = "alarms-shelve"
ALARMS_UNSHELVE = "alarms-unshelve"
ALARMS_OOS = "alarms-oos"
ALARMS_RTS = "alarms-rts"
ALARMS_REASON = "alarms-reason"
ALARMS_DURATION = "alarms-duration"
ALARMS_FEEDBACK = "alarms-feedback"
ALARMS_MODE_FISHWAY = "alarms-mode-fishway"
ALARMS_MODE = "alarms-mode"
ALARMS_MODE_REASON = "alarms-mode-reason"
ALARMS_MODE_APPLY = "alarms-mode-apply"
ALARMS_MODE_STATUS = "alarms-mode-status"
ALARMS_MODE_FEEDBACK = "alarms-mode-feedback"
ALARMS_HIST_PERIOD = "alarms-hist-period"
ALARMS_HIST_FROM = "alarms-hist-from"
ALARMS_HIST_TO = "alarms-hist-to"
ALARMS_HIST_FISHWAY = "alarms-hist-fishway"
ALARMS_HIST_PRIORITY = "alarms-hist-priority"
ALARMS_HIST_RULE = "alarms-hist-rule"
ALARMS_HIST_STATE = "alarms-hist-state"
ALARMS_HIST_TABLE = "alarms-hist-table"
ALARMS_HIST_NOTE = "alarms-hist-note"
ALARMS_HIST_CSV = "alarms-hist-csv"
ALARMS_HIST_CSV_NOTE = "alarms-hist-csv-note"
ALARMS_HIST_DOWNLOAD = "alarms-hist-download"
ALARMS_PERF_PERIOD = "alarms-perf-period"
ALARMS_PERF_FROM = "alarms-perf-from"
ALARMS_PERF_TO = "alarms-perf-to"
ALARMS_PERF_FISHWAY = "alarms-perf-fishway"
ALARMS_PERF_NOTE = "alarms-perf-note"
ALARMS_PERF_TABLE = "alarms-perf-table"
ALARMS_PERF_RATE = "alarms-perf-rate"
ALARMS_PERF_TOP = "alarms-perf-top"
ALARMS_PERF_PRIORITY = "alarms-perf-priority"

REFRESH_MS = 15_000
PERIODS = {"1": "1 h", "8": "8 h", "24": "24 h", "168": "7 days", "720": "30 days",
           "custom": "from – to"}
_TITLES = {"value": "The value judged when the alarm last changed state (alarm rows are "
                    "stored at each change, not at every evaluation)",
           "since": "When the condition last became active (site time)"}
COLUMNS = (("priority", "Priority"), ("state", "State"), ("fishway", "Fishway"),
           ("alarm", "Alarm and message"), ("value", "Value at change"), ("since", "Active since"),
           ("acknowledged", "Acknowledged"))
_BUTTON_ACTION = {ALARMS_ACK: "acknowledge", ALARMS_SHELVE: "shelve",
                  ALARMS_UNSHELVE: "unshelve", ALARMS_OOS: "remove_from_service",
                  ALARMS_RTS: "return_to_service"}
_PRIORITIES = [{"label": " High", "value": 1}, {"label": " Medium", "value": 2},
               {"label": " Low", "value": 3}]


def _field(label: Any, control: Any, cls: str = "field") -> html.Label:
    return html.Label([label, control], className=cls)


def _fishway_options(site_wide: bool = True) -> list[dict[str, str]]:
    opts = [{"label": "All", "value": ""}]
    opts += [{"label": f.name, "value": f.id} for f in current().site.fishways]
    return opts + ([{"label": "Site (feeds)", "value": service.SITE_WIDE}] if site_wide else [])


def _period_controls(period: str, from_id: str, to_id: str, value: str) -> list[Any]:
    return [
        _field("Period", dcc.RadioItems(id=period, options=[{"label": f" {v}", "value": k}
                                                            for k, v in PERIODS.items()],
                                        value=value, inline=True, className="al-radio")),
        _field("From (site time)", dcc.Input(id=from_id, type="text", debounce=True,
                                             placeholder="YYYY-MM-DD HH:MM",
                                             className="al-input al-time")),
        _field("To (empty = now)", dcc.Input(id=to_id, type="text", debounce=True,
                                             placeholder="YYYY-MM-DD HH:MM",
                                             className="al-input al-time")),
    ]


def _active_tab(user: dict, can_act: bool) -> html.Div:
    site = current().site
    shelve = service.shelve_choices(current())
    actions = html.Section(className="panel al-actions", children=[
        html.H2("Selected alarms"),
        html.Div(id=ALARMS_SELECTED_TEXT, className="al-selected", children="none selected"),
        html.Div(className="actions", children=[
            html.Button("Acknowledge", id=ALARMS_ACK, className="primary al-ack")]),
        _field("Reason (shelving and out of service need one)",
               dcc.Input(id=ALARMS_REASON, type="text", maxLength=300, className="al-input")),
        _field("Shelve for", dcc.Dropdown(
            id=ALARMS_DURATION, options=[{"label": t, "value": s} for s, t in shelve],
            value=shelve[min(2, len(shelve) - 1)][0], clearable=False)),
        html.Div(className="actions", children=[
            html.Button("Shelve", id=ALARMS_SHELVE), html.Button("Unshelve", id=ALARMS_UNSHELVE)]),
        html.Div(className="actions", children=[
            html.Button("Out of service", id=ALARMS_OOS),
            html.Button("Return to service", id=ALARMS_RTS)]),
        html.Div(id=ALARMS_FEEDBACK, className="feedback", role="status"),
        html.P(f"Signed in as {user.get('name')} ({user.get('role')}): " + (
            "actions are recorded under your name." if can_act else
            "read only; acknowledging, shelving and modes need the operator role, and the "
            "server refuses them."), className="muted small"),
    ])
    modes = html.Section(className="panel al-modes", children=[
        html.H2("Fishway mode"),
        html.Div(id=ALARMS_MODE_STATUS),
        _field("Fishway", dcc.Dropdown(id=ALARMS_MODE_FISHWAY, clearable=False,
                                       options=[{"label": f.name, "value": f.id}
                                                for f in site.fishways],
                                       value=site.fishways[0].id)),
        dcc.RadioItems(id=ALARMS_MODE, options=[{"label": f" {v}", "value": k}
                                                for k, v in service.MODE_LABELS.items()],
                       value=None, className="al-mode-choice"),
        _field("Reason", dcc.Input(id=ALARMS_MODE_REASON, type="text", maxLength=300,
                                   className="al-input")),
        html.Div(className="actions", children=[
            html.Button("Set mode", id=ALARMS_MODE_APPLY, className="primary")]),
        html.Div(id=ALARMS_MODE_FEEDBACK, className="feedback", role="status"),
        html.P("Maintenance (dewatered) and out of service suppress by design the alarms "
               "whose rules name that mode; put the ladder back in operation before it is "
               "watered up for fish.", className="muted small"),
        html.Div(ADVISORY_CAUTION, className="caution-box small"),
    ])
    listing = html.Section(className="panel al-list", children=[
        html.Div(className="al-filters", children=[
            _field("Fishway", dcc.Dropdown(id=ALARMS_FILTER_FISHWAY, options=_fishway_options(),
                                           value="", clearable=False)),
            _field("Priority", dcc.Checklist(id=ALARMS_FILTER_PRIORITY, options=_PRIORITIES,
                                             value=[1, 2, 3], inline=True,
                                             className="al-check")),
            _field("Show", dcc.Checklist(
                id=ALARMS_FILTER_SHOW, options=[{"label": f" {v}", "value": k}
                                                for k, v in service.SHOW_GROUPS.items()],
                value=list(service.SHOW_GROUPS), inline=True, className="al-check")),
            _field("Contains", dcc.Input(id=ALARMS_FILTER_TEXT, type="text", debounce=True,
                                         className="al-input")),
        ]),
        html.Div(className="actions al-select", children=[
            html.Button("Select all shown", id=ALARMS_SELECT_ALL),
            html.Button("Clear selection", id=ALARMS_SELECT_NONE)]),
        html.Div(id=ALARMS_TABLE, className="al-table-wrap"),
    ])
    return html.Div(className="al-body", children=[listing, html.Div([actions, modes])])


def _history_tab() -> html.Div:
    return html.Div(className="panel al-history", children=[
        html.Div(className="al-filters", children=[
            *_period_controls(ALARMS_HIST_PERIOD, ALARMS_HIST_FROM, ALARMS_HIST_TO, "24"),
            _field("Fishway", dcc.Dropdown(id=ALARMS_HIST_FISHWAY, options=_fishway_options(),
                                           value="", clearable=False)),
            _field("Priority", dcc.Dropdown(
                id=ALARMS_HIST_PRIORITY, value="", clearable=False,
                options=[{"label": "All", "value": ""}] + [
                    {"label": p.title(), "value": p} for p in ("high", "medium", "low")])),
            _field("Rule", dcc.Dropdown(
                id=ALARMS_HIST_RULE, value="", clearable=False,
                options=[{"label": "All", "value": ""}] + [
                    {"label": service.RULE_LABELS.get(r, r), "value": r} for r in RULE_NAMES])),
            _field("State after", dcc.Dropdown(
                id=ALARMS_HIST_STATE, value="", clearable=False,
                options=[{"label": "All", "value": ""}] + [
                    {"label": v, "value": k} for k, v in service.STATE_TEXT.items()])),
        ]),
        html.Div(className="actions", children=[
            html.Button("Export CSV", id=ALARMS_HIST_CSV),
            html.Span(id=ALARMS_HIST_CSV_NOTE, className="muted")]),
        dcc.Download(id=ALARMS_HIST_DOWNLOAD),
        html.Div(id=ALARMS_HIST_NOTE, className="muted"),
        html.Div(id=ALARMS_HIST_TABLE, className="al-table-wrap"),
    ])


def _performance_tab() -> html.Div:
    graph = {"displaylogo": False, "responsive": True}
    return html.Div(className="al-perf", children=[
        html.Div(className="panel al-filters", children=[
            *_period_controls(ALARMS_PERF_PERIOD, ALARMS_PERF_FROM, ALARMS_PERF_TO, "24"),
            _field("Fishway", dcc.Dropdown(id=ALARMS_PERF_FISHWAY,
                                           options=_fishway_options(site_wide=False),
                                           value="", clearable=False)),
        ]),
        html.Div(id=ALARMS_PERF_NOTE, className="muted"),
        html.Div(className="al-perf-grid", children=[
            html.Div(className="panel", children=[
                html.H2("Figures and targets (EEMUA 191, ISA-18.2)"),
                html.Div(id=ALARMS_PERF_TABLE)]),
            html.Div(className="panel", children=[dcc.Graph(id=ALARMS_PERF_RATE, config=graph)]),
            html.Div(className="panel", children=[dcc.Graph(id=ALARMS_PERF_TOP, config=graph)]),
            html.Div(className="panel", children=[
                dcc.Graph(id=ALARMS_PERF_PRIORITY, config=graph)]),
        ]),
    ])


def layout(**_query: Any) -> Any:
    denied = auth.guard()
    if denied is not None:
        return denied
    user = auth.current_user() or {}
    can_act = auth.has_role("operator", user)
    return html.Div(className="alarms-page", children=[
        html.Div(className="page-head", children=[
            html.H1("Alarms"), html.Div(id=ALARMS_SUMMARY, className="al-summary")]),
        html.Div(id=ALARMS_PROBLEM, className="al-problem is-hidden", role="alert"),
        html.Div(id=ALARMS_FLOOD, className="al-flood is-hidden", role="alert"),
        dcc.Tabs(id=ALARMS_TABS, value="active", className="al-tabs", children=[
            dcc.Tab(label=label, value=value, children=content, className="al-tab",
                    selected_className="al-tab--selected")
            for label, value, content in (("Active alarms", "active", _active_tab(user, can_act)),
                                          ("History", "history", _history_tab()),
                                          ("Performance", "performance", _performance_tab()))
        ]),
        dcc.Store(id=ALARMS_VERSION, data=0), dcc.Store(id=ALARMS_SELECTED, data=[]),
        dcc.Store(id=ALARMS_EXPANDED, data=[]), dcc.Store(id=ALARMS_SORT, data={}),
        dcc.Store(id=ALARMS_SIG, data={}),
        dcc.Interval(id=ALARMS_REFRESH, interval=REFRESH_MS),
    ])


# -- the active list -----------------------------------------------------------------------
def _header(sort: dict) -> html.Thead:
    cells: list[Any] = [html.Th("", className="al-pick-col")]
    for col, label in COLUMNS:
        mark = (" ▼" if sort.get("desc") else " ▲") if sort.get("col") == col else ""
        title = f"Sort by {label.lower()}" + (f". {_TITLES[col]}" if col in _TITLES else "")
        cells.append(html.Th(html.Button(label + mark, id={"type": ALARMS_SORT_BY, "col": col},
                                         className="al-sort", title=title)))
    return html.Thead(html.Tr(cells))


def _row(r: service.AlarmRow, depth: int, selected: set[str], expanded: set[str]) -> html.Tr:
    alarm: list[Any] = [html.Span(r.label, className="al-name")]
    if r.children:
        open_ = r.key in expanded
        alarm.append(html.Button(f"{len(r.children)} grouped {'▾' if open_ else '▸'}",
                                 id={"type": ALARMS_EXPAND, "key": r.key},
                                 className="al-expand", title="Show the alarms grouped "
                                 "under this one" if not open_ else "Hide them"))
    alarm.append(html.Div(r.message, className="al-message"))
    prio = "CRITICAL" if r.priority_name == "critical" else r.priority_name.upper()
    cls = f"al-row al-{r.look}" + (" al-child" if depth else "")
    return html.Tr(className=cls, **{"data-key": r.key}, children=[
        html.Td(dcc.Checklist(id={"type": ALARMS_PICK, "key": r.key},
                              options=[{"label": "", "value": r.key}],
                              value=[r.key] if r.key in selected else [], className="al-pick")),
        html.Td(html.Span(prio, className=f"al-pri al-p{r.priority} al-{r.look}")),
        html.Td(r.state_text, className="al-state"), html.Td(r.fishway, className="al-nowrap"),
        html.Td(alarm, className="al-alarm"), html.Td(r.value_text, className="num al-value"),
        html.Td(r.since_text, className="num al-nowrap"),
        html.Td(r.acknowledged, className="al-nowrap")])


def _summary(view: service.ActiveView) -> list[Any]:
    chips = []
    for p, name in ((1, "High"), (2, "Medium"), (3, "Low")):
        n = view.attention[p]
        chips.append(html.Span(className="al-chip", children=[
            html.Span(name, className="al-chip-label"),
            html.Span(str(n), className=f"al-count al-p{p} al-unack" if n else
                      "al-count is-zero")]))
    c = view.counts
    text = (f"to acknowledge {c['attention']} · acknowledged {c['acknowledged']} · "
            f"shelved {c['shelved']} · suppressed {c['suppressed']} · out of service "
            f"{c['out_of_service']} · grouped {c['grouped']}")
    quiet = sum(view.quiet_suppressed.values())
    if quiet:
        text += f" · {quiet} more suppressed by design (fishway mode, condition clear)"
    return [html.Div(chips, className="al-chips"), html.Span(text, className="muted"),
            html.Span(f"evaluated {view.evaluated_text}", className="muted al-evaluated")]


def _modes(view: service.ActiveView) -> html.Table:
    site = current().site
    return html.Table(className="grid-table al-mode-table", children=[html.Tbody([
        html.Tr([html.Td(f.name), html.Td(
            service.MODE_LABELS.get(view.modes[f.id], view.modes[f.id]),
            className="al-mode-normal" if view.modes[f.id] == "operating" else "al-mode-off")])
        for f in site.fishways])])


def _digest(obj: object) -> str:
    return hashlib.sha1(repr(obj).encode()).hexdigest()


def table_update(rows: list[tuple[service.AlarmRow, int]], any_alarms: bool, sort: dict,
                 expanded: list[str], selected: list[str], version: int | None,
                 sig: dict | None) -> tuple[Any, dict]:
    """The table's new content and signature. When the same alarms are listed in the same
    order as last time, only the rows whose content changed are sent (a ``dash.Patch`` of
    those rows; ``no_update`` when none did); otherwise the whole table."""
    opened, chosen = set(expanded), set(selected)
    frame = _digest((sort, sorted(opened), version, [(r.key, d) for r, d in rows]))
    row_sigs = [_digest((r, d, r.key in opened)) for r, d in rows]
    new = {"frame": frame, "rows": row_sigs}
    old = sig or {}
    if old.get("frame") == frame and not rows:
        return no_update, new
    if rows and old.get("frame") == frame and len(old.get("rows", [])) == len(rows):
        changed = [i for i, (a, b) in enumerate(zip(old["rows"], row_sigs, strict=True))
                   if a != b]
        if not changed:
            return no_update, new
        patch = Patch()
        for i in changed:
            r, d = rows[i]
            patch["props"]["children"][1]["props"]["children"][i] = _row(r, d, chosen, opened)
        return patch, new
    if not rows:
        return html.P("No alarms match." if any_alarms else "No active alarms.",
                      className="al-none"), new
    return html.Table(className="grid-table al-table", children=[
        _header(sort), html.Tbody([_row(r, d, chosen, opened) for r, d in rows])]), new


@callback(Output(ALARMS_TABLE, "children"), Output(ALARMS_SIG, "data"),
          Output(ALARMS_SUMMARY, "children"), Output(ALARMS_FLOOD, "children"),
          Output(ALARMS_FLOOD, "className"), Output(ALARMS_PROBLEM, "children"),
          Output(ALARMS_PROBLEM, "className"), Output(ALARMS_MODE_STATUS, "children"),
          Input(ALARMS_REFRESH, "n_intervals"), Input(ALARMS_VERSION, "data"),
          Input(ALARMS_FILTER_FISHWAY, "value"), Input(ALARMS_FILTER_PRIORITY, "value"),
          Input(ALARMS_FILTER_SHOW, "value"), Input(ALARMS_FILTER_TEXT, "value"),
          Input(ALARMS_SORT, "data"), Input(ALARMS_EXPANDED, "data"),
          State(ALARMS_SELECTED, "data"), State(ALARMS_SIG, "data"))
def refresh(_n: int | None, _version: int | None, fishway: str | None,
            priorities: list[int] | None, shows: list[str] | None, text: str | None,
            sort: dict | None, expanded: list[str] | None, selected: list[str] | None,
            sig: dict | None) -> tuple[Any, ...]:
    """The active list, summary, flood banner and modes; of the table only what changed is
    sent (:func:`table_update`)."""
    if auth.current_user() is None:
        return (html.P("Sign in to see the alarms."), {}, "", "", "al-flood is-hidden", "",
                "al-problem is-hidden", "")
    app = current()
    view = service.active_view(app, now_utc())
    rows = service.visible_rows(view, fishway=fishway or "", priorities=priorities or [],
                                shows=shows or [], text=text or "", sort=sort or {},
                                expanded=expanded or [])
    table, new_sig = table_update(rows, bool(view.rows), sort or {}, expanded or [],
                                  selected or [], _version, sig)
    flood, flood_cls = "", "al-flood is-hidden"
    if view.flood is not None:
        f = view.flood
        flood = [html.Strong("ALARM FLOOD"), f" since {f.started_text}: {f.count} alarms "
                 f"({f.window_count} in the last 10 min). First out: ",
                 html.Strong(f.first_out), ". Deal with the first-out alarm first."]
        flood_cls = "al-flood"
    problem = view.problem or ""
    return (table, new_sig, _summary(view), flood, flood_cls, problem,
            "al-problem" if problem else "al-problem is-hidden", _modes(view))


@callback(Output(ALARMS_SELECTED, "data"), Output(ALARMS_SELECTED_TEXT, "children"),
          Input({"type": ALARMS_PICK, "key": ALL}, "value"))
def pick(values: list[list[str] | None]) -> tuple[list[str], str]:
    """The keys of the ticked rows."""
    keys = sorted({k for v in values or [] for k in (v or [])})
    if not keys:
        return [], "none selected"
    return keys, f"{len(keys)} selected: " + ", ".join(keys[:4]) + (" …" if len(keys) > 4
                                                                    else "")


@callback(Output({"type": ALARMS_PICK, "key": ALL}, "value"),
          Input(ALARMS_SELECT_ALL, "n_clicks"), Input(ALARMS_SELECT_NONE, "n_clicks"),
          State({"type": ALARMS_PICK, "key": ALL}, "id"), prevent_initial_call=True)
def select_all(_all: int | None, _none: int | None, ids: list[dict]) -> list[list[str]]:
    """Tick every shown row, or none."""
    if ctx.triggered_id == ALARMS_SELECT_NONE:
        return [[] for _ in ids]
    return [[i["key"]] for i in ids]


def _clicked() -> Any:
    """The id of the pattern-matched button actually clicked (None when the callback fired
    because new buttons were drawn)."""
    fired = ctx.triggered[0] if ctx.triggered else {}
    return ctx.triggered_id if fired.get("value") else None


@callback(Output(ALARMS_EXPANDED, "data"), Input({"type": ALARMS_EXPAND, "key": ALL}, "n_clicks"),
          State(ALARMS_EXPANDED, "data"), prevent_initial_call=True)
def expand(_clicks: list[int | None], expanded: list[str] | None) -> Any:
    """Show or hide the alarms grouped under a parent."""
    clicked = _clicked()
    if clicked is None:
        return no_update
    keys = set(expanded or [])
    keys ^= {clicked["key"]}
    return sorted(keys)


@callback(Output(ALARMS_SORT, "data"), Input({"type": ALARMS_SORT_BY, "col": ALL}, "n_clicks"),
          State(ALARMS_SORT, "data"), prevent_initial_call=True)
def sort_by(_clicks: list[int | None], sort: dict | None) -> Any:
    """Sort by the clicked column; a second click reverses."""
    clicked = _clicked()
    if clicked is None:
        return no_update
    col = clicked["col"]
    sort = sort or {}
    return {"col": col, "desc": not sort.get("desc") if sort.get("col") == col else False}


# -- actions -------------------------------------------------------------------------------
def handle_action(action: str, selected: list[str] | None, reason: str | None,
                  duration_s: float | None, version: int | None) -> tuple[Any, str, Any, Any]:
    """What an action button does: the feedback, its class, the new version and the
    selection without the alarms acted on (``no_update`` when nothing changed). Refused below
    the operator role."""
    try:
        user = auth.require("operator")
    except auth.PermissionDenied as exc:
        return f"Not done: {exc}.", "feedback error", no_update, no_update
    result = service.act(current(), user["name"], action, selected or [], reason=reason or "",
                         duration_s=duration_s)
    if not result.done:
        return result.message, "feedback error", no_update, no_update
    left = [k for k in selected or [] if k not in result.done]
    return (result.message, "feedback ok" if result.ok else "feedback error",
            (version or 0) + 1, left)


@callback(Output(ALARMS_FEEDBACK, "children"), Output(ALARMS_FEEDBACK, "className"),
          Output(ALARMS_VERSION, "data"), Output(ALARMS_SELECTED, "data", allow_duplicate=True),
          Input(ALARMS_ACK, "n_clicks"), Input(ALARMS_SHELVE, "n_clicks"),
          Input(ALARMS_UNSHELVE, "n_clicks"), Input(ALARMS_OOS, "n_clicks"),
          Input(ALARMS_RTS, "n_clicks"),
          State(ALARMS_SELECTED, "data"), State(ALARMS_REASON, "value"),
          State(ALARMS_DURATION, "value"), State(ALARMS_VERSION, "data"),
          prevent_initial_call=True)
def action(_ack: int | None, _shelve: int | None, _unshelve: int | None, _oos: int | None,
           _rts: int | None, selected: list[str] | None, reason: str | None,
           duration_s: float | None, version: int | None) -> tuple[Any, str, Any, Any]:
    """Acknowledge, shelve, unshelve, remove from or return to service the selected alarms."""
    return handle_action(_BUTTON_ACTION[ctx.triggered_id], selected, reason, duration_s,
                         version)


@callback(Output(ALARMS_MODE_FEEDBACK, "children"), Output(ALARMS_MODE_FEEDBACK, "className"),
          Output(ALARMS_VERSION, "data", allow_duplicate=True),
          Input(ALARMS_MODE_APPLY, "n_clicks"), State(ALARMS_MODE_FISHWAY, "value"),
          State(ALARMS_MODE, "value"), State(ALARMS_MODE_REASON, "value"),
          State(ALARMS_VERSION, "data"), prevent_initial_call=True)
def set_mode(_n: int | None, fishway: str, mode: str, reason: str | None,
             version: int | None) -> tuple[Any, str, Any]:
    """Put a fishway into maintenance / out of service or back into operation (operators)."""
    try:
        user = auth.require("operator")
    except auth.PermissionDenied as exc:
        return f"Not done: {exc}.", "feedback error", no_update
    result = service.set_mode(current(), user["name"], fishway, mode, reason or "")
    return (result.message, "feedback ok" if result.ok else "feedback error",
            (version or 0) + 1 if result.done else no_update)


# -- history -------------------------------------------------------------------------------
def _grid(headers: list[str], rows: list[list[Any]], cls: str) -> html.Table:
    return html.Table(className=f"grid-table {cls}", children=[
        html.Thead(html.Tr([html.Th(h) for h in headers])),
        html.Tbody([html.Tr([html.Td(c) for c in row]) for row in rows])])


def _bounds(period: str, start: str | None, end: str | None) -> Any:
    app = current()
    return service.period_bounds(period or "24", start, end, now_utc(), app.site.site.time_zone)


_HIST_COLS = (("time", "Time"), ("alarm", "Alarm"), ("fishway", "Fishway"), ("event", "Event"),
              ("state", "State after"), ("priority", "Priority"), ("value", "Value"),
              ("who", "By"), ("why", "Reason / message"))


@callback(Output(ALARMS_HIST_TABLE, "children"), Output(ALARMS_HIST_NOTE, "children"),
          Input(ALARMS_TABS, "value"), Input(ALARMS_HIST_PERIOD, "value"),
          Input(ALARMS_HIST_FROM, "value"), Input(ALARMS_HIST_TO, "value"),
          Input(ALARMS_HIST_FISHWAY, "value"), Input(ALARMS_HIST_PRIORITY, "value"),
          Input(ALARMS_HIST_RULE, "value"), Input(ALARMS_HIST_STATE, "value"),
          Input(ALARMS_VERSION, "data"))
def history(tab: str, period: str, start: str | None, end: str | None, fishway: str | None,
            priority: str | None, rule: str | None, state: str | None,
            _version: int | None) -> tuple[Any, Any]:
    """The filtered events of the period, newest first."""
    if tab != "history":
        return no_update, no_update
    if auth.current_user() is None:
        return html.P("Sign in to see the alarm history."), ""
    try:
        lo, hi = _bounds(period, start, end)
    except ValueError as exc:
        return no_update, html.Span(str(exc), className="form-error")
    filters = service.HistoryFilters(fishway or "", priority or "", rule or "", state or "")
    rows, total = service.history_rows(current(), lo, hi, filters, now_utc())
    note = (f"{total} events" + (f"; the newest {len(rows)} shown (the CSV has them all)"
                                 if total > len(rows) else ""))
    if not rows:
        return html.P("No alarm events in this period.", className="al-none"), note
    return _grid([h for _, h in _HIST_COLS], [[r[c] for c, _ in _HIST_COLS] for r in rows],
                 "al-history-table"), note


@callback(Output(ALARMS_HIST_DOWNLOAD, "data"), Output(ALARMS_HIST_CSV_NOTE, "children"),
          Input(ALARMS_HIST_CSV, "n_clicks"), State(ALARMS_HIST_PERIOD, "value"),
          State(ALARMS_HIST_FROM, "value"), State(ALARMS_HIST_TO, "value"),
          State(ALARMS_HIST_FISHWAY, "value"), State(ALARMS_HIST_PRIORITY, "value"),
          State(ALARMS_HIST_RULE, "value"), State(ALARMS_HIST_STATE, "value"),
          prevent_initial_call=True)
def export_csv(_n: int | None, period: str, start: str | None, end: str | None,
               fishway: str | None, priority: str | None, rule: str | None,
               state: str | None) -> tuple[Any, str]:
    """The filtered history as a CSV download (UTC times, SI values)."""
    try:
        auth.require("viewer")
        lo, hi = _bounds(period, start, end)
    except (auth.PermissionDenied, ValueError) as exc:
        return no_update, f"Not exported: {exc}"
    filters = service.HistoryFilters(fishway or "", priority or "", rule or "", state or "")
    name, text = service.history_csv(current(), lo, hi, filters)
    return {"content": text, "filename": name, "type": "text/csv"}, f"Exported {name}."


# -- performance ---------------------------------------------------------------------------
@callback(Output(ALARMS_PERF_TABLE, "children"), Output(ALARMS_PERF_RATE, "figure"),
          Output(ALARMS_PERF_TOP, "figure"), Output(ALARMS_PERF_PRIORITY, "figure"),
          Output(ALARMS_PERF_NOTE, "children"),
          Input(ALARMS_TABS, "value"), Input(ALARMS_PERF_PERIOD, "value"),
          Input(ALARMS_PERF_FROM, "value"), Input(ALARMS_PERF_TO, "value"),
          Input(ALARMS_PERF_FISHWAY, "value"))
def performance(tab: str, period: str, start: str | None, end: str | None,
                fishway: str | None) -> tuple[Any, ...]:
    """The performance figures of the period beside their targets, and the three plots."""
    keep = (no_update,) * 4
    if tab != "performance":
        return (*keep, no_update)
    if auth.current_user() is None:
        return (*keep, "Sign in to see the alarm performance.")
    try:
        lo, hi = _bounds(period, start, end)
    except ValueError as exc:
        return (*keep, html.Span(str(exc), className="form-error"))
    app = current()
    view = service.performance_view(app, lo, hi, fishway or None)
    rows = []
    for figure, value, target, meets in view.table:
        mark = {True: "meets", False: "does not meet", None: "see chart"}[meets]
        rows.append(html.Tr(className="al-miss" if meets is False else "", children=[
            html.Td(figure), html.Td(value, className="num"), html.Td(target),
            html.Td(mark, className="al-meets")]))
    table = html.Table(className="grid-table al-perf-table", children=[
        html.Thead(html.Tr([html.Th(h) for h in ("Figure", "This period", "Target", "")])),
        html.Tbody(rows)])
    p = view.perf
    extra = []
    if p.chattering:
        extra.append(html.P("Chattering: " + ", ".join(p.chattering), className="al-miss"))
    if p.stale:
        extra.append(html.P("Stale (active > 24 h): " + ", ".join(p.stale), className="al-miss"))
    tz = app.site.site.time_zone
    note = (f"{p.annunciations} alarms annunciated in {p.periods} ten-minute periods "
            f"({service.local_range_text(lo, hi, tz)}).")
    return ([table, *extra], rate_figure(view.period_starts, view.counts, tz),
            top10_figure(view.top10, p.top10_share_pct, TOP10_TARGET_PCT),
            priority_figure(view.priority), note)

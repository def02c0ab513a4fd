"""Site & settings (``/site``): the fishway configuration as the site file gives it (read only,
display units), the targets, alarm limits and mode in force with a supervisor's editor, the
history of changes, and the accounts.

Every write callback checks the role on the server (``auth.require("supervisor")``) and passes
the signed-in user to the service, which records who made the change
(:mod:`dashboard.services.site`). What users typed is shown as text only.
"""

from __future__ import annotations

from typing import Any

import dash
from dash import Input, Output, State, callback, ctx, dcc, html, no_update

from dashboard import auth
from dashboard.context import current
from dashboard.controls import chosen_fishway
from dashboard.services import overview as overview_service
from dashboard.services import site as service
from dashboard.services.profile import fishway_options
from ops_logic.advisory import ADVISORY_CAUTION

dash.register_page(__name__, path="/site", name="Site & settings", title="Site & settings")

SITE_FISHWAY = "site-fishway"
SITE_CONFIG = "site-config"
SITE_PARAM = "site-param"
SITE_VALUE = "site-value"
SITE_NOTE = "site-note"
SITE_APPLY = "site-apply"
SITE_REVERT = "site-revert"
SITE_MODE = "site-mode"
SITE_MODE_APPLY = "site-mode-apply"
SITE_HINT = "site-hint"
SITE_FEEDBACK = "site-feedback"
SITE_VERSION = "site-version"
SITE_CHANGES = "site-changes"
SITE_USERS = "site-users"
SITE_USER_NAME = "site-user-name"
SITE_USER_ROLE = "site-user-role"
SITE_USER_PASSWORD = "site-user-password"
SITE_USER_PASSWORD2 = "site-user-password2"
SITE_USER_CREATE = "site-user-create"
SITE_USER_FEEDBACK = "site-user-feedback"


def _table(headers: list[str], rows: list[list[str]]) -> html.Table:
    return html.Table(className="grid-table site-table", children=[
        html.Thead(html.Tr([html.Th(h) for h in headers])),
        html.Tbody([html.Tr([html.Td(c) for c in row]) for row in rows])])


def _editor(fishway_id: str) -> html.Section:
    site = current().site
    return html.Section(className="panel site-editor", children=[
        html.H2("Change a target or alarm limit"),
        html.P(ADVISORY_CAUTION, className="caution-box site-caution"),
        html.Label(className="field", children=["Setting", dcc.Dropdown(
            id=SITE_PARAM, options=_param_options(fishway_id), clearable=False,
            placeholder="Choose a target or alarm limit", className="site-param")]),
        html.Div(id=SITE_HINT, className="site-hint"),
        html.Div(className="site-row", children=[
            html.Label(className="field", children=[
                f"New value ({'ft, cfs' if site.site.units == 'us' else 'm, m³/s'} or with a "
                "unit; empty = unset)", dcc.Input(id=SITE_VALUE, type="text", debounce=False,
                                                  className="site-input", maxLength=40)]),
            html.Label(className="field", children=[
                "Note (why)", dcc.Input(id=SITE_NOTE, type="text", maxLength=300,
                                        className="site-input site-note")]),
        ]),
        html.Div(className="actions", children=[
            html.Button("Apply", id=SITE_APPLY, className="primary"),
            html.Button("Back to the site file's value", id=SITE_REVERT)]),
        html.H2("Fishway mode"),
        dcc.RadioItems(id=SITE_MODE, options=[{"label": f" {service.MODE_LABELS[m]}",
                                               "value": m} for m in service.MODES],
                       value=service.effective_site(site, current().engine).modes[fishway_id],
                       className="site-mode"),
        html.Div(className="actions", children=[
            html.Button("Set mode", id=SITE_MODE_APPLY, className="primary")]),
        html.Div(id=SITE_FEEDBACK, className="feedback", role="status"),
    ])


def _users_panel() -> html.Section:
    return html.Section(className="panel site-users", children=[
        html.H2("Accounts"), html.Div(id=SITE_USERS),
        html.H3("New account"),
        html.Div(className="site-row", children=[
            html.Label(className="field", children=["User name", dcc.Input(
                id=SITE_USER_NAME, type="text", maxLength=100, className="site-input")]),
            html.Label(className="field", children=["Role", dcc.Dropdown(
                id=SITE_USER_ROLE, options=list(auth.ROLES), value="operator",
                clearable=False, className="site-role")]),
            html.Label(className="field", children=["Password (8 characters or more)",
                                                    dcc.Input(id=SITE_USER_PASSWORD,
                                                              type="password",
                                                              className="site-input")]),
            html.Label(className="field", children=["Password again", dcc.Input(
                id=SITE_USER_PASSWORD2, type="password", className="site-input")]),
        ]),
        html.Div(className="actions", children=[
            html.Button("Create account", id=SITE_USER_CREATE, className="primary")]),
        html.Div(id=SITE_USER_FEEDBACK, className="feedback", role="status"),
    ])


def layout(fishway: str | None = None, **_: Any) -> Any:
    denied = auth.guard()
    if denied is not None:
        return denied
    ctx = current()
    site = ctx.site
    chosen = chosen_fishway(ctx, fishway)
    supervisor = auth.has_role("supervisor")
    return html.Div(className="site-page", children=[
        dcc.Store(id=SITE_VERSION, data=0),
        html.Div(className="page-head", children=[
            html.H1("Site & settings"),
            dcc.Dropdown(id=SITE_FISHWAY, options=fishway_options(ctx), value=chosen,
                         clearable=False, className="fishway-select"),
            html.Span(f"{site.site.name} · display units "
                      f"{'US customary (ft, cfs)' if site.site.units == 'us' else 'SI'} · "
                      f"time zone {site.site.time_zone}", className="muted")]),
        html.Div(className="site-body", children=[
            html.Div(id=SITE_CONFIG, className="site-config"),
            html.Div(className="site-side", children=[
                _editor(chosen) if supervisor else html.Section(className="panel", children=[
                    html.P("Targets, alarm limits, the fishway mode and accounts are changed "
                           "by supervisors.")]),
                html.Section(className="panel", children=[
                    html.H2("Changes"), html.Div(id=SITE_CHANGES)]),
                _users_panel() if supervisor else html.Div(),
            ]),
        ]),
    ])


def _param_options(fishway_id: str) -> list[dict]:
    app = current()
    eff = service.effective_site(app.site, app.engine)
    units = app.site.site.units
    out = []
    for p in service.parameters(app.site.fishway(fishway_id)):
        if p.group == "Mode":
            continue
        value = service.current_value(eff.fishways[fishway_id], p.key)
        now = "unset" if value is None else service.format_value(value, p.kind, units)
        mark = " (override)" if p.key in eff.overrides[fishway_id] else ""
        out.append({"label": f"{p.group}: {p.label} — {now}{mark}", "value": p.key})
    return out


@callback(
    Output(SITE_CONFIG, "children"),
    Output(SITE_CHANGES, "children"),
    Input(SITE_FISHWAY, "value"),
    Input(SITE_VERSION, "data"),
)
def show(fishway_id: str, _version: int) -> tuple[list, Any]:
    """The configuration of the chosen fishway and the history of changes (read only)."""
    auth.require("viewer")
    app = current()
    eff = service.effective_site(app.site, app.engine)
    sections = []
    for title, (headers, rows) in service.config_tables(app.site, eff, fishway_id).items():
        if title.startswith("Controls and pools"):  # long: folded until asked for
            sections.append(html.Details(className="panel site-section", children=[
                html.Summary(f"{title}: {len(rows)} pools"), _table(headers, rows)]))
            continue
        sections.append(html.Section(className="panel site-section", children=[
            html.H2(title), _table(headers, rows)]))
    if eff.problems:
        sections.insert(0, html.Div(className="panel site-problems", children=[
            html.P(p) for p in eff.problems]))
    rows = service.changes_rows(app.site, app.engine)
    changes = _table(["Time", "Fishway", "Setting", "From", "To", "By", "Note"],
                     [[r["time"], r["fishway"], r["setting"], r["from"], r["to"], r["by"],
                       r["note"]] for r in rows]) if rows else html.P(
        "No change yet: every value is the site file's.", className="muted")
    return sections, changes


@callback(
    Output(SITE_PARAM, "options"),
    Output(SITE_MODE, "value"),
    Input(SITE_FISHWAY, "value"),
    Input(SITE_VERSION, "data"),
    prevent_initial_call=True,  # the layout has them already: no options swapped under a user
)
def editor_options(fishway_id: str, _version: int) -> tuple[list, str]:
    """The editable settings of the chosen fishway with their values in force, and its mode."""
    auth.require("supervisor")
    app = current()
    return _param_options(fishway_id), service.effective_site(app.site,
                                                              app.engine).modes[fishway_id]


@callback(Output(SITE_HINT, "children"), Input(SITE_PARAM, "value"),
          State(SITE_FISHWAY, "value"))
def hint(key: str | None, fishway_id: str) -> str:
    """The site file's value and the unit of the chosen setting."""
    if not key:
        return "Choose a setting."
    auth.require("supervisor")
    app = current()
    p = service.parameter(app.site.fishway(fishway_id), key)
    units = app.site.site.units
    file_value = service.current_value(app.site.fishway(fishway_id), key)
    shown = "unset" if file_value is None else service.format_value(file_value, p.kind, units)
    unit = service.unit_label(p.kind, units)
    return f"Site file: {shown}. Type the new value in {unit or 'the field’s unit'}."


@callback(
    Output(SITE_FEEDBACK, "children"),
    Output(SITE_FEEDBACK, "className"),
    Output(SITE_VERSION, "data"),
    Input(SITE_APPLY, "n_clicks"),
    Input(SITE_REVERT, "n_clicks"),
    Input(SITE_MODE_APPLY, "n_clicks"),
    State(SITE_FISHWAY, "value"),
    State(SITE_PARAM, "value"),
    State(SITE_VALUE, "value"),
    State(SITE_NOTE, "value"),
    State(SITE_MODE, "value"),
    State(SITE_VERSION, "data"),
    prevent_initial_call=True,
)
def change(_apply: int | None, _revert: int | None, _mode: int | None, fishway_id: str,
           key: str | None, value: str | None, note: str | None, mode: str | None,
           version: int | None) -> tuple[str, str, Any]:
    """Apply, revert or set the mode (supervisors only, checked on the server)."""
    action = {SITE_MODE_APPLY: "mode", SITE_REVERT: "revert"}.get(ctx.triggered_id, "apply")
    return handle_change(action, fishway_id, key, value, note, mode, version)


def handle_change(action: str, fishway_id: str, key: str | None, value: str | None,
                  note: str | None, mode: str | None, version: int | None
                  ) -> tuple[str, str, Any]:
    """What :func:`change` does for ``action`` ``apply``, ``revert`` or ``mode``: the
    feedback text, its class and the new version (``no_update`` when nothing changed)."""
    try:
        user = auth.require("supervisor")
        app = current()
        when = overview_service.now()
        if action == "mode":
            message = service.change_setting(app.site, app.engine, user, fishway_id, "mode",
                                             mode or "", now=when, note=(note or "").strip())
        elif not key:
            return "Choose a setting first.", "feedback error", no_update
        elif action == "revert":
            message = service.revert_setting(app.site, app.engine, user, fishway_id, key,
                                             now=when)
        else:
            message = service.change_setting(app.site, app.engine, user, fishway_id, key,
                                             value or "", now=when, note=(note or "").strip())
    except auth.PermissionDenied as exc:
        return f"Not changed: {exc}.", "feedback error", no_update
    except ValueError as exc:
        return f"Not changed: {exc}", "feedback error", no_update
    return f"Changed — {message}. Logged by {user['name']}.", "feedback ok", (version or 0) + 1


@callback(Output(SITE_USERS, "children"), Input(SITE_VERSION, "data"))
def users(_version: int) -> Any:
    """The accounts (supervisors only)."""
    auth.require("supervisor")
    app = current()
    rows = service.users_rows(app.engine, app.site.site.time_zone)
    return _table(["Name", "Role", "Created", "Active"],
                  [[r["name"], r["role"], r["created"], r["active"]] for r in rows])


@callback(
    Output(SITE_USER_FEEDBACK, "children"),
    Output(SITE_USER_FEEDBACK, "className"),
    Output(SITE_VERSION, "data", allow_duplicate=True),
    Output(SITE_USER_PASSWORD, "value"),
    Output(SITE_USER_PASSWORD2, "value"),
    Input(SITE_USER_CREATE, "n_clicks"),
    State(SITE_USER_NAME, "value"),
    State(SITE_USER_ROLE, "value"),
    State(SITE_USER_PASSWORD, "value"),
    State(SITE_USER_PASSWORD2, "value"),
    State(SITE_VERSION, "data"),
    prevent_initial_call=True,
)
def create_account(_n: int | None, name: str | None, role: str | None, password: str | None,
                   again: str | None, version: int | None) -> tuple:
    """Create an account (supervisors only, checked here on the server)."""
    try:
        user = auth.require("supervisor")
        if (password or "") != (again or ""):
            return "Not created: the two passwords differ.", "feedback error", no_update, \
                "", ""
        message = service.add_account(current().engine, user, name or "", role or "",
                                      password or "", now=overview_service.now())
    except auth.PermissionDenied as exc:
        return f"Not created: {exc}.", "feedback error", no_update, "", ""
    except ValueError as exc:
        return f"Not created: {exc}", "feedback error", no_update, "", ""
    return f"Created — {message}.", "feedback ok", (version or 0) + 1, "", ""

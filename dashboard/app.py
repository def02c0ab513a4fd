"""Builds the Dash app: the shell (header, navigation, advisory banner), the pages, sign-in.

Pages live in ``dashboard/pages/``; each registers itself with ``dash.register_page`` and
exposes a ``layout()`` function (no data is loaded at import) that starts with
``auth.guard()`` (except the wall display, which needs no sign-in). Callbacks are thin: parse the
inputs, call a service function (``dashboard/services/``), build figures in
``dashboard/figures.py``. Component ids are constants prefixed by their page.

Colours follow high-performance HMI practice (ANSI/ISA-101): neutral greys; colour only for
abnormal states and alarms (``assets/style.css`` holds the palette).
"""

from __future__ import annotations

import os
import secrets
from pathlib import Path

import dash
from dash import Dash, dcc, html
from sqlalchemy.engine import Engine

from dashboard import auth, ids
from dashboard.context import AppContext, current, install
from ops_logic.advisory import ADVISORY_CAUTION
from ops_logic.ladder import Ladder
from ops_logic.site import Site

__all__ = ["NAV_PAGES", "create_app", "shell"]

NAV_PAGES: list[tuple[str, str]] = [
    ("/", "Overview"),
    ("/profile", "Profile"),
    ("/setpoints", "Setpoints"),
    ("/trends", "Trends"),
    ("/alarms", "Alarms"),
    ("/log", "Operator log"),
    ("/health", "Data health"),
    ("/site", "Site & settings"),
]
"""Navigation order; a page that is not registered is left out of the bar."""


def shell() -> html.Div:
    """The frame around every page: header with site, navigation, user; advisory banner."""
    registered = {p["path"] for p in dash.page_registry.values()}
    try:
        site_name = current().site.site.name
    except RuntimeError:
        site_name = "fishway-ops"
    user = auth.current_user()
    badge: list = ([f"{user['name']} ({user['role']}) · ", html.A("sign out", href="/logout")]
                   if user else [html.A("sign in", href="/login")])
    return html.Div(className="shell", children=[
        dcc.Location(id=ids.URL),
        html.Header(className="topbar", children=[
            html.Div(site_name, className="site-name", id="app-site-name"),
            html.Nav(id=ids.NAV, className="nav", children=[
                dcc.Link(label, href=path, className="nav-link")
                for path, label in NAV_PAGES if path in registered]),
            html.Div(badge, id=ids.USER_BADGE, className="user-badge"),
        ]),
        html.Main(dash.page_container, className="page"),
        html.Footer(ADVISORY_CAUTION, className="advisory"),
    ])


def create_app(site: Site, engine: Engine, *, secret_key: str | None = None,
               wall_only: bool = False) -> Dash:
    """The dashboard for ``site`` reading ``engine``. ``wall_only`` serves the read-only wall
    display alone (no sign-in, nothing can be changed)."""
    ctx = AppContext(site, engine, {f.id: Ladder.from_site(site, f.id) for f in site.fishways},
                     wall_only=wall_only)
    install(ctx)
    app = Dash(
        __name__,
        use_pages=True,
        pages_folder=str(Path(__file__).with_name("pages")),
        assets_folder=str(Path(__file__).with_name("assets")),
        title=f"{site.site.name} — fishway operations",
        suppress_callback_exceptions=True,
        update_title=None,
    )
    server = app.server
    server.secret_key = secret_key or os.environ.get("FISHWAY_SECRET_KEY") or secrets.token_hex(32)
    auth.install(server, engine, wall_only=wall_only)
    app.layout = shell
    # Claim the pages' callbacks now: Dash hands its global callback list to whichever app
    # serves a request first, which goes wrong when a process builds more than one app.
    with server.test_request_context("/"):
        app._setup_server()  # Dash does this on the first request
    return app

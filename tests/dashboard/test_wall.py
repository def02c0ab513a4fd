"""Wall display (dashboard/pages/wall.py): no sign-in, nothing that writes, large few numbers;
the ``wall_only`` app (``fishway dashboard --wall``) serves it alone and refuses every write."""
from __future__ import annotations

import sys
import urllib.request
from datetime import UTC, datetime, timedelta

import pytest
import sqlalchemy as sa
from dash import dcc, html

from dashboard import context
from dashboard.services import overview as service

SEED_END = datetime(2026, 7, 15, 12, 0, tzinfo=UTC)  # as in tests/dashboard/conftest.py
WRITING = (dcc.Input, dcc.Textarea, dcc.Dropdown, dcc.RadioItems, dcc.Checklist, dcc.Slider,
           dcc.DatePickerSingle, dcc.Upload, html.Button, html.Form, html.Select, html.Textarea)


def _walk(node):
    if isinstance(node, list | tuple):
        for n in node:
            yield from _walk(n)
        return
    if node is None or isinstance(node, str | int | float):
        return
    yield node
    yield from _walk(getattr(node, "children", None))


@pytest.fixture
def restore_context():
    """Creating an app installs its context globally: put the previous one back afterwards."""
    saved = context._current
    yield
    context._current = saved


@pytest.fixture
def wall_app(live_server, seeded_engine, demo_site, restore_context):
    """A wall-only app on the seeded database. The session's live server is asked first, so
    it has taken its callbacks before this app's pages register theirs again."""
    from dashboard.app import create_app

    urllib.request.urlopen(f"{live_server}/login").close()
    return create_app(demo_site, seeded_engine, secret_key="wall-test", wall_only=True)


@pytest.fixture
def wall_page(wall_app, monkeypatch):
    monkeypatch.setattr(service, "now", lambda: SEED_END + timedelta(seconds=20))
    return sys.modules["pages.wall"]


def test_the_wall_needs_no_sign_in_and_has_nothing_that_writes(wall_page):
    layout = wall_page.layout()  # no request, no session
    nodes = list(_walk(layout))
    assert not [type(n).__name__ for n in nodes if isinstance(n, WRITING)]
    assert "Sign in" not in str(layout)
    tiles = [n for n in nodes if getattr(n, "className", "") == "wall-tile"]
    assert len(tiles) == 2  # the demo site's two fishways


def test_wall_refresh_reads_without_a_session(wall_page, demo_site):
    items = [n.id for n in _walk(wall_page.layout()) if isinstance(getattr(n, "id", None), dict)]
    texts, classes = wall_page.refresh(1, items)
    by_key = dict(zip((i["key"] for i in items), texts, strict=True))
    cls = dict(zip((i["key"] for i in items), classes, strict=True))
    for f in demo_site.fishways:
        assert by_key[f"{f.id}.state"] in service.STATE_LABELS.values()
        assert cls[f"{f.id}.state"].startswith("wall-state")
        assert by_key[f"{f.id}.age"] == "data 20 s old"
        assert by_key[f"{f.id}.alarms"] == "no alarm data"  # the seeded database has none
        assert by_key[f"{f.id}.worst"]  # the worst criterion, in words
    assert by_key["site.time"] == "04:00"  # 12:00 UTC in Etc/GMT+8


@pytest.mark.parametrize("path", ["/", "/site", "/health", "/alarms", "/login"])
def test_wall_only_app_sends_every_page_to_the_wall(wall_app, path):
    client = wall_app.server.test_client()
    r = client.get(path)
    assert r.status_code == 302 and r.headers["Location"].endswith("/wall")
    assert client.get("/wall").status_code == 200


def test_wall_only_app_refuses_a_write_callback(wall_app, seeded_engine):
    """The site page's change callback, posted straight to Dash's route, changes nothing:
    nobody can sign in on a wall-only server, and a callback request without a session for
    anything but the wall is refused before any callback runs (the callback would also check
    the role itself)."""
    client = wall_app.server.test_client()
    client.get("/wall")
    body = {
        "output": "..site-feedback.children...site-feedback.className...site-version.data..",
        "outputs": [{"id": "site-feedback", "property": "children"},
                    {"id": "site-feedback", "property": "className"},
                    {"id": "site-version", "property": "data"}],
        "inputs": [{"id": "site-apply", "property": "n_clicks", "value": 1},
                   {"id": "site-revert", "property": "n_clicks", "value": None},
                   {"id": "site-mode-apply", "property": "n_clicks", "value": None}],
        "changedPropIds": ["site-apply.n_clicks"],
        "state": [{"id": "site-fishway", "property": "value", "value": "east"},
                  {"id": "site-param", "property": "value",
                   "value": "targets.entrance_head.max"},
                  {"id": "site-value", "property": "value", "value": "1.4"},
                  {"id": "site-note", "property": "value", "value": ""},
                  {"id": "site-mode", "property": "value", "value": None},
                  {"id": "site-version", "property": "data", "value": 0}],
    }
    r = client.post("/_dash-update-component", json=body)
    assert r.status_code == 403
    with seeded_engine.connect() as conn:
        assert conn.execute(sa.text("SELECT count(*) FROM setting_changes")).scalar() == 0
    assert client.post("/login", data={"name": "sup1", "password": "supervisor-pass-1"}
                       ).headers["Location"].endswith("/wall")


def test_fishway_dashboard_wall_serves_the_wall_only_app(tmp_path, monkeypatch, live_server,
                                                         restore_context):
    import argparse

    from dashboard import commands

    urllib.request.urlopen(f"{live_server}/login").close()  # its callbacks are taken first
    served = {}
    monkeypatch.setattr(commands, "serve", lambda app, host, port, threads: served.update(
        app=app, host=host, port=port))
    parser = argparse.ArgumentParser(prog="fishway")
    commands.register(parser.add_subparsers(dest="command"),
                      argparse.ArgumentParser(add_help=False))  # as dashboard/cli.py does
    args = parser.parse_args(["dashboard", "--wall", "--database",
                              f"sqlite:///{tmp_path / 'wall.sqlite'}"])
    assert commands._dashboard(args) == 0
    assert served["host"] == "127.0.0.1"  # loopback unless told otherwise
    client = served["app"].server.test_client()
    assert client.get("/").headers["Location"].endswith("/wall")
    assert client.get("/wall").status_code == 200

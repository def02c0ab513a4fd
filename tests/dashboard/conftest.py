"""Fixtures of the dashboard tests: a seeded database, accounts, a live server, a browser.

The database holds a few hours of simulated history of the demo site (``simulator``), so
pages have something to show. The live server is the real app served by waitress on a free
loopback port, in a thread. Browser tests drive Debian's Chromium through Playwright (no
browser download: ``/usr/bin/chromium``); screenshots go to ``tests/artifacts/screens/``
(not committed). Without Chromium the browser tests skip — which CI turns into a failure.
"""

from __future__ import annotations

import os
import shutil
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pytest

os.environ.setdefault("FISHWAY_INSECURE_COOKIES", "1")  # plain-http test server

ACCOUNTS = {"op1": ("operator", "operator-pass-1"), "sup1": ("supervisor", "supervisor-pass-1"),
            "view1": ("viewer", "viewer-pass-1")}
SCREENS = Path(__file__).resolve().parents[1] / "artifacts" / "screens"
CHROMIUM = shutil.which("chromium") or "/usr/bin/chromium"
SEED_END = datetime(2026, 7, 15, 12, 0, tzinfo=UTC)
SEED_HOURS = 6
NOW = SEED_END + timedelta(seconds=20)
"""The clock the page tests read the seeded data at."""


@pytest.fixture(scope="session")
def demo_site():
    from ops_logic.site import load_site

    return load_site()


@pytest.fixture(scope="session")
def seeded_engine(tmp_path_factory, demo_site):
    """A migrated SQLite database with SEED_HOURS of 60-second simulated readings and the
    fishway status the ingest would have stored at NOW."""
    from dashboard.auth import create_user
    from db.engine import make_engine
    from db.migrate import upgrade
    from db.readings import store_batch
    from db.site_sync import sync_site
    from db.status import update_status
    from simulator.history import generate_history
    from simulator.plant import Plant

    path = tmp_path_factory.mktemp("dash") / "fishway.sqlite"
    engine = make_engine(sqlite_path=path)
    upgrade(engine)
    ids = sync_site(engine, demo_site)
    start = SEED_END - timedelta(hours=SEED_HOURS)
    plant = Plant(demo_site, start=start, seed=7)
    tags = list(ids)
    for batch in generate_history(plant, tags, start, SEED_END, step_s=60.0):
        store_batch(engine, [(ids[r.tag], r.ts, r.value, 1 if r.source_ok else 9)
                             for r in batch])
    for name, (role, password) in ACCOUNTS.items():
        create_user(engine, name, role, password)
    update_status(demo_site, engine, NOW)  # as the ingest does every cycle
    yield engine
    engine.dispose()


@pytest.fixture(scope="session")
def live_server(seeded_engine, demo_site):
    """Base URL of the dashboard served by waitress in a thread."""
    from dashboard.app import create_app
    from dashboard.commands import serve_in_background

    app = create_app(demo_site, seeded_engine, secret_key="test-secret")
    server = serve_in_background(app, threads=4)
    port = server.effective_port
    yield f"http://127.0.0.1:{port}"
    server.close()


@pytest.fixture(scope="session")
def browser_type_launch_args(browser_type_launch_args):
    if not Path(CHROMIUM).exists():
        pytest.skip("Chromium is not installed (apt-get install chromium chromium-driver)")
    return {**browser_type_launch_args, "executable_path": CHROMIUM,
            "args": ["--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                     "--disable-background-networking", "--disable-component-update",
                     "--disable-sync"]}


@pytest.fixture(scope="session")
def screens() -> Path:
    SCREENS.mkdir(parents=True, exist_ok=True)
    return SCREENS


@pytest.fixture
def engine_copy(seeded_engine, tmp_path):
    """A private copy of the seeded database (sqlite3 backup: WAL content included)."""
    import sqlite3

    from db.engine import make_engine

    path = tmp_path / "copy.sqlite"
    src, dst = sqlite3.connect(seeded_engine.url.database), sqlite3.connect(path)
    with dst:
        src.backup(dst)
    src.close()
    dst.close()
    engine = make_engine(sqlite_path=path)
    yield engine
    engine.dispose()


@pytest.fixture
def app_ctx(monkeypatch, demo_site, engine_copy):
    """The dashboard context on the copy, and the overview's clock at NOW (both restored
    afterwards)."""
    from dashboard import context
    from dashboard.context import AppContext
    from dashboard.services import overview as overview_service
    from ops_logic.ladder import Ladder

    ctx = AppContext(demo_site, engine_copy,
                     {f.id: Ladder.from_site(demo_site, f.id) for f in demo_site.fishways})
    monkeypatch.setattr(context, "_current", ctx)
    monkeypatch.setattr(overview_service, "now", lambda: NOW)
    return ctx


@pytest.fixture(scope="module")
def page_module(seeded_engine, demo_site):
    """``page_module(name)``: the page module ``pages.<name>`` as the app loads it (create_app
    imports the pages), built once per test module; the dashboard context is restored."""
    import sys

    from dashboard import context
    from dashboard.app import create_app

    saved = context._current
    create_app(demo_site, seeded_engine, secret_key="test")
    if saved is not None:
        context.install(saved)
    return lambda name: sys.modules[f"pages.{name}"]


@pytest.fixture
def sign_in(page, live_server):
    """``sign_in(name)`` signs ``page`` in as one of ACCOUNTS and returns it."""

    def do(name: str = "op1"):
        page.goto(f"{live_server}/login")
        page.fill("input[name=name]", name)
        page.fill("input[name=password]", ACCOUNTS[name][1])
        page.click("button[type=submit]")
        page.wait_for_load_state("networkidle")
        return page

    return do

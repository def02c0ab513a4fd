"""Alarms page in headless Chromium: an operator acknowledges an alarm and sees its state
change; a viewer's acknowledgement is refused by the server; the history and performance
tabs draw; the browser console stays free of errors. Screenshots go to the ``screens``
folder.

The page runs on its own server and database (the scenario of ``test_alarms_page``, placed
just before the wall-clock time), so the shared seeded database stays without alarms for the
other pages' tests.
"""

from __future__ import annotations

import sqlite3
import sys
from datetime import UTC, datetime, timedelta

import pytest

from tests.dashboard.conftest import ACCOUNTS
from tests.dashboard.test_alarms_page import build_scenario, make_database

pytestmark = pytest.mark.browser


@pytest.fixture(scope="module")
def alarm_server(tmp_path_factory, demo_site):
    """``(base URL, database path, keys, engine)`` of a dashboard on the scenario database,
    refreshing the active list every 1.5 s (so a test sees a live update)."""
    from dashboard import context
    from dashboard.app import create_app
    from dashboard.commands import serve_in_background

    path = tmp_path_factory.mktemp("alarms-browser") / "alarms.sqlite"
    engine = make_database(path, demo_site)
    keys = build_scenario(engine, demo_site, datetime.now(UTC) - timedelta(minutes=20))
    old = context._current
    app = create_app(demo_site, engine, secret_key="alarm-test")
    app.server.test_client().get("/login")  # this app takes the callbacks now
    page_module = sys.modules["pages.alarms"]
    refresh_ms, page_module.REFRESH_MS = page_module.REFRESH_MS, 1500
    server = serve_in_background(app, threads=4)
    port = server.effective_port
    yield f"http://127.0.0.1:{port}", path, keys, engine
    page_module.REFRESH_MS = refresh_ms
    server.close()
    if old is not None:
        context.install(old)
    engine.dispose()


@pytest.fixture
def console(page):
    """Errors the page logs (console errors and uncaught exceptions)."""
    errors: list[str] = []
    page.on("console", lambda m: errors.append(m.text) if m.type == "error" else None)
    page.on("pageerror", lambda e: errors.append(str(e)))
    return errors


def _open(page, base: str, name: str) -> None:
    page.set_viewport_size({"width": 1600, "height": 1000})
    page.goto(f"{base}/login")
    page.fill("input[name=name]", name)
    page.fill("input[name=password]", ACCOUNTS[name][1])
    page.click("button[type=submit]")
    page.wait_for_load_state("networkidle")
    page.goto(f"{base}/alarms")
    page.wait_for_selector("tr.al-row", timeout=10_000)


def _state(path, key: str) -> str:
    con = sqlite3.connect(path)
    try:
        return con.execute("SELECT state FROM alarms WHERE key = ?", (key,)).fetchone()[0]
    finally:
        con.close()


def test_operator_acknowledges_an_alarm(page, console, alarm_server, screens):
    base, path, keys, _ = alarm_server
    _open(page, base, "op1")
    row = page.locator(f'tr[data-key="{keys["unack"]}"]')
    assert row.locator(".al-state").inner_text() == "Unacknowledged"
    assert "al-unack" in row.get_attribute("class")
    assert page.locator("#alarms-flood").inner_text().startswith("ALARM FLOOD")
    page.screenshot(path=str(screens / "alarms-active.png"), full_page=True)
    row.locator("input[type=checkbox]").check()
    page.wait_for_function("document.querySelector('#alarms-selected-text').innerText"
                           ".startsWith('1 selected')")
    page.click("#alarms-ack")
    page.wait_for_selector("#alarms-feedback.ok", timeout=10_000)
    assert "Acknowledged 1 alarm as op1" in page.locator("#alarms-feedback").inner_text()
    page.wait_for_function(
        f"document.querySelector('tr[data-key=\"{keys['unack']}\"] .al-state')"
        ".innerText === 'Acknowledged'", timeout=10_000)
    assert "op1" in row.locator("td").nth(7).inner_text()
    assert "al-ack" in row.get_attribute("class")
    assert _state(path, keys["unack"]) == "acknowledged"
    page.click(f'tr[data-key="{keys["feed"]}"] .al-expand')
    page.wait_for_selector("tr.al-child", timeout=10_000)
    page.screenshot(path=str(screens / "alarms-acknowledged-grouped.png"), full_page=True)
    assert console == []


def test_viewer_cannot_acknowledge(page, console, alarm_server, screens):
    base, path, keys, _ = alarm_server
    _open(page, base, "view1")
    row = page.locator(f'tr[data-key="{keys["trip"]}"]')
    row.locator("input[type=checkbox]").check()
    page.wait_for_function("document.querySelector('#alarms-selected-text').innerText"
                           ".startsWith('1 selected')")
    page.click("#alarms-ack")
    page.wait_for_selector("#alarms-feedback.error", timeout=10_000)
    text = page.locator("#alarms-feedback").inner_text()
    assert text.startswith("Not done:") and "needs the operator role" in text
    assert row.locator(".al-state").inner_text() == "Unacknowledged"
    assert _state(path, keys["trip"]) == "unacknowledged"
    page.screenshot(path=str(screens / "alarms-viewer-refused.png"), full_page=True)
    assert console == []


def test_history_and_performance_tabs(page, console, alarm_server, screens):
    base, *_ = alarm_server
    _open(page, base, "sup1")
    page.get_by_text("History", exact=True).click()
    page.wait_for_selector(".al-history-table tbody tr", timeout=10_000)
    assert "events" in page.locator("#alarms-hist-note").inner_text()
    with page.expect_download() as download:
        page.click("#alarms-hist-csv")
    assert download.value.suggested_filename.startswith("alarm-history_")
    page.screenshot(path=str(screens / "alarms-history.png"), full_page=True)
    page.get_by_text("Performance", exact=True).click()
    page.wait_for_selector("#alarms-perf-rate .main-svg", timeout=10_000)
    page.wait_for_selector(".al-perf-table tbody tr", timeout=10_000)
    assert page.locator(".al-perf-table").inner_text().count("does not meet") >= 1
    page.screenshot(path=str(screens / "alarms-performance.png"), full_page=True)
    assert console == []


def test_a_change_by_someone_else_is_patched_in_and_keeps_the_selection(page, console,
                                                                        alarm_server,
                                                                        demo_site):
    from db.alarm.service import AlarmService

    base, _path, keys, engine = alarm_server
    _open(page, base, "op1")
    page.click("button.al-sort:has-text('Alarm and message')")  # an order states don't move
    page.wait_for_selector("button.al-sort:has-text('▲')")
    trip = page.locator(f'tr[data-key="{keys["trip"]}"]')
    assert trip.locator(".al-state").inner_text() == "Unacknowledged"
    n_rows = page.locator("tr.al-row").count()
    page.locator(f'tr[data-key="{keys["unack"]}"] input[type=checkbox]').check()
    page.wait_for_function("document.querySelector('#alarms-selected-text').innerText"
                           ".startsWith('1 selected')")
    patches: list[str] = []
    page.on("response", lambda r: patches.append(r.url) if "_dash-update-component" in r.url
            and "__dash_patch_update" in r.text() else None)
    # a supervisor at another console acknowledges the pump trip
    AlarmService(engine, demo_site).acknowledge(keys["trip"], "sup1", "seen on the camera")
    page.wait_for_function(
        f"document.querySelector('tr[data-key=\"{keys['trip']}\"] .al-state').innerText"
        " === 'Acknowledged'", timeout=10_000)
    assert "sup1" in trip.locator("td").nth(7).inner_text()
    assert patches, "the refresh sent the whole table instead of a patch of the changed row"
    assert page.locator("tr.al-row").count() == n_rows
    assert page.locator(f'tr[data-key="{keys["unack"]}"] input[type=checkbox]').is_checked()
    assert page.locator("#alarms-selected-text").inner_text().startswith("1 selected")
    assert console == []

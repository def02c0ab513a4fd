"""The overview, wall display, data health and site & settings pages in headless Chromium
against the live waitress server: they render, fill, refresh with small properties only,
show no console error, and the writes work for supervisors only. Screenshots go to the
``screens`` folder.

The server is the session's ``live_server``; for these tests the dashboard context points at a
private copy of the seeded database (so writes stay here) and the clock at SEED_END + 20 s
(so the seeded readings are fresh). Sign-in still checks the accounts of the seeded database.
"""
from __future__ import annotations

import json
from datetime import UTC, datetime

import pytest

from db.catalog import tags_frame
from db.dashboard_queries import setting_changes_frame

pytestmark = pytest.mark.browser

SEED_END = datetime(2026, 7, 15, 12, 0, tzinfo=UTC)  # as in tests/dashboard/conftest.py
STATES = ("IN CRITERIA", "OUT OF CRITERIA", "OUT OF SERVICE", "MAINTENANCE",
          "NO CURRENT DATA", "MODEL ERROR")


@pytest.fixture
def fresh(live_server, app_ctx):
    """The live server's context on a private copy of the seeded database, its clock at
    SEED_END + 20 s (the dashboard fixtures' ``app_ctx``, made after the server)."""
    return app_ctx


@pytest.fixture
def errors(page):
    """Console errors and uncaught page errors of ``page``."""
    found: list[str] = []
    page.on("console", lambda m: found.append(m.text) if m.type == "error" else None)
    page.on("pageerror", lambda e: found.append(str(e)))
    return found


def _wait_filled(page, selector: str) -> None:
    page.wait_for_function(
        "s => { const e = document.querySelector(s); return e && e.textContent.trim() "
        "&& e.textContent.trim() !== '…'; }", arg=selector, timeout=10_000)


def _by_key(key: str, kind: str = "overview-item") -> str:
    return f"[id='{json.dumps({'key': key, 'type': kind}, separators=(',', ':'))}']"


def test_overview_renders_refreshes_small_and_stays_quiet(fresh, sign_in, live_server, screens,
                                                          errors):
    page = sign_in("op1")
    page.set_viewport_size({"width": 1600, "height": 1000})
    errors.clear()
    page.goto(f"{live_server}/")
    for fid in ("east", "west"):
        _wait_filled(page, _by_key(f"{fid}.state"))
        assert page.inner_text(_by_key(f"{fid}.state")) in STATES
        assert page.inner_text(_by_key(f"{fid}.forebay.value")).endswith(" ft")
        assert page.inner_text(_by_key(f"{fid}.age")) == "data 20 s old"
    page.wait_for_function("document.querySelectorAll('.ov-spark .scatterlayer path').length"
                           " >= 8", timeout=10_000)
    page.screenshot(path=str(screens / "overview.png"), full_page=True)

    # a refresh: only texts, classes and style patches come back; the panels stay the same nodes
    page.evaluate("window.__panel = document.getElementById('overview-panel-east')")
    with page.expect_response(lambda r: "_dash-update-component" in r.url and
                              "overview-refresh" in (r.request.post_data or "")) as got:
        page.evaluate("window.dash_clientside.set_props('overview-refresh', {n_intervals: 99})")
    body = got.value.json()["response"]
    props = {p for component in body.values() for p in component}
    assert props <= {"children", "className", "style"}
    assert all(isinstance(v, str) for c in body.values() for k, v in c.items()
               if k == "children")  # text only: no component trees
    assert page.evaluate("window.__panel === document.getElementById('overview-panel-east')")
    assert errors == []


def test_wall_needs_no_sign_in_and_reads_from_afar(fresh, page, live_server, screens, errors):
    page.set_viewport_size({"width": 1920, "height": 1080})
    page.goto(f"{live_server}/wall")
    _wait_filled(page, _by_key("east.state", "wall-item"))
    assert page.url.endswith("/wall")  # not sent to the sign-in page
    assert page.inner_text(_by_key("east.state", "wall-item")) in STATES
    # nothing to type into or press, and the navigation is hidden
    assert page.locator("input, button, select, textarea").count() == 0
    assert not page.locator(".topbar").is_visible()
    # large type: the state at 56 px, every other text at 22 px or more (28 px base)
    sizes = page.evaluate("""() => [...document.querySelectorAll('.wall *')]
        .filter(e => e.children.length === 0 && e.textContent.trim())
        .map(e => parseFloat(getComputedStyle(e).fontSize))""")
    assert min(sizes) >= 22.0
    state_px = page.evaluate("parseFloat(getComputedStyle(document.querySelector("
                             "'.wall-state')).fontSize)")
    assert state_px >= 56.0
    page.screenshot(path=str(screens / "wall.png"))
    assert errors == []


def test_data_health_lists_every_tag(fresh, sign_in, live_server, screens, errors):
    with fresh.engine.begin() as conn:  # the seeded readings are 60 s apart: no gaps then
        conn.exec_driver_sql("UPDATE tags SET poll_period_s = 60")
    page = sign_in("view1")
    page.set_viewport_size({"width": 1600, "height": 1000})
    errors.clear()
    page.goto(f"{live_server}/health")
    page.wait_for_selector(".health-table tbody tr")
    n_tags = len(tags_frame(fresh.engine))
    assert page.locator("#health-tags tbody tr").count() == n_tags
    assert "No feed has reported yet" in page.inner_text("#health-feeds")
    page.screenshot(path=str(screens / "health.png"), full_page=True)
    page.click("#health-only-problems input")
    page.wait_for_selector("#health-tags .health-none", timeout=10_000)  # no tag has one
    assert page.inner_text("#health-summary").startswith(f"{n_tags} tags, 0 with problems")
    assert errors == []


def test_a_supervisor_changes_a_target_and_a_viewer_cannot(fresh, sign_in, live_server,
                                                          screens, errors):
    page = sign_in("sup1")
    page.set_viewport_size({"width": 1600, "height": 1000})
    errors.clear()
    page.goto(f"{live_server}/site")
    page.wait_for_selector(".site-table")
    page.click("#site-param")
    page.click("[role=option]:has(input[value='targets.entrance_head.max'])")
    page.wait_for_function("document.querySelector('#site-hint').textContent"
                           ".includes('Site file: 1.50 ft')", timeout=10_000)
    page.fill("#site-value", "1.4")
    page.fill("#site-note", "trial <b>season</b>")
    page.click("#site-apply")
    page.wait_for_selector("#site-feedback.ok", timeout=10_000)
    assert "1.50 ft → 1.40 ft" in page.inner_text("#site-feedback")
    page.wait_for_function("document.querySelector('#site-changes').textContent"
                           ".includes('trial <b>season</b>')", timeout=10_000)  # as text
    page.screenshot(path=str(screens / "site.png"), full_page=True)
    change = setting_changes_frame(fresh.engine).iloc[0]
    assert change["set_by"] == "sup1" and change["new_value"] == pytest.approx(1.4 * 0.3048)
    assert errors == []

    page.goto(f"{live_server}/logout")
    page = sign_in("view1")
    page.goto(f"{live_server}/site")
    page.wait_for_selector(".site-table")
    assert page.locator("#site-apply").count() == 0
    assert "changed by supervisors" in page.inner_text(".site-page")
    assert errors == []

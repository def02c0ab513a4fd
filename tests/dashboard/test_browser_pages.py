"""Browser tests of the profile, setpoints, trends and operator log pages (headless Chromium).

Each test signs in, drives a page as an operator would, takes a screenshot into the
``screens`` folder and checks that the browser console holds no error. A year-long trend
runs against a database of its own (a year of five-minute readings of one tag): the chart
must receive at most about two points per pixel column and keep the year's extremes.
"""

from __future__ import annotations

import json
from datetime import UTC, datetime, timedelta

import numpy as np
import pytest

pytestmark = pytest.mark.browser

FT = 0.3048  # m, exact (NIST SP 811; from memory)


@pytest.fixture
def console(page):
    """Errors the page logs (console errors and uncaught exceptions)."""
    errors: list[str] = []
    page.on("console", lambda m: errors.append(f"console: {m.text}") if m.type == "error"
            else None)
    page.on("pageerror", lambda e: errors.append(f"pageerror: {e}"))
    return errors


def _graph_ready(page, graph_id: str) -> None:
    page.wait_for_selector(f"#{graph_id} .main-svg", timeout=15_000)
    page.wait_for_function(
        f"() => {{ const g = document.querySelector('#{graph_id} .js-plotly-plot');"
        " return g && g.data && g.data.length > 0; }", timeout=15_000)


def test_profile_side_view_and_pool_details(sign_in, live_server, screens, console):
    page = sign_in("op1")
    page.set_viewport_size({"width": 1600, "height": 1100})
    page.goto(f"{live_server}/profile")
    _graph_ready(page, "profile-graph")
    page.wait_for_selector(".bullet")
    page.screenshot(path=screens / "profile.png", full_page=True)
    # click the water of pool P10 (bar 10 of the water trace: the forebay is bar 0)
    bar = page.locator("#profile-graph .barlayer .trace").first.locator("path").nth(10)
    box = bar.bounding_box()
    page.mouse.click(box["x"] + box["width"] / 2, box["y"] + box["height"] - 4)
    page.wait_for_selector("#profile-details h2:has-text('Pool P10')", timeout=10_000)
    details = page.inner_text("#profile-details")
    assert "Head on the weir" in details and "Power density" in details
    page.screenshot(path=screens / "profile_pool.png", full_page=True)
    assert console == []


def test_log_an_adjustment_from_the_recommendation(sign_in, live_server, seeded_engine,
                                                   screens, console):
    from db.dashboard_queries import log_entries

    began = datetime.now(UTC) - timedelta(seconds=1)
    page = sign_in("op1")
    page.set_viewport_size({"width": 1600, "height": 1100})
    page.goto(f"{live_server}/setpoints")
    link = page.locator("#setpoints-log-link")
    page.wait_for_function("() => (document.querySelector('#setpoints-log-link') || {})"
                           ".href?.includes('set=')", timeout=15_000)
    _graph_ready(page, "setpoints-whatif-graph")
    page.screenshot(path=screens / "setpoints.png", full_page=True)
    link.click()
    page.wait_for_url("**/log?**")
    page.wait_for_selector("[id*='log-adj-to']")
    prefilled = [v for v in page.eval_on_selector_all(
        "input[id*='log-adj-to']", "els => els.map(e => e.value)") if v]
    assert prefilled, "the recommended change should fill at least one 'to' field"
    assert page.input_value("#log-text").startswith("As recommended")
    page.screenshot(path=screens / "log_prefilled.png", full_page=True)
    page.click("#log-submit")
    page.wait_for_selector("#log-feedback.ok", timeout=10_000)
    assert page.inner_text("#log-feedback").startswith("Adjustment saved")
    page.wait_for_selector(".log-list td:has-text('As recommended')")
    row = page.locator(".log-list tbody tr").first.inner_text()
    assert "op1" in row and "Adjustment" in row
    page.screenshot(path=screens / "log.png", full_page=True)
    stored = log_entries(seeded_engine, start=began, author="op1", kinds=["adjustment"])
    assert len(stored) == len(prefilled)
    assert set(stored["text"]) == {"As recommended on the setpoints page."}
    assert console == []


def test_a_viewer_cannot_write_even_with_a_crafted_request(sign_in, live_server,
                                                           seeded_engine, screens, console):
    from db.dashboard_queries import log_entries

    page = sign_in("op1")
    page.goto(f"{live_server}/log")
    page.wait_for_selector("#log-submit")
    page.check("#log-kind input[value='shift_note']")
    with page.expect_request(lambda r: "_dash-update-component" in r.url
                             and "log-submit" in (r.post_data or "")) as request:
        page.click("#log-submit")  # empty note: refused as incomplete, nothing stored
    page.wait_for_selector("#log-feedback.error")
    body = json.loads(request.value.post_data)
    for state in body["state"]:  # pattern-matching (ALL) states arrive as lists
        if isinstance(state, dict) and state.get("id") == "log-text":
            state["value"] = "written through a crafted request"
    page.goto(f"{live_server}/logout")
    page = sign_in("view1")
    page.goto(f"{live_server}/log")
    page.wait_for_selector("#log-submit")
    assert page.is_disabled("#log-submit")
    assert "read-only" in page.inner_text(".log-form .actions")
    response = page.request.post(f"{live_server}/_dash-update-component",
                                 data=json.dumps(body),
                                 headers={"Content-Type": "application/json"})
    assert response.ok
    reply = response.text()
    assert "Not saved: this needs the operator role; view1 is viewer." in reply
    assert not (log_entries(seeded_engine, text="crafted request")["text"].size)
    page.screenshot(path=screens / "log_viewer.png", full_page=True)
    assert console == []


def test_markup_in_an_entry_is_shown_as_text(sign_in, live_server, screens, console):
    payload = ('<script>window.__pwned = 1</script><b>bold</b>'
               '<img src="x" onerror="window.__pwned = 2">')
    page = sign_in("op1")
    page.goto(f"{live_server}/log")
    page.wait_for_selector("#log-submit")
    page.check("#log-kind input[value='shift_note']")
    page.fill("#log-text", payload)
    page.click("#log-submit")
    page.wait_for_selector("#log-feedback.ok")
    cell = page.locator(".log-entry-text", has_text="window.__pwned = 1").first
    cell.wait_for()
    assert cell.inner_text() == payload  # shown literally
    assert cell.locator("b, img, script").count() == 0
    assert page.evaluate("() => window.__pwned") is None
    page.reload()
    page.locator(".log-entry-text", has_text="window.__pwned = 1").first.wait_for()
    assert page.evaluate("() => window.__pwned") is None
    page.screenshot(path=screens / "log_markup.png", full_page=True)
    assert console == []


def test_trends_screen_and_csv_export(sign_in, live_server, screens, console):
    page = sign_in("op1")
    page.set_viewport_size({"width": 1600, "height": 1000})
    page.goto(f"{live_server}/trends?series=east.forebay_level,east:entrance_head,east.do")
    _graph_ready(page, "trends-graph")
    assert page.evaluate("() => document.querySelector('#trends-graph .js-plotly-plot')"
                         ".data.length") == 3
    page.screenshot(path=screens / "trends.png", full_page=True)
    with page.expect_download() as download:
        page.click("#trends-export")
    text = download.value.path().read_text(encoding="utf-8")
    assert text.startswith("time_site,time_utc,series,value,unit,value_si,flag")
    assert {line.split(",")[2] for line in text.splitlines()[1:]} == {
        "east.forebay_level", "east:entrance_head", "east.do"}
    assert console == []


# -- a year of readings ------------------------------------------------------------------------
YEAR_END = datetime(2026, 7, 15, 12, 0, tzinfo=UTC)
YEAR_PEAK = (YEAR_END - timedelta(days=150, minutes=35), 78.6)


@pytest.fixture
def year_server(tmp_path, demo_site):
    """The dashboard on a database holding a year of five-minute forebay readings (one peak),
    served by waitress; the previous dashboard context is put back afterwards."""
    from dashboard import context
    from dashboard.app import create_app
    from dashboard.auth import create_user
    from dashboard.commands import serve_in_background
    from db.engine import make_engine
    from db.migrate import upgrade
    from db.readings import store_batch
    from db.site_sync import sync_site

    engine = make_engine(sqlite_path=tmp_path / "year.sqlite")
    upgrade(engine)
    tag = sync_site(engine, demo_site)["east.forebay_level"]
    ts = YEAR_END.timestamp() - 365 * 86400 + np.arange(0, 365 * 86400, 300, dtype="float64")
    value = 77.0 + 0.5 * np.sin(ts / 86400.0 * 2 * np.pi / 365.0) + 0.05 * np.sin(ts / 3600.0)
    value[np.searchsorted(ts, YEAR_PEAK[0].timestamp())] = YEAR_PEAK[1]
    rows = [(tag, t, v, 1) for t, v in zip(ts.tolist(), value.tolist(), strict=True)]
    for i in range(0, len(rows), 50_000):
        store_batch(engine, rows[i:i + 50_000])
    create_user(engine, "op9", "operator", "operator-pass-9")
    old = context._current
    app = create_app(demo_site, engine, secret_key="year-secret")
    server = serve_in_background(app, threads=2)
    yield f"http://127.0.0.1:{server.effective_port}"
    server.close()
    if old is not None:
        context.install(old)
    engine.dispose()


def test_a_year_long_trend_gets_at_most_two_points_per_pixel(page, year_server, screens,
                                                             console):
    page.set_viewport_size({"width": 1400, "height": 900})
    page.goto(f"{year_server}/login")
    page.fill("input[name=name]", "op9")
    page.fill("input[name=password]", "operator-pass-9")
    page.click("button[type=submit]")
    page.wait_for_load_state("networkidle")
    page.goto(f"{year_server}/trends?series=east.forebay_level&range=1y")
    _graph_ready(page, "trends-graph")
    got = page.evaluate("""() => {
        const g = document.querySelector('#trends-graph .js-plotly-plot');
        return {n: g.data[0].x.length, width: g._fullLayout._size.w,
                max: Math.max(...g.data[0].y), first: g.data[0].x[0],
                last: g.data[0].x[g.data[0].x.length - 1]};
    }""")
    assert got["n"] > 500  # a year of data, not an empty chart
    assert got["n"] <= 2 * got["width"] + 4, got  # about two points per pixel column at most
    assert got["max"] == pytest.approx(YEAR_PEAK[1] / FT, abs=1e-9)  # the peak is kept
    page.screenshot(path=screens / "trends_year.png", full_page=True)
    # zoom to one day: the chart fetches that day's readings (288 five-minute values)
    page.wait_for_load_state("networkidle")  # the chart's own first relayout has settled
    page.evaluate("""() => {
        const g = document.querySelector('#trends-graph .js-plotly-plot');
        Plotly.relayout(g, {'xaxis.range[0]': '2026-06-01 00:00:00',
                            'xaxis.range[1]': '2026-06-02 00:00:00'});
    }""")
    page.wait_for_selector("#trends-status:has-text('zoomed')", timeout=10_000)
    assert page.evaluate("() => document.querySelector('#trends-graph .js-plotly-plot')"
                         ".data[0].x.length") == 288
    page.screenshot(path=screens / "trends_zoomed.png", full_page=True)
    assert console == []
